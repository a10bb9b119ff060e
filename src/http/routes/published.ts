/**
 * Published layers of a dataset's runs (src/publish/publish.ts), at their own addresses so a
 * public map can point at them: `/v1/datasets/{id}/runs/latest/published/{layer}` and
 * `/v1/datasets/{id}/runs/{run}/published/{layer}`. They follow the dataset's `publish` settings
 * as they are now. Anyone may read them when those settings say `public: true`; otherwise they
 * need a reader key like the exact layers.
 *
 * Published layers are made from the stored points and hotspots layers in a job thread with its
 * own store connection (on the main thread only for an in-memory database, which threads cannot
 * open), and the last few are kept: a map asks for the same layers again and again. Requests for
 * a build under way wait for it rather than starting another.
 */
import type { FastifyInstance } from 'fastify';
import type { LayerName } from '../../run/layers.js';
import { joinPieces } from '../../storage/layer-pieces.js';
import type { Dataset, Run } from '../../storage/store.js';
import { publishLayerTexts, PublishError, resolvePublishOptions, type PublishedLayers, type PublishOptions } from '../../publish/publish.js';
import { JobQueueFull } from '../../jobs/job-pool.js';
import { DEFAULT_CONFIG } from '../config.js';
import { HttpProblem } from '../errors.js';
import { requireDataset, requireRun } from './common.js';

/** Published results kept, by run and publishing settings. */
const KEPT = 8;

export default async function publishedRoutes(app: FastifyInstance): Promise<void> {
  const { store, storeConfig, jobPool } = app;
  /** builds done or under way, by run and settings (a failed build is forgotten) */
  const kept = new Map<string, Promise<PublishedLayers | null>>();

  const build = async (run: Run, options: PublishOptions): Promise<PublishedLayers | null> => {
    if (storeConfig !== null) {
      try {
        return await jobPool.publish({ store: storeConfig, runId: run.id, options });
      } catch (err) {
        if (err instanceof JobQueueFull) throw new HttpProblem('overloaded', 'Every thread making published layers is busy and the waiting line is full; retry later.', {}, { 'retry-after': String(DEFAULT_CONFIG.retryAfterS) });
        throw err;
      }
    }
    const points = await joinPieces(await store.getRunLayerPieces(run.id, 'points'));
    const hotspots = await joinPieces(await store.getRunLayerPieces(run.id, 'hotspots'));
    return points === null || hotspots === null ? null : publishLayerTexts(points, hotspots, options);
  };

  const publishedOf = async (dataset: Dataset, run: Run): Promise<PublishedLayers> => {
    if (dataset.publish === null) {
      throw new HttpProblem('not-published', `dataset ${JSON.stringify(dataset.id)} has no publishing settings; a manager sets them with PATCH /v1/datasets/${dataset.id} {"publish": {...}}`);
    }
    if (run.status !== 'succeeded') throw new HttpProblem('run-not-ready', `run ${run.id} is ${run.status}; layers exist once it has succeeded`);
    let options;
    try {
      options = resolvePublishOptions(dataset.publish, typeof run.settings.count_by === 'string' ? run.settings.count_by : null);
    } catch (err) {
      if (err instanceof PublishError) throw new HttpProblem('not-published', `dataset ${JSON.stringify(dataset.id)} has unusable publishing settings: ${err.message}`);
      throw err;
    }
    const cacheKey = `${run.id}\u0000${JSON.stringify(options)}`;
    let layers = kept.get(cacheKey);
    if (layers === undefined) {
      layers = build(run, options);
      kept.set(cacheKey, layers);
      if (kept.size > KEPT) kept.delete(kept.keys().next().value!);
      const mine = layers;
      const forget = (): void => void (kept.get(cacheKey) === mine && kept.delete(cacheKey));
      mine.then((l) => l === null && forget(), forget);
    }
    const done = await layers;
    if (done === null) throw new HttpProblem('run-not-ready', `run ${run.id} has no stored result`);
    return done;
  };

  app.get<{ Params: { id: string; layer: LayerName } }>('/v1/datasets/:id/runs/latest/published/:layer', async (request, reply) => {
    const layer = request.params.layer;
    const dataset = await requireDataset(store, request.params.id);
    const run = await store.latestRun(dataset.id);
    if (run === null) throw new HttpProblem('run-not-found', `dataset ${JSON.stringify(dataset.id)} has no succeeded run yet`);
    const layers = await publishedOf(dataset, run);
    return reply.type('application/geo+json').header('x-roost-run', run.id).send(layers[layer]);
  });

  app.get<{ Params: { id: string; run: string; layer: LayerName } }>('/v1/datasets/:id/runs/:run/published/:layer', async (request, reply) => {
    const layer = request.params.layer;
    const dataset = await requireDataset(store, request.params.id);
    const run = await requireRun(store, dataset.id, request.params.run);
    const layers = await publishedOf(dataset, run);
    return reply.type('application/geo+json').header('x-roost-run', run.id).send(layers[layer]);
  });
}
