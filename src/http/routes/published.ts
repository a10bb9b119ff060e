/**
 * Published layers of a dataset's runs (src/publish/publish.ts), at their own addresses so a
 * public map can point at them: `/v1/datasets/{id}/runs/latest/published/{layer}` and
 * `/v1/datasets/{id}/runs/{run}/published/{layer}`. They follow the dataset's `publish` settings
 * as they are now. Anyone may read them when those settings say `public: true`; otherwise they
 * need a reader key like the exact layers.
 *
 * Published layers are made from the stored points and hotspots layers on the main thread and
 * the last few are kept: a map asks for the same layers again and again.
 */
import type { FastifyInstance } from 'fastify';
import type { LayerName } from '../../run/layers.js';
import { joinPieces } from '../../storage/layer-pieces.js';
import type { Dataset, Run } from '../../storage/store.js';
import { publishLayerTexts, PublishError, resolvePublishOptions, type PublishedLayers } from '../../publish/publish.js';
import { HttpProblem } from '../errors.js';
import { requireDataset, requireRun } from './common.js';

/** Published results kept, by run and publishing settings. */
const KEPT = 8;

export default async function publishedRoutes(app: FastifyInstance): Promise<void> {
  const { store } = app;
  const kept = new Map<string, PublishedLayers>();

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
    const hit = kept.get(cacheKey);
    if (hit) return hit;
    const points = await joinPieces(await store.getRunLayerPieces(run.id, 'points'));
    const hotspots = await joinPieces(await store.getRunLayerPieces(run.id, 'hotspots'));
    if (points === null || hotspots === null) throw new HttpProblem('run-not-ready', `run ${run.id} has no stored result`);
    const layers = publishLayerTexts(points, hotspots, options);
    kept.set(cacheKey, layers);
    if (kept.size > KEPT) kept.delete(kept.keys().next().value!);
    return layers;
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
