/**
 * Published layers as the service serves them: made from a run's stored points and hotspots
 * layers under the dataset's publishing settings as they are now, the last few kept per store (a
 * map or a GIS asks for the same layers again and again). Shared by the published-layer addresses
 * under /v1 and the `<dataset>.published-<kind>` OGC API collections.
 */
import { HttpProblem } from '../http/errors.js';
import { joinPieces } from '../storage/layer-pieces.js';
import type { Dataset, Run, Store } from '../storage/store.js';
import { publishLayerTexts, PublishError, resolvePublishOptions, type PublishedLayers } from './publish.js';

/** Published results kept per store, by run and publishing settings. */
const KEPT = 8;

const kept = new WeakMap<Store, Map<string, PublishedLayers>>();

function publishOptionsOf(dataset: Dataset, run: Run) {
  if (dataset.publish === null) {
    throw new HttpProblem('not-published', `dataset ${JSON.stringify(dataset.id)} has no publishing settings; a manager sets them with PATCH /v1/datasets/${dataset.id} {"publish": {...}}`);
  }
  if (run.status !== 'succeeded') throw new HttpProblem('run-not-ready', `run ${run.id} is ${run.status}; layers exist once it has succeeded`);
  try {
    return resolvePublishOptions(dataset.publish, typeof run.settings.count_by === 'string' ? run.settings.count_by : null);
  } catch (err) {
    if (err instanceof PublishError) throw new HttpProblem('not-published', `dataset ${JSON.stringify(dataset.id)} has unusable publishing settings: ${err.message}`);
    throw err;
  }
}

/** The published layers of a succeeded run of `dataset`; 404/409 problems when there are none. */
export async function publishedLayers(store: Store, dataset: Dataset, run: Run): Promise<PublishedLayers> {
  const options = publishOptionsOf(dataset, run);
  let cache = kept.get(store);
  if (cache === undefined) kept.set(store, (cache = new Map()));
  const cacheKey = `${run.id}\u0000${JSON.stringify(options)}`;
  const hit = cache.get(cacheKey);
  if (hit) return hit;
  const points = await joinPieces(await store.getRunLayerPieces(run.id, 'points'));
  const hotspots = await joinPieces(await store.getRunLayerPieces(run.id, 'hotspots'));
  if (points === null || hotspots === null) throw new HttpProblem('run-not-ready', `run ${run.id} has no stored result`);
  const layers = publishLayerTexts(points, hotspots, options);
  cache.set(cacheKey, layers);
  if (cache.size > KEPT) cache.delete(cache.keys().next().value!);
  return layers;
}

/** Whether anyone, without a key, may read the dataset's published layers. */
export function publishedPublicly(dataset: Dataset | null): boolean {
  return dataset !== null && dataset.publish !== null && dataset.publish.public === true;
}
