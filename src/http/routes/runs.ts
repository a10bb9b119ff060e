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
import { csvLines, flatGeobufChunks, LAYER_FORMATS, layerColumns, layerFormat, MEDIA_TYPES, type LayerFormat } from '../../ogc/formats.js';
import { layerIndex, layerPage } from '../../ogc/layers.js';
import { parseItemsQuery, parseLimit } from '../../ogc/query.js';
import { etagOf, notModified, sendTagged } from '../conditional.js';
import { resolveRunSettings } from '../../trust/options.js';
import type { LayerName } from '../../run/layers.js';
import { StoreError, type Run } from '../../storage/store.js';
import { DEFAULT_CONFIG } from '../config.js';
import { HttpProblem } from '../errors.js';
import { requireDataset, requireRun, runJson, settingsProblem } from './common.js';

/** What a result-layer address takes: without any, the whole layer as stored. */
const LAYER_PARAMS = ['bbox', 'datetime', 'limit', 'cursor', 'f'];

/** The declared fields of a run's hotspots and centres layers; null for points and noise (their columns follow the observations). */
export function declaredFields(run: Run, layer: LayerName): LayerField[] | null {
  if (layer !== 'hotspots' && layer !== 'centres') return null;
  const hotspots = (run.summary?.['hotspots'] ?? []) as Record<string, unknown>[];
  return hotspotLayerFields(categoryNames(hotspots), trustFieldsOf(hotspots), optionalFieldsOf(hotspots));
}

export interface RunRouteOptions {
  /** layers sent at once; one more GET is answered 503 (default DEFAULT_CONFIG.layerStreams) */
  layerStreams?: number;
  /** runs waiting in the queue beyond which a new one is answered 503 (default DEFAULT_CONFIG.maxQueuedRuns) */
  maxQueuedRuns?: number;
  retryAfterS?: number;
}

export default async function runRoutes(app: FastifyInstance, options: RunRouteOptions = {}): Promise<void> {
  const { store, runner } = app;
  const layerStreams = options.layerStreams ?? DEFAULT_CONFIG.layerStreams;
  const maxQueuedRuns = options.maxQueuedRuns ?? DEFAULT_CONFIG.maxQueuedRuns;
  const retryAfter = { 'retry-after': String(options.retryAfterS ?? DEFAULT_CONFIG.retryAfterS) };
  let streaming = 0;

  /** A layer (or a page of it) as FlatGeobuf or CSV: typed columns, streamed a feature at a time. */
  const sendConverted = async (request: FastifyRequest, run: Run, layer: LayerName, reply: FastifyReply, format: Exclude<LayerFormat, 'geojson'>, q: Parameters<typeof layerPage>[1]) => {
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
    const name = `${run.id}-${layer}.${format}`;
    void reply.header('content-disposition', `inline; filename="${name}"`);
    const body = format === 'fgb' ? Readable.from(flatGeobufChunks(features, columns, layer)) : Readable.from(csvLines(features, columns));
    return reply.type(MEDIA_TYPES[format]).send(body);
  };

  const sendLayer = async (request: FastifyRequest, run: Run, layer: LayerName, reply: FastifyReply) => {
    const query = (request.query ?? {}) as Record<string, unknown>;
    // f names the file format here (geojson, fgb, csv), not the OGC API's json or html
    const { f, ...rest } = query;
    if (f !== undefined && !(LAYER_FORMATS as readonly unknown[]).includes(f)) {
      throw new HttpProblem('invalid-parameter', `f must be one of ${LAYER_FORMATS.join(', ')}, got ${JSON.stringify(f)}`, { parameter: 'f' });
    }
    const q = { ...parseItemsQuery(rest, LAYER_PARAMS), limit: query.limit === undefined ? Number.MAX_SAFE_INTEGER : parseLimit(String(query.limit)) };
    if (run.status !== 'succeeded') throw new HttpProblem('run-not-ready', `run ${run.id} is ${run.status}; layers exist once it has succeeded`);
    void reply.header('x-roost-run', run.id);
    void reply.header('vary', 'Accept');
    const format = layerFormat(f, request.headers.accept);
    if (format !== 'geojson') return sendConverted(request, run, layer, reply, format, q);
    if (Object.keys(query).some((k) => k !== 'f')) {
      // a page of the layer: its features as the run wrote them, with the link to the next page
      const page = layerPage(await layerIndex(store, run.id, layer), q);
      const links = [];
      if (page.next !== null) {
        const next = new URLSearchParams();
        for (const [k, v] of Object.entries(query)) if (k !== 'cursor') next.set(k, String(v));
        next.set('cursor', page.next);
        links.push({ rel: 'next', type: 'application/geo+json', href: `${request.url.split('?')[0]}?${next.toString()}` });
      }
      const text = featureCollectionString(page.features, null, { numberMatched: page.matched, numberReturned: page.features.length, links });
      return sendTagged(request, reply, 'application/geo+json', text, run.finishedAt);
    }
    // a stored layer never changes: the run and layer name it
    if (notModified(request, reply, `"${run.id}.${layer}"`, run.finishedAt)) return reply.code(304).send();
    // a bounded number of layers on their way at once: each holds a store connection and buffers
    if (streaming >= layerStreams) throw new HttpProblem('overloaded', `${layerStreams} layers are being sent already; retry later.`, {}, retryAfter);
    streaming++;
    let held = true;
    const free = (): void => {
      if (held) {
        held = false;
        streaming--;
      }
    };
    reply.raw.once('close', free);
    try {
      // streamed piece by piece as stored: a large layer never becomes one string here
      const pieces = await store.getRunLayerPieces(run.id, layer);
      if (pieces === null) throw new HttpProblem('run-not-ready', `run ${run.id} has no stored result`);
      return await reply.type('application/geo+json').send(Readable.from(pieces, { objectMode: false }));
    } catch (err) {
      free();
      throw err;
    }
  };

  app.post<{ Params: { id: string } }>('/v1/datasets/:id/runs', async (request, reply) => {
    const dataset = await requireDataset(store, request.params.id);
    const fromBody = (request.body as { settings?: Record<string, unknown> }).settings ?? {};
    // dataset defaults, then the body's overrides, then the query string's
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
  });

  app.get<{ Params: { id: string } }>('/v1/datasets/:id/runs', async (request) => {
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
  });

  const latest = async (datasetId: string): Promise<Run> => {
    const dataset = await requireDataset(store, datasetId);
    const run = await store.latestRun(dataset.id);
    if (run === null) throw new HttpProblem('run-not-found', `dataset ${JSON.stringify(dataset.id)} has no succeeded run yet; POST /v1/datasets/${dataset.id}/runs starts one`);
    return run;
  };

  app.get<{ Params: { id: string } }>('/v1/datasets/:id/runs/latest', async (request) => runJson(await latest(request.params.id)));

  app.get<{ Params: { id: string; layer: LayerName } }>('/v1/datasets/:id/runs/latest/:layer', async (request, reply) => {
    return sendLayer(request, await latest(request.params.id), request.params.layer, reply);
  });

  app.get<{ Params: { id: string; run: string } }>('/v1/datasets/:id/runs/:run', async (request) => {
    await requireDataset(store, request.params.id);
    return runJson(await requireRun(store, request.params.id, request.params.run));
  });

  app.get<{ Params: { id: string; run: string; layer: LayerName } }>('/v1/datasets/:id/runs/:run/:layer', async (request, reply) => {
    const layer = request.params.layer;
    await requireDataset(store, request.params.id);
    return sendLayer(request, await requireRun(store, request.params.id, request.params.run), layer, reply);
  });

  app.post<{ Params: { id: string; run: string } }>('/v1/datasets/:id/runs/:run/cancel', async (request) => {
    await requireDataset(store, request.params.id);
    try {
      const run = await runner.cancel(request.params.id, request.params.run);
      if (run === null) await requireRun(store, request.params.id, request.params.run);
      return runJson(run!);
    } catch (err) {
      if (err instanceof StoreError && err.code === 'conflict') throw new HttpProblem('run-finished', `${err.message}; only queued or running runs can be cancelled`);
      throw err;
    }
  });
}
