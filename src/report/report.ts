/**
 * report.html: one run as a single self-contained file, to attach to an e-mail or hand to a
 * board. The map (MapLibre with the offline background), the figures table, the k-distance or
 * reachability plot, the warnings, the cautions, the parameters and the Roost version are all in
 * the file: the script and styles built by Vite (dist/web-report) are inlined, the data is an
 * inline JSON block, and nothing is fetched when it opens.
 */
import { existsSync, readFileSync } from 'node:fs';
import { fileURLToPath } from 'node:url';
import { pointSet, type PointSet } from '../core/types.js';
import { runQuery } from '../jobs/execute.js';
import { resolveClusterPart } from '../trust/options.js';
import { ROOST_VERSION } from '../run/version.js';
import type { LayerName } from '../run/layers.js';
import type { Dataset, Run, Store } from '../storage/store.js';
import { kDistancePreview } from './kdistance.js';
import type { ReportData } from './report-data.js';

/** The built report script, two levels up from src/report and dist/report alike. */
export const REPORT_ASSETS_DIR = fileURLToPath(new URL('../../dist/web-report', import.meta.url));

/** Noise points drawn in a report at most (a report stays small enough to send). */
export const REPORT_MAX_NOISE = 20_000;

export type { ReportData };

export class ReportAssetsMissing extends Error {}

function readAssets(): { js: string; css: string } {
  const js = `${REPORT_ASSETS_DIR}/report.js`;
  const css = `${REPORT_ASSETS_DIR}/report.css`;
  if (!existsSync(js)) throw new ReportAssetsMissing(`the report script has not been built (${js} is missing); run npm run build`);
  return { js: readFileSync(js, 'utf8'), css: existsSync(css) ? readFileSync(css, 'utf8') : '' };
}

/** JSON that is safe inside a <script> element. */
function scriptJson(value: unknown): string {
  return JSON.stringify(value).replace(/</g, '\\u003c').replace(/\u2028/g, '\\u2028').replace(/\u2029/g, '\\u2029');
}

function escapeHtml(s: string): string {
  return s.replace(/[&<>"']/g, (c) => `&#${c.charCodeAt(0)};`);
}

/** The whole report.html text. @throws ReportAssetsMissing when the report script was not built */
export function renderReport(data: ReportData): string {
  const { js, css } = readAssets();
  // nothing may be fetched: a policy that allows no network source at all (blob: and data: are local)
  const csp = "default-src 'none'; script-src 'unsafe-inline' blob: data:; worker-src blob: data:; style-src 'unsafe-inline'; img-src data: blob:; connect-src blob: data:";
  return `<!doctype html>
<html lang="en">
<head>
<meta charset="utf-8">
<meta http-equiv="Content-Security-Policy" content="${csp}">
<meta name="viewport" content="width=device-width, initial-scale=1">
<title>${escapeHtml(data.title)}</title>
<style>${css.replace(/<\/style/gi, '<\\/style')}</style>
</head>
<body>
<div id="report" class="report"><p>This report needs JavaScript to draw its map and charts.</p></div>
<script type="application/json" id="roost-report-data">${scriptJson(data)}</script>
<script>${js.replace(/<\/script/gi, '<\\/script')}</script>
</body>
</html>
`;
}

/** Noise features capped at REPORT_MAX_NOISE. */
function capNoise(noise: { type: string; features: unknown[]; bbox?: unknown }): { noise: unknown; leftOut: number } {
  if (noise.features.length <= REPORT_MAX_NOISE) return { noise, leftOut: 0 };
  return { noise: { ...noise, features: noise.features.slice(0, REPORT_MAX_NOISE) }, leftOut: noise.features.length - REPORT_MAX_NOISE };
}

/** Reachability rows from a points layer that carries optics_order and reachability_m. */
export function reachabilityRows(points: { features: { properties: Record<string, unknown> | null }[] }): [number, number | null, number | null][] | null {
  const rows: [number, number | null, number | null][] = [];
  for (const f of points.features) {
    const p = f.properties ?? {};
    if (typeof p.optics_order !== 'number') return null;
    rows.push([p.optics_order, (p.reachability_m as number | null) ?? null, (p.hotspot_id as number | null) ?? null]);
  }
  return rows.sort((a, b) => a[0] - b[0]);
}

export interface ReportParts {
  title: string;
  dataset: ReportData['dataset'];
  run: ReportData['run'];
  summary: Record<string, unknown>;
  hotspots: string;
  centres: string;
  noise: string;
  /** the points layer text, read for OPTICS runs only */
  points: () => string | Promise<string>;
  /** the clustered observations, for the k-distance curve of DBSCAN runs */
  observations: () => PointSet | Promise<PointSet>;
}

/** Gathers a report's data from a run's layers and summary. */
export async function reportData(parts: ReportParts): Promise<ReportData> {
  const params = (parts.summary.parameters ?? {}) as Record<string, unknown>;
  const { noise, leftOut } = capNoise(JSON.parse(parts.noise) as { type: string; features: unknown[] });
  let kdistance: Record<string, unknown> | null = null;
  let reachability: ReportData['reachability'] = null;
  if (params.method === 'optics') reachability = reachabilityRows(JSON.parse(await parts.points()));
  else kdistance = kDistancePreview(await parts.observations(), Number(params.min_points ?? 5), Number(params.eps));
  return {
    title: parts.title,
    dataset: parts.dataset,
    run: parts.run,
    roost_version: ROOST_VERSION,
    generated_at: new Date().toISOString(),
    summary: parts.summary,
    hotspots: JSON.parse(parts.hotspots),
    centres: JSON.parse(parts.centres),
    noise,
    noise_left_out: leftOut,
    kdistance,
    reachability,
  };
}

/** A stored run's report data. */
export async function reportDataFromStore(store: Store, dataset: Dataset, run: Run): Promise<ReportData> {
  const layer = async (name: LayerName): Promise<string> => (await store.getRunLayer(run.id, name)) ?? '{"type":"FeatureCollection","features":[]}';
  return reportData({
    title: `${dataset.name || dataset.id}: run ${run.id}`,
    dataset: { id: dataset.id, name: dataset.name },
    run: { id: run.id, created_at: run.createdAt, finished_at: run.finishedAt },
    summary: run.summary ?? {},
    hotspots: await layer('hotspots'),
    centres: await layer('centres'),
    noise: await layer('noise'),
    points: () => layer('points'),
    observations: async () => {
      const settings = resolveClusterPart(run.settings);
      const input = await store.loadForRun(dataset.id, runQuery(settings, dataset.window, Date.parse(run.createdAt)));
      return pointSet(input.lon, input.lat);
    },
  });
}
