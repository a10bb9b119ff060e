/**
 * Pages of a stored result layer: the features passing `bbox` and `datetime`, from a cursor (the
 * position of the next feature among those passing), at most `limit` of them. Shared by the
 * result-layer addresses under /v1 and the OGC API collections of result layers.
 */
import type { LayerName } from '../run/layers.js';
import type { Store } from '../storage/store.js';
import { HttpProblem } from '../http/errors.js';
import { LayerIndexCache, matching, type LayerIndex } from './layer-index.js';
import type { ItemsQuery } from './query.js';

const caches = new WeakMap<Store, LayerIndexCache>();

/** The index of a layer text under `key`, cached per store: the key must name text that never changes. */
export async function textIndex(store: Store, key: string, load: () => Promise<string>): Promise<LayerIndex> {
  let cache = caches.get(store);
  if (cache === undefined) caches.set(store, (cache = new LayerIndexCache()));
  return cache.get(key, load);
}

/** The index of a succeeded run's layer, cached per store (runs' layers never change). */
export async function layerIndex(store: Store, runId: string, layer: LayerName): Promise<LayerIndex> {
  return textIndex(store, `${runId}/${layer}`, async () => {
    const pieces = await store.getRunLayerPieces(runId, layer);
    if (pieces === null) throw new HttpProblem('run-not-ready', `run ${runId} has no stored result`);
    const parts: string[] = [];
    for await (const p of pieces) parts.push(p);
    return parts.join('');
  });
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
  const matched = positions === null ? index.features.length : positions.length;
  const end = Math.min(matched, offset + q.limit);
  const features: string[] = [];
  for (let k = offset; k < end; k++) features.push(index.features[positions === null ? k : positions[k]!]!);
  return {
    features,
    matched,
    next: end < matched ? String(end) : null,
    prev: offset > 0 ? String(Math.max(0, offset - q.limit)) : null,
  };
}
