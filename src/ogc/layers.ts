/**
 * Pages of a stored result layer: the features passing `bbox` and `datetime`, from a cursor (the
 * position of the next feature among those passing), at most `limit` of them. Shared by the
 * result-layer addresses under /v1 and the OGC API collections of result layers.
 */
import { Buffer } from 'node:buffer';
import type { LayerName } from '../run/layers.js';
import type { Store } from '../storage/store.js';
import { HttpProblem } from '../http/errors.js';
import { layerCacheOf, type LayerIndexer } from './layer-cache.js';
import { matching, type LayerIndex } from './layer-index.js';
import type { ItemsQuery } from './query.js';

export type { LayerIndexer } from './layer-cache.js';

const indexers = new WeakMap<Store, LayerIndexer>();

/** Indexes the layers of this store's runs with `indexer` (the service: in a job thread). */
export function indexLayersWith(store: Store, indexer: LayerIndexer): void {
  indexers.set(store, indexer);
}

/** The index of a layer text under `key`, kept with the store's layers: the key must name text that never changes. */
export async function textIndex(store: Store, key: string, load: () => Promise<string>): Promise<LayerIndex> {
  return layerCacheOf(store).index(key, async () => [Buffer.from(await load(), 'utf8')], indexers.get(store));
}

/** The index of a succeeded run's layer, kept with the store's layers (src/ogc/layer-cache.ts; runs' layers never change). */
export async function layerIndex(store: Store, runId: string, layer: LayerName): Promise<LayerIndex> {
  return layerCacheOf(store).index(`${runId}/${layer}`, async () => {
    // the stored bytes as they are: no string is made here
    const pieces = await store.getRunLayerBytes(runId, layer);
    if (pieces === null) throw new HttpProblem('run-not-ready', `run ${runId} has no stored result`);
    return pieces;
  }, indexers.get(store));
}

export interface LayerPage {
  /** feature texts of this page */
  features: string[];
  /** features passing the filter */
  matched: number;
  /** cursor of the next page, null on the last */
  next: string | null;
  /** cursor of the previous page, null on the first */
  prev: string | null;
}

/** Reads a layer cursor: the position among the matching features, as written by layerPage. */
function cursorOffset(cursor: string | null): number {
  if (cursor === null) return 0;
  const n = /^\d{1,9}$/.test(cursor) ? Number(cursor) : NaN;
  if (!Number.isInteger(n)) throw new HttpProblem('invalid-parameter', `cursor ${JSON.stringify(cursor)} is not one this service wrote; follow the "next" link`, { parameter: 'cursor' });
  return n;
}

export function layerPage(index: LayerIndex, q: Pick<ItemsQuery, 'bbox' | 'datetime' | 'limit' | 'cursor'>): LayerPage {
  const offset = cursorOffset(q.cursor);
  const positions = matching(index, q);
  const matched = positions === null ? index.count : positions.length;
  const end = Math.min(matched, offset + q.limit);
  const features: string[] = [];
  for (let k = offset; k < end; k++) features.push(index.feature(positions === null ? k : positions[k]!));
  return {
    features,
    matched,
    next: end < matched ? String(end) : null,
    prev: offset > 0 ? String(Math.max(0, offset - q.limit)) : null,
  };
}
