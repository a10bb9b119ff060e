/**
 * Published layers as the service serves them: made from a run's stored points and hotspots
 * layers under the dataset's publishing settings as they are now, the last few kept per store (a
 * map or a GIS asks for the same layers again and again). Shared by the published-layer addresses
 * under /v1 and the `<dataset>.published-<kind>` OGC API collections.
 *
 * The service makes them in a job thread with its own store connection (`makePublishedWith`,
 * registered by src/http/routes/published.ts when the store can be opened there); without one
 * (an in-memory database) on the calling thread. Requests for a build under way wait for it
 * rather than starting another; a failed build is forgotten.
 */
import { HttpProblem } from '../http/errors.js';
import { joinPieces } from '../storage/layer-pieces.js';
import type { Dataset, Run, Store } from '../storage/store.js';
import { publishLayerTexts, PublishError, resolvePublishOptions, type PublishedLayers, type PublishOptions } from './publish.js';

/** Published results kept per store, by run and publishing settings. */
const KEPT = 8;

/** Makes a run's published layers; null when the run has no stored points or hotspots layer. */
export type PublishedBuilder = (runId: string, options: PublishOptions) => Promise<PublishedLayers | null>;

const kept = new WeakMap<Store, Map<string, Promise<PublishedLayers | null>>>();
const builders = new WeakMap<Store, PublishedBuilder>();

/** Makes the published layers of this store's runs with `build` (for example in a job thread). */
export function makePublishedWith(store: Store, build: PublishedBuilder): void {
  builders.set(store, build);
}

/** The same on the calling thread. */
async function buildHere(store: Store, runId: string, options: PublishOptions): Promise<PublishedLayers | null> {
  const points = await joinPieces(await store.getRunLayerPieces(runId, 'points'));
  const hotspots = await joinPieces(await store.getRunLayerPieces(runId, 'hotspots'));
  return points === null || hotspots === null ? null : publishLayerTexts(points, hotspots, options);
}

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
  let layers = cache.get(cacheKey);
  if (layers === undefined) {
    const build = builders.get(store);
    const mine = build === undefined ? buildHere(store, run.id, options) : build(run.id, options);
    const forget = (): void => void (cache.get(cacheKey) === mine && cache.delete(cacheKey));
    mine.then((l) => l === null && forget(), forget);
    cache.set(cacheKey, (layers = mine));
    if (cache.size > KEPT) cache.delete(cache.keys().next().value!);
  }
  const done = await layers;
  if (done === null) throw new HttpProblem('run-not-ready', `run ${run.id} has no stored result`);
  return done;
}

/** Whether anyone, without a key, may read the dataset's published layers. */
export function publishedPublicly(dataset: Dataset | null): boolean {
  return dataset !== null && dataset.publish !== null && dataset.publish.public === true;
}
