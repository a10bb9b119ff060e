/**
 * Published layers of a dataset's runs (src/publish/publish.ts), at their own addresses so a
 * public map can point at them: `/v1/datasets/{id}/runs/latest/published/{layer}` and
 * `/v1/datasets/{id}/runs/{run}/published/{layer}`. They follow the dataset's `publish` settings
 * as they are now. Anyone may read them when those settings say `public: true`; otherwise they
 * need a reader key like the exact layers.
 *
 * Published layers are made from the stored points and hotspots layers in a job thread with its
 * own store connection (on the main thread only for an in-memory database, which threads cannot
 * open), and the last few are kept (src/publish/served.ts): a map asks for the same layers again
 * and again. The OGC API's published collections are made the same way.
 */
import type { FastifyInstance } from 'fastify';
import type { LayerName } from '../../run/layers.js';
import { JobQueueFull } from '../../jobs/job-pool.js';
import { makePublishedWith, publishedLayers } from '../../publish/served.js';
import { DEFAULT_CONFIG } from '../config.js';
import { HttpProblem } from '../errors.js';
import { requireDataset, requireRun } from './common.js';

export default async function publishedRoutes(app: FastifyInstance): Promise<void> {
  const { store, storeConfig, jobPool } = app;
  if (storeConfig !== null) {
    makePublishedWith(store, async (runId, options) => {
      try {
        return await jobPool.publish({ store: storeConfig, runId, options });
      } catch (err) {
        if (err instanceof JobQueueFull) throw new HttpProblem('overloaded', 'Every thread making published layers is busy and the waiting line is full; retry later.', {}, { 'retry-after': String(DEFAULT_CONFIG.retryAfterS) });
        throw err;
      }
    });
  }
  const publishedOf = (dataset: Parameters<typeof publishedLayers>[1], run: Parameters<typeof publishedLayers>[2]) => publishedLayers(store, dataset, run);

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
