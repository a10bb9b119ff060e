/**
 * Stored result layers kept in memory, one entry per (run, layer) and per store, for both ways a
 * layer is read: whole (a map or a client polling `runs/latest/points` asks for the same layer
 * again and again; reading it from SQLite each time, a chain of overflow pages, was the largest
 * cost of the main thread under the soak benchmark) and in pages (its index: where each feature
 * is, with its id, box and time span, src/ogc/layer-index.ts). An entry holds the layer's bytes
 * once: as read from the store while it is only sent whole, and once indexed as one buffer in
 * memory that threads share, which the index (made in a job thread) refers to and whole-layer
 * GETs send from then on, so a layer both sent whole and paged is never held twice.
 *
 * The bound is on the bytes held in all (the layers' bytes and their indexes' arrays), least
 * recently used out first: `lru-cache` with `maxSize` and `sizeCalculation` (see DEVELOPERS.md).
 * A whole-layer GET keeps a layer only once it has been read whole and only up to
 * `maxSentBytes`, requests for it at the same time sharing one read; a larger one is streamed
 * from the store piece by piece and let go (an index
 * needs the whole layer anyway and keeps it). A stored layer never changes once its run has
 * succeeded, and run ids are unique within a store, so the run id and layer name its bytes.
 */
import { Buffer } from 'node:buffer';
import { LRUCache } from 'lru-cache';
import type { LayerName } from '../run/layers.js';
import type { Store } from '../storage/store.js';
import { indexParts, layerIndexFrom, type LayerIndex, type LayerIndexParts } from './layer-index.js';

/** Indexes a layer's bytes, for example in a job thread: the bytes are shared with it, not copied. */
export type LayerIndexer = (bytes: Uint8Array) => Promise<LayerIndexParts>;

interface Entry {
  /** the layer's UTF-8 bytes: the pieces as read, or once indexed one buffer in memory that threads share */
  pieces: Buffer[];
  /** their length in all */
  length: number;
  /** its index once made (over the one shared buffer in `pieces`) */
  index: LayerIndex | null;
  /** bytes of the index's own arrays and ids */
  indexBytes: number;
}

/** A whole layer as read for sending: all of it, or (larger than kept) its first pieces and the rest still to read. */
type Loaded = { whole: true; pieces: Buffer[] } | { whole: false; pieces: Buffer[]; rest: AsyncIterable<Buffer> };

/** Bytes in memory that threads share (a SharedArrayBuffer): handing them to a job thread copies nothing. */
function sharedBytes(length: number): Buffer {
  return Buffer.from(new SharedArrayBuffer(Math.max(1, length)), 0, length);
}

/** Pieces joined into one shared buffer. */
function joined(pieces: readonly Uint8Array[], length: number): Buffer {
  const bytes = sharedBytes(length);
  let at = 0;
  for (const p of pieces) {
    bytes.set(p, at);
    at += p.byteLength;
  }
  return bytes;
}

/** The memory an index holds besides the layer's bytes. */
function partsBytes(parts: LayerIndexParts): number {
  return parts.spans.byteLength + parts.idEnds.byteLength + parts.boxes.byteLength + parts.times.byteLength + 2 * parts.ids.length;
}

export class LayerCache {
  private readonly entries: LRUCache<string, Entry>;
  /** whole layers being read for sending, so that requests at the same time read once */
  private readonly loading = new Map<string, Promise<Loaded | null>>();
  /** indexes being made, so that requests at the same time make one */
  private readonly making = new Map<string, Promise<LayerIndex>>();

  constructor(
    readonly maxBytes = 128 * 1024 * 1024,
    readonly maxSentBytes = 32 * 1024 * 1024,
  ) {
    this.entries = new LRUCache<string, Entry>({ maxSize: maxBytes, sizeCalculation: (e) => Math.max(1, e.length + e.indexBytes) });
  }

  /** bytes held now: layers and their indexes */
  get bytes(): number {
    return this.entries.calculatedSize;
  }

  /**
   * A whole stored layer as pieces to send: from memory when kept, else from the store (kept once
   * read whole, when not larger than maxSentBytes); null when the run has no stored result.
   * Requests for a layer being read already wait for that read instead of reading it again (two
   * clients polling the latest layer both miss when a new run succeeds, and each read is
   * synchronous on SQLite's main-thread connection). The shared read is driven by no client, so a
   * slow one holds nobody back; a layer found larger than maxSentBytes is streamed from the store
   * by each request, the first one going on from where the shared read stopped.
   */
  async pieces(store: Store, runId: string, layer: LayerName): Promise<AsyncIterable<Buffer> | Buffer[] | null> {
    const key = `${runId}/${layer}`;
    const hit = this.entries.get(key);
    if (hit !== undefined) return hit.pieces;
    const pending = this.loading.get(key);
    if (pending !== undefined) {
      const loaded = await pending;
      if (loaded === null) return null;
      if (loaded.whole) return loaded.pieces;
      // too large to keep: the waiting request reads its own
      return this.entries.get(key)?.pieces ?? store.getRunLayerBytes(runId, layer);
    }
    const load = this.load(store, runId, layer, key);
    this.loading.set(key, load);
    let loaded: Loaded | null;
    try {
      loaded = await load;
    } finally {
      this.loading.delete(key);
    }
    if (loaded === null) return null;
    if (loaded.whole) return loaded.pieces;
    const { pieces, rest } = loaded;
    return (async function* () {
      yield* pieces;
      yield* rest;
    })();
  }

  /** Reads a layer whole and keeps it, or up to past maxSentBytes (then not kept: the rest is left to read). */
  private async load(store: Store, runId: string, layer: LayerName, key: string): Promise<Loaded | null> {
    const read = await store.getRunLayerBytes(runId, layer);
    if (read === null) return null;
    const iterator = read[Symbol.asyncIterator]();
    const pieces: Buffer[] = [];
    let length = 0;
    for (;;) {
      const next = await iterator.next();
      if (next.done === true) break;
      pieces.push(next.value);
      length += next.value.length;
      if (length > this.maxSentBytes) {
        const rest: AsyncIterable<Buffer> = { [Symbol.asyncIterator]: () => iterator };
        return { whole: false, pieces, rest };
      }
    }
    // kept as read: they are copied into one shared buffer only if the layer is indexed
    if (!this.entries.has(key)) this.entries.set(key, { pieces, length, index: null, indexBytes: 0 });
    return { whole: true, pieces };
  }

  /**
   * The index of the layer under `key`: kept, else made from the bytes kept or from `load` (the
   * layer's pieces as stored), with `indexer` when given (a job thread), else on this thread.
   */
  async index(key: string, load: () => Promise<Iterable<Uint8Array> | AsyncIterable<Uint8Array>>, indexer?: LayerIndexer): Promise<LayerIndex> {
    const hit = this.entries.get(key);
    if (hit?.index) return hit.index;
    const making = this.making.get(key);
    if (making !== undefined) return making;
    const made = (async () => {
      const bytes = hit === undefined ? await this.read(load) : joined(hit.pieces, hit.length);
      const parts = indexer === undefined ? indexParts(bytes) : await indexer(bytes);
      const index = layerIndexFrom(bytes, parts);
      // the pieces give way to the one buffer the index refers to: the layer is held once
      this.entries.set(key, { pieces: [bytes], length: bytes.length, index, indexBytes: partsBytes(parts) });
      return index;
    })();
    this.making.set(key, made);
    try {
      return await made;
    } finally {
      this.making.delete(key);
    }
  }

  private async read(load: () => Promise<Iterable<Uint8Array> | AsyncIterable<Uint8Array>>): Promise<Buffer> {
    const pieces: Uint8Array[] = [];
    let length = 0;
    for await (const p of await load()) {
      pieces.push(p);
      length += p.byteLength;
    }
    return joined(pieces, length);
  }
}

const caches = new WeakMap<Store, LayerCache>();

/** The layer cache of a store (one per store: run ids are unique within one). */
export function layerCacheOf(store: Store): LayerCache {
  let cache = caches.get(store);
  if (cache === undefined) caches.set(store, (cache = new LayerCache()));
  return cache;
}
