/**
 * /v1/datasets/{id}/runs: starting runs on stored observations (202 + Location; the runner does
 * the work), listing them, reading one, cancelling one, and serving the stored result layers as
 * they were saved (no recomputation). `/runs/latest` and `/runs/latest/{layer}` always name the
 * newest succeeded run, so a GIS can pull one URL every morning.
 */
import { Readable } from 'node:stream';
import type { FastifyInstance, FastifyReply, FastifyRequest } from 'fastify';
import { featureCollectionString } from '../../geometry/geojson.js';
import { categoryNames, hotspotLayerFields, optionalFieldsOf, trustFieldsOf, type LayerField } from '../../geometry/layer-fields.js';
import { csvLines, flatGeobufChunks, layerColumns, layerFormat, MEDIA_TYPES } from '../../ogc/formats.js';
import { layerIndex, layerPage } from '../../ogc/layers.js';
import { parseBbox, parseDatetime, type ItemsQuery } from '../../ogc/query.js';
import { addVary, etagOf, notModified, sendTagged } from '../conditional.js';
import { resolveRunSettings } from '../../trust/options.js';
import type { LayerName } from '../../run/layers.js';
import { StoreError, type Run, type Store } from '../../storage/store.js';
import type { Runner } from '../../jobs/runner.js';
import { DEFAULT_CONFIG } from '../config.js';
import { HttpProblem } from '../errors.js';
import { layerCacheOf } from '../../ogc/layer-cache.js';
import { requireDataset, requireRun, runJson, settingsProblem } from './common.js';

export interface RunRouteOptions {
  /** layers sent at once; one more GET is answered 503 (default DEFAULT_CONFIG.layerStreams) */
  layerStreams?: number;
  /** runs waiting in the queue beyond which a new one is answered 503 (default DEFAULT_CONFIG.maxQueuedRuns) */
  maxQueuedRuns?: number;
  retryAfterS?: number;
}

/**
 * The layers being sent whole at once, across the run routes: each holds a store connection and
 * buffers, so one more than `limit` is answered 503.
 */
class LayerStreams {
  private sending = 0;
  constructor(
    private readonly limit: number,
    private readonly retryAfter: Record<string, string>,
  ) {}

  /** Takes a place, or answers 503; the returned function gives it back (once, however often it is called). */
  take(): () => void {
    if (this.sending >= this.limit) throw new HttpProblem('overloaded', `${this.limit} layers are being sent already; retry later.`, {}, this.retryAfter);
    this.sending++;
    let held = true;
    return () => {
      if (held) {
        held = false;
        this.sending--;
      }
    };
  }
}

/** A layer address's query, the schema having checked its names and types: bbox and datetime read on the sphere and the calendar; no limit is the whole layer. */
function layerQuery(query: Record<string, unknown>): Pick<ItemsQuery, 'bbox' | 'datetime' | 'limit' | 'cursor'> {
  const cursor = query.cursor as string | undefined;
  return {
    bbox: query.bbox === undefined ? null : parseBbox(String(query.bbox)),
    datetime: query.datetime === undefined ? null : parseDatetime(String(query.datetime)),
    limit: (query.limit as number | undefined) ?? Number.MAX_SAFE_INTEGER,
    cursor: cursor === undefined || cursor === '' ? null : cursor,
  };
}

/** A page of a layer: its features as the run wrote them, with the link to the next page. */
async function sendLayerPage(store: Store, request: FastifyRequest, reply: FastifyReply, run: Run, layer: LayerName, q: ReturnType<typeof layerQuery>) {
  const page = layerPage(await layerIndex(store, run.id, layer), q);
  const links = [];
  if (page.next !== null) {
    const next = new URLSearchParams();
    for (const [k, v] of Object.entries((request.query ?? {}) as Record<string, unknown>)) if (k !== 'cursor') next.set(k, String(v));
    next.set('cursor', page.next);
    links.push({ rel: 'next', type: 'application/geo+json', href: `${request.url.split('?')[0]}?${next.toString()}` });
  }
  const text = featureCollectionString(page.features, null, { numberMatched: page.matched, numberReturned: page.features.length, links });
  return sendTagged(request, reply, 'application/geo+json', text, run.finishedAt);
}

/** A whole layer, streamed piece by piece as stored (or as kept in memory): a large layer never becomes one string here. */
async function sendWholeLayer(store: Store, streams: LayerStreams, request: FastifyRequest, reply: FastifyReply, run: Run, layer: LayerName) {
  // a stored layer never changes: the run and layer name it
  if (notModified(request, reply, `"${run.id}.${layer}"`, run.finishedAt)) return reply.code(304).send();
  const free = streams.take();
  reply.raw.once('close', free);
  try {
    // the stored bytes as they are: no string is decoded here only to be encoded again for the socket
    const pieces = await layerCacheOf(store).pieces(store, run.id, layer);
    if (pieces === null) throw new HttpProblem('run-not-ready', `run ${run.id} has no stored result`);
    return await reply.type('application/geo+json').send(Readable.from(pieces, { objectMode: false }));
  } catch (err) {
    free();
    throw err;
  }
}

/** The declared fields of a run's hotspots and centres layers; null for points and noise (their columns follow the observations). */
export function declaredFields(run: Run, layer: LayerName): LayerField[] | null {
  if (layer !== 'hotspots' && layer !== 'centres') return null;
  const hotspots = (run.summary?.['hotspots'] ?? []) as Record<string, unknown>[];
  return hotspotLayerFields(categoryNames(hotspots), trustFieldsOf(hotspots), optionalFieldsOf(hotspots));
}

/** A layer (or a page of it) as FlatGeobuf or CSV: typed columns, streamed a feature at a time; the next page in a Link header. */
async function sendLayerFile(store: Store, request: FastifyRequest, reply: FastifyReply, run: Run, layer: LayerName, format: 'fgb' | 'csv', q: ReturnType<typeof layerQuery>) {
  const query = (request.query ?? {}) as Record<string, unknown>;
  // a stored layer never changes: the run, the layer, the format and the query name the answer
  const tag = etagOf(JSON.stringify([run.id, layer, format, Object.entries(query).filter(([k]) => k !== 'f').sort()]));
  if (notModified(request, reply, tag, run.finishedAt)) return reply.code(304).send();
  const page = layerPage(await layerIndex(store, run.id, layer), q);
  if (page.next !== null) {
    const next = new URLSearchParams();
    for (const [k, v] of Object.entries(query)) if (k !== 'cursor') next.set(k, String(v));
    next.set('cursor', page.next);
    void reply.header('link', `<${request.url.split('?')[0]}?${next.toString()}>; rel="next"`);
  }
  void reply.header('x-roost-number-matched', String(page.matched));
  const features = page.features.map((t) => JSON.parse(t) as Parameters<typeof layerColumns>[0][number]);
  const columns = layerColumns(features, declaredFields(run, layer));
  void reply.header('content-disposition', `inline; filename="${run.id}-${layer}.${format}"`);
  const body = format === 'fgb' ? Readable.from(flatGeobufChunks(features, columns, layer)) : Readable.from(csvLines(features, columns));
  return reply.type(MEDIA_TYPES[format]).send(body);
}

/** A result layer of a run: a page when the address has a query, else the whole layer as stored; FlatGeobuf or CSV when asked by `f` or Accept. */
async function sendLayer(store: Store, streams: LayerStreams, request: FastifyRequest, reply: FastifyReply, run: Run, layer: LayerName) {
  const query = (request.query ?? {}) as Record<string, unknown>;
  const q = layerQuery(query);
  if (run.status !== 'succeeded') throw new HttpProblem('run-not-ready', `run ${run.id} is ${run.status}; layers exist once it has succeeded`);
  void reply.header('x-roost-run', run.id);
  addVary(reply, 'Accept');
  // f names the file format here (geojson, fgb, csv; the route schema checks it), not the OGC API's json or html
  const format = layerFormat(query.f, request.headers.accept);
  if (format !== 'geojson') return sendLayerFile(store, request, reply, run, layer, format, q);
  if (Object.keys(query).some((k) => k !== 'f')) return sendLayerPage(store, request, reply, run, layer, q);
  return sendWholeLayer(store, streams, request, reply, run, layer);
}

/** POST /v1/datasets/{id}/runs: the dataset's settings, then the body's overrides, then the query string's. */
function startRunHandler(store: Store, runner: Runner, maxQueuedRuns: number, retryAfter: Record<string, string>) {
  return async (request: FastifyRequest<{ Params: { id: string } }>, reply: FastifyReply) => {
    const dataset = await requireDataset(store, request.params.id);
    const fromBody = (request.body as { settings?: Record<string, unknown> }).settings ?? {};
    const settings: Record<string, unknown> = { ...dataset.settings, ...fromBody, ...((request.query ?? {}) as Record<string, unknown>) };
    for (const [k, v] of Object.entries(settings)) if (v === null) delete settings[k];
    try {
      resolveRunSettings(settings);
    } catch (err) {
      settingsProblem(err);
    }
    // a bounded queue: a client asking for runs in a loop cannot pile up work (or rows) without end
    const waiting = await store.countRuns('queued');
    if (waiting >= maxQueuedRuns) throw new HttpProblem('overloaded', `${waiting} runs wait in the queue already; retry later.`, {}, retryAfter);
    const run = await store.createRun({ datasetId: dataset.id, settings, trigger: 'request' });
    runner.wake();
    return reply.code(202).header('location', `/v1/datasets/${dataset.id}/runs/${run.id}`).send(runJson(run));
  };
}

/** GET /v1/datasets/{id}/runs */
function listRunsHandler(store: Store) {
  return async (request: FastifyRequest<{ Params: { id: string } }>) => {
    const query = (request.query ?? {}) as Record<string, unknown>;
    const dataset = await requireDataset(store, request.params.id);
    const limit = (query.limit as number | undefined) ?? 20;
    let page;
    try {
      page = await store.listRuns(dataset.id, { limit, cursor: query.cursor === undefined ? undefined : String(query.cursor) });
    } catch (err) {
      if (err instanceof StoreError && err.code === 'invalid') throw new HttpProblem('invalid-parameter', err.message, { parameter: 'cursor' });
      throw err;
    }
    return {
      runs: page.runs.map(runJson),
      next: page.nextCursor === null ? null : `/v1/datasets/${dataset.id}/runs?limit=${limit}&cursor=${page.nextCursor}`,
    };
  };
}

/** The newest succeeded run of a dataset, or a 404 saying there is none yet. */
async function latestRun(store: Store, datasetId: string): Promise<Run> {
  const dataset = await requireDataset(store, datasetId);
  const run = await store.latestRun(dataset.id);
  if (run === null) throw new HttpProblem('run-not-found', `dataset ${JSON.stringify(dataset.id)} has no succeeded run yet; POST /v1/datasets/${dataset.id}/runs starts one`);
  return run;
}

/** A run of a dataset, or a 404 for either. */
async function namedRun(store: Store, datasetId: string, runId: string): Promise<Run> {
  await requireDataset(store, datasetId);
  return requireRun(store, datasetId, runId);
}

/** POST /v1/datasets/{id}/runs/{run}/cancel */
function cancelRunHandler(store: Store, runner: Runner) {
  return async (request: FastifyRequest<{ Params: { id: string; run: string } }>) => {
    await requireDataset(store, request.params.id);
    try {
      const run = await runner.cancel(request.params.id, request.params.run);
      if (run === null) await requireRun(store, request.params.id, request.params.run);
      return runJson(run!);
    } catch (err) {
      if (err instanceof StoreError && err.code === 'conflict') throw new HttpProblem('run-finished', `${err.message}; only queued or running runs can be cancelled`);
      throw err;
    }
  };
}

export default async function runRoutes(app: FastifyInstance, options: RunRouteOptions = {}): Promise<void> {
  const { store, runner } = app;
  const retryAfter = { 'retry-after': String(options.retryAfterS ?? DEFAULT_CONFIG.retryAfterS) };
  const streams = new LayerStreams(options.layerStreams ?? DEFAULT_CONFIG.layerStreams, retryAfter);
  type RunParams = { Params: { id: string; run: string } };
  type LayerParams = { Params: { id: string; run?: string; layer: LayerName } };

  app.post('/v1/datasets/:id/runs', startRunHandler(store, runner, options.maxQueuedRuns ?? DEFAULT_CONFIG.maxQueuedRuns, retryAfter));
  app.get('/v1/datasets/:id/runs', listRunsHandler(store));
  app.get<{ Params: { id: string } }>('/v1/datasets/:id/runs/latest', async (request) => runJson(await latestRun(store, request.params.id)));
  app.get<LayerParams>('/v1/datasets/:id/runs/latest/:layer', async (request, reply) => sendLayer(store, streams, request, reply, await latestRun(store, request.params.id), request.params.layer));
  app.get<RunParams>('/v1/datasets/:id/runs/:run', async (request) => runJson(await namedRun(store, request.params.id, request.params.run)));
  app.get<LayerParams & RunParams>('/v1/datasets/:id/runs/:run/:layer', async (request, reply) => {
    return sendLayer(store, streams, request, reply, await namedRun(store, request.params.id, request.params.run), request.params.layer);
  });
  app.post('/v1/datasets/:id/runs/:run/cancel', cancelRunHandler(store, runner));
}
