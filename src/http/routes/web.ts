/**
 * The map page and what it reads beyond the other routes:
 *
 * - `GET /` and `GET /datasets/{id}`: the page (dist/web/index.html, built by Vite), with the
 *   operator's basemap style (--basemap-style) written into it; its scripts and styles from
 *   dist/web/assets through @fastify/static.
 * - `GET /v1/datasets/{id}/k-distance?min_points=&eps=`: the k-distance curve of the stored
 *   observations (the dataset's window and filters applied, as a run would), its knee, and with
 *   `eps` a preview of what DBSCAN would give at that eps: hotspots and noise, before running.
 * - `GET /v1/datasets/{id}/sweep?eps=&min_points=`: the eps × min_points sweep (src/run/sweep.ts)
 *   over the same stored observations, with the dataset's filters and weight.
 * - `GET /v1/datasets/{id}/runs/{run}/report`: the run as one self-contained report.html.
 */
import { existsSync, readFileSync } from 'node:fs';
import { fileURLToPath } from 'node:url';
import fastifyStatic from '@fastify/static';
import type { FastifyInstance, FastifyRequest } from 'fastify';
import { pointSet, type PointSet } from '../../core/types.js';
import { NOT_FOR_SWEEP, sweepDocument, sweepRequest } from '../../run/sweep.js';
import type { ClusterSettings } from '../../run/settings.js';
import type { Dataset, Store } from '../../storage/store.js';
import { SweepError } from '../../trust/sweep.js';
import { runQuery } from '../../jobs/execute.js';
import { kDistancePreview } from '../../report/kdistance.js';
import { renderReport, reportDataFromStore } from '../../report/report.js';
import { resolveClusterPart, splitTrustSettings } from '../../trust/options.js';
import { HttpProblem } from '../errors.js';
import { requireDataset, requireRun, settingsProblem } from './common.js';

/** The built page, two levels up from src/http/routes and dist/http/routes alike. */
/** The observations a run of the dataset would cluster now (its window and conditions), weighed as a run weighs them. */
async function storedPoints(store: Store, dataset: Dataset, settings: ClusterSettings): Promise<PointSet> {
  const input = await store.loadForRun(dataset.id, runQuery(settings, dataset.window, Date.now()));
  let weight: Float64Array | null = null;
  if (settings.weightProperty !== null) {
    // as a run weighs: the property's value when it is a number ≥ 0, else 1
    weight = new Float64Array(input.ids.length);
    for (let i = 0; i < weight.length; i++) {
      const w = (JSON.parse(input.features.at(i) ?? '{}') as { properties?: Record<string, unknown> }).properties?.[settings.weightProperty];
      weight[i] = typeof w === 'number' && w >= 0 ? w : typeof w === 'string' && Number(w) >= 0 ? Number(w) : 1;
    }
  }
  return pointSet(input.lon, input.lat, weight);
}

/** GET /v1/datasets/{id}/sweep: the sweep over the stored observations a run would cluster now. */
function datasetSweepHandler(store: Store) {
  return async (request: FastifyRequest<{ Params: { id: string } }>): Promise<Record<string, unknown>> => {
    const query = (request.query ?? {}) as Record<string, unknown>;
    const dataset = await requireDataset(store, request.params.id);
    // the dataset's settings that a sweep takes (filters, weight), then the query's
    const own = Object.fromEntries(Object.entries(splitTrustSettings(dataset.settings).clustering).filter(([k]) => !(NOT_FOR_SWEEP as readonly string[]).includes(k) && k !== 'eps' && k !== 'min_points'));
    let asked: ReturnType<typeof sweepRequest>;
    try {
      asked = sweepRequest({ ...own, ...query });
    } catch (err) {
      if (err instanceof SweepError) throw new HttpProblem('invalid-parameter', err.message, { parameter: err.parameter });
      settingsProblem(err);
    }
    const { grid, settings } = asked;
    return sweepDocument(await storedPoints(store, dataset, settings), 0, settings, grid!);
  };
}

export const WEB_DIR = fileURLToPath(new URL('../../../dist/web', import.meta.url));

export interface WebRouteOptions {
  /** a MapLibre style URL for the page's background; '' uses the built-in offline background */
  basemapStyle: string;
}

function escapeAttr(s: string): string {
  return s.replace(/[&<>"']/g, (c) => `&#${c.charCodeAt(0)};`);
}

/**
 * The page's Content-Security-Policy: its own scripts, styles and map worker, inline styles (the
 * charts' SVG and the legend's swatches carry them), images from data: and blob: (map icons), and
 * requests to this service only; with an operator's basemap style, its host and any https: host
 * too, since a style names its tiles, glyphs and sprites wherever they are.
 */
export function pagePolicy(basemapStyle: string): string {
  const outside = basemapStyle === '' ? '' : /^https?:/i.test(basemapStyle) ? ` ${new URL(basemapStyle).origin} https:` : '';
  return [
    "default-src 'self'",
    "script-src 'self'",
    "worker-src 'self' blob:",
    "style-src 'self' 'unsafe-inline'",
    `img-src 'self' data: blob:${outside}`,
    `connect-src 'self'${outside}`,
    "font-src 'self'",
    "object-src 'none'",
    "base-uri 'none'",
    "frame-ancestors 'self'",
  ].join('; ');
}

export default async function webRoutes(app: FastifyInstance, options: WebRouteOptions): Promise<void> {
  const store = app.store;
  const indexPath = `${WEB_DIR}/index.html`;
  const built = existsSync(indexPath);
  const page = built
    ? readFileSync(indexPath, 'utf8').replace('<meta name="roost-basemap-style" content="" />', `<meta name="roost-basemap-style" content="${escapeAttr(options.basemapStyle)}" />`)
    : null;
  if (built) {
    await app.register(fastifyStatic, { root: `${WEB_DIR}/assets`, prefix: '/assets/', decorateReply: false, immutable: true, maxAge: '365d' });
  }
  const csp = pagePolicy(options.basemapStyle);
  const sendPage = async (_request: unknown, reply: import('fastify').FastifyReply) => {
    if (page === null) throw new HttpProblem('not-found', 'The map page has not been built; run `npm run build` (npm ci does it) and restart the service.');
    return reply.type('text/html; charset=utf-8').header('cache-control', 'no-cache').header('content-security-policy', csp).send(page);
  };
  app.get('/', sendPage);
  app.get('/datasets/:id', sendPage);

  app.get<{ Params: { id: string } }>('/v1/datasets/:id/k-distance', async (request) => {
    const query = (request.query ?? {}) as Record<string, unknown>;
    const dataset = await requireDataset(store, request.params.id);
    let settings;
    try {
      settings = resolveClusterPart({ ...dataset.settings, eps: query.eps ?? 'auto', ...(query.min_points === undefined ? {} : { min_points: query.min_points }) });
    } catch (err) {
      settingsProblem(err);
    }
    const points = await storedPoints(store, dataset, settings);
    return kDistancePreview(points, settings.minPoints, settings.epsAuto ? null : settings.epsMeters);
  });

  app.get<{ Params: { id: string } }>('/v1/datasets/:id/sweep', datasetSweepHandler(store));

  app.get<{ Params: { id: string; run: string } }>('/v1/datasets/:id/runs/:run/report', async (request, reply) => {
    const dataset = await requireDataset(store, request.params.id);
    const run = await requireRun(store, dataset.id, request.params.run);
    if (run.status !== 'succeeded') throw new HttpProblem('run-not-ready', `run ${run.id} is ${run.status}; a report exists once it has succeeded`);
    const html = renderReport(await reportDataFromStore(store, dataset, run));
    return reply
      .type('text/html; charset=utf-8')
      .header('content-disposition', `attachment; filename="report-${dataset.id}-${run.id}.html"`)
      .send(html);
  });
}
