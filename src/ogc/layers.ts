/**
 * Pages of a stored result layer: the features passing `bbox` and `datetime`, from a cursor (the
 * position of the next feature among those passing), at most `limit` of them. Shared by the
 * result-layer addresses under /v1 and the OGC API collections of result layers.
 */
import { Buffer } from 'node:buffer';
import type { LayerName } from '../run/layers.js';
import type { Store } from '../storage/store.js';
import { HttpProblem } from '../http/errors.js';
import { indexParts, LayerIndexCache, layerIndexFrom, matching, type LayerIndex, type LayerIndexParts } from './layer-index.js';
import type { ItemsQuery } from './query.js';

/** Indexes a layer's bytes, for example in a job thread: the bytes are shared with it, not copied. */
export type LayerIndexer = (bytes: Uint8Array) => Promise<LayerIndexParts>;

const caches = new WeakMap<Store, LayerIndexCache>();
const indexers = new WeakMap<Store, LayerIndexer>();

/** Indexes the layers of this store's runs with `indexer` (the service: in a job thread). */
export function indexLayersWith(store: Store, indexer: LayerIndexer): void {
  indexers.set(store, indexer);
}

/** Bytes in memory that threads share (a SharedArrayBuffer): handing them to a job thread copies nothing. */
function sharedBytes(length: number): Buffer {
  return Buffer.from(new SharedArrayBuffer(Math.max(1, length)), 0, length);
}

/** The index of a layer's bytes: made by the store's indexer when one is set, else on this thread. */
async function indexBytes(store: Store, bytes: Uint8Array): Promise<LayerIndex> {
  const indexer = indexers.get(store);
  return layerIndexFrom(bytes, indexer === undefined ? indexParts(bytes) : await indexer(bytes));
}

/** The index of a layer text under `key`, cached per store: the key must name text that never changes. */
export async function textIndex(store: Store, key: string, load: () => Promise<string>): Promise<LayerIndex> {
  let cache = caches.get(store);
  if (cache === undefined) caches.set(store, (cache = new LayerIndexCache()));
  return cache.get(key, async () => {
    const text = await load();
    const bytes = sharedBytes(Buffer.byteLength(text, 'utf8'));
    bytes.write(text, 'utf8');
    return indexBytes(store, bytes);
  });
}

/** The index of a succeeded run's layer, cached per store (runs' layers never change). */
export async function layerIndex(store: Store, runId: string, layer: LayerName): Promise<LayerIndex> {
  let cache = caches.get(store);
  if (cache === undefined) caches.set(store, (cache = new LayerIndexCache()));
  return cache.get(`${runId}/${layer}`, async () => {
    // the stored bytes, copied once into memory the job thread can read: no string is made here
    const pieces = await store.getRunLayerBytes(runId, layer);
    if (pieces === null) throw new HttpProblem('run-not-ready', `run ${runId} has no stored result`);
    const parts: Buffer[] = [];
    let length = 0;
    for await (const p of pieces) {
      parts.push(p);
      length += p.length;
    }
    const bytes = sharedBytes(length);
    let at = 0;
    for (const p of parts) at += p.copy(bytes, at);
    return indexBytes(store, bytes);
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
