/**
 * A sweep over eps × min_points on one input (`roost sweep`, POST /v1/sweep): read, filter, then
 * src/trust/sweep.ts; the answer as a JSON document or as a plain tab-separated table.
 */
import { applyFilter } from '../ingest/filter.js';
import type { InputFormat } from '../ingest/read.js';
import { roundDecimals } from '../geometry/rounding.js';
import { sweep, sweepGrid, type SweepGrid, type SweepHooks, type SweepSetting } from '../trust/sweep.js';
import { resolveSettings, SettingsError, type ClusterSettings } from './settings.js';
import { readInput } from './cluster.js';
import type { PointSet } from '../core/types.js';

/** Settings that do not apply to a sweep (it runs DBSCAN, and draws no hulls). */
export const NOT_FOR_SWEEP = ['method', 'hull', 'concavity', 'count_by', 'optics_max_eps', 'optics_extraction', 'xi', 'min_cluster_size', 'reference', 'validation'] as const;

/**
 * The grid and the other settings of a sweep from parameters named as the API names them (`eps`
 * and `min_points` as lists or ranges). With `partial`, missing eps or min_points are not yet an
 * error (they may still come in a request body).
 * @throws SweepError for a bad grid, SettingsError for a bad or inapplicable setting
 */
export function sweepRequest(params: Record<string, unknown>, partial = false): { grid: SweepGrid | null; settings: ClusterSettings } {
  const { eps, min_points: minPoints, ...rest } = params;
  for (const name of NOT_FOR_SWEEP) {
    if (rest[name] !== undefined) throw new SettingsError(name, 'does not apply to a sweep, which runs DBSCAN at each eps × min_points and draws no hulls; leave it out');
  }
  const settings = resolveSettings({ ...rest, eps: 'auto' });
  if (partial && (eps === undefined || minPoints === undefined)) return { grid: null, settings };
  return { grid: sweepGrid(eps, minPoints), settings };
}

const r6 = (x: number | null): number | null => (x === null ? null : roundDecimals(x, 6));

function settingMembers(s: SweepSetting): Record<string, unknown> {
  return {
    eps_m: s.epsMeters,
    min_points: s.minPoints,
    hotspots: s.hotspots,
    clustered: s.clustered,
    noise: s.noise,
    noise_share: r6(s.noiseShare),
    ari_next_eps: r6(s.ariNextEps),
    ari_next_min_points: r6(s.ariNextMinPoints),
  };
}

/**
 * Reads `input`, applies the settings' filters (time window, where, weight), and sweeps the grid.
 * @returns the answer of POST /v1/sweep and `roost sweep --json`
 */
export function sweepInput(input: Buffer | string, format: InputFormat | undefined, settings: ClusterSettings, grid: SweepGrid, hooks: SweepHooks = {}): Record<string, unknown> {
  const all = readInput(input, format, settings);
  const { observations } = applyFilter(all, { since: settings.since, until: settings.until, where: settings.where });
  return sweepDocument(observations.points, all.points.n - observations.points.n, settings, grid, hooks);
}

/**
 * Sweeps the grid over observations already read and filtered (a stored dataset's, as a run
 * would load them). @returns the answer of POST /v1/sweep and GET /v1/datasets/{id}/sweep
 */
export function sweepDocument(points: PointSet, leftOut: number, settings: ClusterSettings, grid: SweepGrid, hooks: SweepHooks = {}): Record<string, unknown> {
  const rows = sweep(points, grid, hooks);
  return {
    method: 'dbscan',
    observations: points.n,
    left_out_by_filter: leftOut,
    weight: settings.weightProperty,
    eps_m: grid.epsMeters,
    min_points: grid.minPoints,
    ari: 'adjusted Rand index with the next eps at the same min_points (ari_next_eps) and with the next min_points at the same eps (ari_next_min_points); every observation counts, noise as one group',
    settings: rows.map(settingMembers),
  };
}

/** The sweep as a tab-separated table with a header row, one setting per line (for people and for spreadsheets). */
export function sweepTable(doc: Record<string, unknown>): string {
  const rows = doc.settings as Record<string, unknown>[];
  const columns = ['eps_m', 'min_points', 'hotspots', 'noise_share', 'ari_next_eps', 'ari_next_min_points'];
  const cell = (v: unknown): string => (v === null ? '-' : String(v));
  return [columns.join('\t'), ...rows.map((r) => columns.map((c) => cell(r[c])).join('\t'))].join('\n') + '\n';
}
