/**
 * Sensitivity of a DBSCAN result to its parameters: the same observations clustered at every pair
 * of an eps list and a min_points list, with for each pair the number of hotspots, the noise share,
 * and the adjusted Rand index (Hubert & Arabie 1985) with its neighbours on the grid (the next
 * eps at the same min_points, the next min_points at the same eps). Where neighbouring ARIs stay
 * near 1 the result does not hang on the exact choice; where they drop, it does.
 *
 * For the ARI every observation counts and noise is one more group, so observations moving
 * between a hotspot and noise lower it as much as those moving between hotspots.
 *
 * One neighbour index is built per eps and reused for every min_points; the labels of one eps row
 * are kept to compare with the next, so memory is (number of min_points values + 1) × n labels.
 */
import { dbscan } from '../core/dbscan.js';
import { SphereIndex } from '../core/sphere-index.js';
import type { PointSet } from '../core/types.js';
import { MAX_EPS_METERS } from '../run/settings.js';
import { agreement } from './validation.js';

/** Most values on one axis of the grid. */
export const MAX_SWEEP_VALUES = 20;
/** Most settings (eps × min_points pairs) in one sweep. */
export const MAX_SWEEP_SETTINGS = 100;

/** A list of sweep values that cannot be used; `parameter` names it (eps or min_points). */
export class SweepError extends Error {
  constructor(
    readonly parameter: string,
    message: string,
  ) {
    super(`${parameter}: ${message}`);
    this.name = 'SweepError';
  }
}

export interface SweepGrid {
  /** ascending, distinct, metres */
  epsMeters: number[];
  /** ascending, distinct */
  minPoints: number[];
}

export interface SweepSetting {
  epsMeters: number;
  minPoints: number;
  hotspots: number;
  clustered: number;
  noise: number;
  noiseShare: number;
  /** ARI with the result at the next larger eps and the same min_points; null on the last eps */
  ariNextEps: number | null;
  /** ARI with the result at the next larger min_points and the same eps; null on the last min_points */
  ariNextMinPoints: number | null;
}

/**
 * Parses one axis: a comma-separated list (`100,150,250`) or a range `start:stop:step` (both ends
 * included when the steps reach them), or an array of such values. Sorted and made distinct.
 */
export function parseSweepValues(parameter: 'eps' | 'min_points', raw: unknown): number[] {
  const parts: string[] = [];
  for (const item of Array.isArray(raw) ? raw : [raw]) {
    if (typeof item === 'number') parts.push(String(item));
    else if (typeof item === 'string') parts.push(...item.split(','));
    else throw new SweepError(parameter, `must be a list such as 100,150,250 or a range such as 100:300:50, got ${JSON.stringify(raw)}`);
  }
  const integer = parameter === 'min_points';
  const [min, max] = integer ? [1, 1_000_000] : [0, MAX_EPS_METERS];
  const check = (text: string, v: number): number => {
    if (!Number.isFinite(v)) throw new SweepError(parameter, `${JSON.stringify(text)} is not a number; give a list such as ${integer ? '3,5,10' : '100,150,250'} or a range such as ${integer ? '3:12:3' : '100:300:50'}`);
    if (integer && !Number.isInteger(v)) throw new SweepError(parameter, `must be whole numbers, got ${v}`);
    if (integer ? v < min : v <= min) throw new SweepError(parameter, `values must be ${integer ? 'at least 1' : 'greater than 0'}, got ${v}`);
    if (v > max) throw new SweepError(parameter, `values must be at most ${max}, got ${v}`);
    return v;
  };
  const values: number[] = [];
  for (const part of parts.map((p) => p.trim())) {
    if (part === '') continue;
    const range = part.split(':');
    if (range.length === 1) {
      values.push(check(part, Number(part)));
      continue;
    }
    if (range.length !== 3) throw new SweepError(parameter, `a range is start:stop:step, got ${JSON.stringify(part)}`);
    const [start, stop, step] = range.map((r) => Number(r.trim()));
    check(range[0], start);
    check(range[1], stop);
    if (!(step > 0) || !Number.isFinite(step) || (integer && !Number.isInteger(step))) throw new SweepError(parameter, `the step of ${JSON.stringify(part)} must be a ${integer ? 'whole ' : ''}number above 0`);
    if (stop < start) throw new SweepError(parameter, `the range ${JSON.stringify(part)} ends before it starts`);
    const count = Math.floor((stop - start) / step + 1e-9) + 1;
    if (count > MAX_SWEEP_VALUES) throw new SweepError(parameter, `the range ${JSON.stringify(part)} has ${count} values; at most ${MAX_SWEEP_VALUES} per axis`);
    // values computed from the start (not by adding steps), rounded to 9 significant figures, so 0.1-steps stay clean
    for (let k = 0; k < count; k++) values.push(Number((start + k * step).toPrecision(9)));
  }
  const out = [...new Set(values)].sort((a, b) => a - b);
  if (out.length === 0) throw new SweepError(parameter, 'is required: a list such as 100,150,250 or a range such as 100:300:50');
  if (out.length > MAX_SWEEP_VALUES) throw new SweepError(parameter, `has ${out.length} values; at most ${MAX_SWEEP_VALUES} per axis`);
  return out;
}

/** Checks the grid's size. */
export function sweepGrid(epsRaw: unknown, minPointsRaw: unknown): SweepGrid {
  const grid = { epsMeters: parseSweepValues('eps', epsRaw), minPoints: parseSweepValues('min_points', minPointsRaw) };
  const settings = grid.epsMeters.length * grid.minPoints.length;
  if (settings > MAX_SWEEP_SETTINGS) {
    throw new SweepError('eps', `${grid.epsMeters.length} eps values × ${grid.minPoints.length} min_points values make ${settings} settings; at most ${MAX_SWEEP_SETTINGS} in one sweep — use fewer values or a coarser step`);
  }
  return grid;
}

export interface SweepHooks {
  /** after each setting: settings done, of total */
  onProgress?: (done: number, total: number, setting: { epsMeters: number; minPoints: number }) => void;
  signal?: AbortSignal;
}

/** Clusters `points` with DBSCAN at every setting of the grid, eps rows in ascending order. */
export function sweep(points: PointSet, grid: SweepGrid, hooks: SweepHooks = {}): SweepSetting[] {
  const { epsMeters, minPoints } = grid;
  const total = epsMeters.length * minPoints.length;
  const out: SweepSetting[] = new Array(total);
  let previousRow: Int32Array[] | null = null;
  let done = 0;
  for (let e = 0; e < epsMeters.length; e++) {
    hooks.signal?.throwIfAborted();
    const index = new SphereIndex(points, epsMeters[e]);
    const row: Int32Array[] = [];
    for (let m = 0; m < minPoints.length; m++) {
      hooks.signal?.throwIfAborted();
      const c = dbscan(points, { epsMeters: epsMeters[e], minPoints: minPoints[m], index });
      let noise = 0;
      for (let i = 0; i < points.n; i++) if (c.labels[i] < 0) noise++;
      row.push(c.labels);
      out[e * minPoints.length + m] = {
        epsMeters: epsMeters[e],
        minPoints: minPoints[m],
        hotspots: c.count,
        clustered: points.n - noise,
        noise,
        noiseShare: points.n === 0 ? 0 : noise / points.n,
        ariNextEps: null,
        ariNextMinPoints: null,
      };
      if (m > 0) out[e * minPoints.length + m - 1].ariNextMinPoints = agreement(row[m - 1], c.labels).adjustedRandIndex;
      if (previousRow !== null) out[(e - 1) * minPoints.length + m].ariNextEps = agreement(previousRow[m], c.labels).adjustedRandIndex;
      hooks.onProgress?.(++done, total, { epsMeters: epsMeters[e], minPoints: minPoints[m] });
    }
    previousRow = row;
  }
  return out;
}
