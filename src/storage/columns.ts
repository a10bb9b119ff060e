/** Growable buffers for a run's input: feature texts packed into a few strings, and typed-array columns. */
import { isUtf8 } from 'node:buffer';
import type { FeatureTexts, RunInput } from './store.js';

/** A typed array of `size` elements that starts with `a`'s. */
export function grown<T extends Float64Array | Int32Array | Uint32Array>(a: T, size: number): T {
  const b = new (a.constructor as new (n: number) => T)(size);
  b.set(a);
  return b;
}

/** Feature texts kept as UTF-8 bytes, as `PackedTexts.lend` hands them to another thread: text i is bytes start[i] to end[i] of chunks[chunk[i]]. */
export interface LentTexts {
  chunks: Uint8Array[];
  chunk: Uint32Array<ArrayBuffer>;
  start: Int32Array<ArrayBuffer>;
  end: Int32Array<ArrayBuffer>;
  length: number;
}

/**
 * Feature texts kept as a few large strings: joined by "\n" (canonical JSON text never holds a
 * raw line break; a chunk whose texts do have one is kept as separate strings instead), as
 * spans of a larger string (PostgreSQL's COPY reader), or as their UTF-8 bytes joined by "\n"
 * (SQLite), which writing the points layer reads without making a string of them (`bytesOf`).
 * `at(i)` cuts one text out on demand.
 */
export class PackedTexts implements FeatureTexts {
  private chunks: (string | Buffer)[] = [];
  /** true while the byte chunks are lent to another thread (see lend) */
  private lent = false;
  /** per text: its chunk, and where it starts and ends in that chunk */
  private chunk = new Uint32Array(1024);
  private start = new Int32Array(1024);
  private end = new Int32Array(1024);
  private loose: string[][] = [];
  length = 0;

  /** Adds `count` texts joined by "\n"; returns false (adding nothing) when the line breaks do not number count − 1. */
  addJoined(joined: string, count: number): boolean {
    if (count === 0) return true;
    this.reserve(count);
    const c = this.chunks.length;
    let from = 0;
    let i = this.length;
    const stop = this.length + count;
    for (;;) {
      const nl = joined.indexOf('\n', from);
      if (i === stop - 1) {
        if (nl !== -1) return false;
        this.place(i, c, from, joined.length);
        break;
      }
      if (nl === -1) return false;
      this.place(i++, c, from, nl);
      from = nl + 1;
    }
    this.chunks.push(joined);
    this.loose.push([]);
    this.length = stop;
    return true;
  }

  /**
   * Adds `count` texts given as UTF-8 bytes joined by "\n", kept as bytes; returns false (adding
   * nothing) when the line breaks do not number count − 1.
   */
  addJoinedBytes(joined: Buffer, count: number): boolean {
    if (count === 0) return true;
    // bytes that are not UTF-8 would be written as they are where their text has U+FFFD
    if (!isUtf8(joined)) return this.addJoined(joined.toString('utf8'), count);
    this.reserve(count);
    const c = this.chunks.length;
    let from = 0;
    for (let i = this.length, stop = this.length + count; i < stop; i++) {
      const nl = joined.indexOf(10, from);
      if ((nl === -1) !== (i === stop - 1)) return false;
      const end = nl === -1 ? joined.length : nl;
      this.place(i, c, from, end);
      from = end + 1;
    }
    this.chunks.push(joined);
    this.loose.push([]);
    this.length += count;
    return true;
  }

  /**
   * Adds `count` texts that are parts of one buffer of UTF-8 bytes, kept as bytes: text k is bytes
   * starts[k] to ends[k]. What lies between them is never handed out. Returns false (adding
   * nothing) when the bytes are not UTF-8.
   */
  addSpanBytes(chunk: Buffer, starts: Int32Array, ends: Int32Array, count: number): boolean {
    if (count === 0) return true;
    if (!isUtf8(chunk)) return false;
    this.addChunk(chunk, starts, ends, count);
    return true;
  }

  /**
   * The texts for another thread, when every one is kept as bytes (null otherwise): the chunks
   * and where each text lies, with the buffers to transfer rather than copy. Until `restore`
   * gives them back no text can be read here (`at` and `bytesOf` throw), so a caller lends them
   * only for a stretch in which it reads none.
   */
  lend(): { texts: LentTexts; transfer: ArrayBuffer[] } | null {
    if (this.lent) throw new Error('the feature texts are lent already');
    if (this.loose.some((l) => l.length > 0) || this.chunks.some((c) => typeof c === 'string')) return null;
    const chunks = this.chunks as Buffer[];
    const n = this.length;
    const texts: LentTexts = { chunks, chunk: this.chunk.subarray(0, n), start: this.start.subarray(0, n), end: this.end.subarray(0, n), length: n };
    const transfer = new Set<ArrayBuffer>([texts.chunk.buffer, texts.start.buffer, texts.end.buffer] as ArrayBuffer[]);
    // a buffer that is a slice of a larger one (Node's pool of small buffers) is copied, not taken from its other users
    for (const c of chunks) if (c.byteOffset === 0 && c.buffer.byteLength === c.length && c.buffer instanceof ArrayBuffer) transfer.add(c.buffer);
    this.lent = true;
    return { texts, transfer: [...transfer] };
  }

  /** Takes back the texts lent (or the other thread's copies of them, the same bytes). */
  restore(texts: LentTexts): void {
    if (!this.lent) throw new Error('the feature texts are not lent');
    if (texts.length !== this.length || texts.chunks.length !== this.chunks.length) throw new Error('the feature texts came back changed');
    this.adopt(texts);
    this.lent = false;
  }

  /** The texts another thread lent (see lend), to read on this one and lend back when done. */
  static fromLent(texts: LentTexts): PackedTexts {
    const p = new PackedTexts();
    p.adopt(texts);
    p.loose = texts.chunks.map(() => []);
    p.length = texts.length;
    return p;
  }

  private adopt(texts: LentTexts): void {
    this.chunks = texts.chunks.map((c) => (Buffer.isBuffer(c) ? c : Buffer.from(c.buffer, c.byteOffset, c.byteLength)));
    this.chunk = texts.chunk;
    this.start = texts.start;
    this.end = texts.end;
  }

  /** The buffer holding text `index` as UTF-8 bytes from byteStart to byteEnd, or null when it is kept as a string. */
  bytesOf(index: number): Buffer | null {
    if (this.lent) throw new Error('the feature texts are lent to another thread');
    const c = this.chunks[this.chunk[index] as number];
    return typeof c === 'string' || c === undefined ? null : c;
  }

  byteStart(index: number): number {
    return this.start[index] as number;
  }

  byteEnd(index: number): number {
    return this.end[index] as number;
  }

  /**
   * Adds `count` texts that are parts of one string: text k is `chunk.slice(starts[k], ends[k])`.
   * What lies between them in the chunk is never handed out.
   */
  addSpans(chunk: string, starts: Int32Array, ends: Int32Array, count: number): void {
    if (count === 0) return;
    this.addChunk(chunk, starts, ends, count);
  }

  /** Keeps `chunk` and places `count` texts in it, text k from starts[k] to ends[k]. */
  private addChunk(chunk: string | Buffer, starts: Int32Array, ends: Int32Array, count: number): void {
    this.reserve(count);
    const c = this.chunks.length;
    for (let k = 0; k < count; k++) this.place(this.length + k, c, starts[k] as number, ends[k] as number);
    this.chunks.push(chunk);
    this.loose.push([]);
    this.length += count;
  }

  /** Reorders the texts: the text at k becomes the one that was at `order[k]` (a permutation of 0..length−1). */
  permute(order: ArrayLike<number>): void {
    if (order.length !== this.length) throw new RangeError(`permutation of ${order.length} for ${this.length} texts`);
    const chunk = new Uint32Array(this.chunk.length);
    const start = new Int32Array(this.start.length);
    const end = new Int32Array(this.end.length);
    for (let k = 0; k < order.length; k++) {
      const i = order[k] as number;
      chunk[k] = this.chunk[i] as number;
      start[k] = this.start[i] as number;
      end[k] = this.end[i] as number;
    }
    this.chunk = chunk;
    this.start = start;
    this.end = end;
  }

  /** Adds texts one by one (for chunks that hold line breaks). */
  addEach(texts: string[]): void {
    this.reserve(texts.length);
    const c = this.chunks.length;
    for (let k = 0; k < texts.length; k++) this.place(this.length + k, c, -1, k);
    this.chunks.push('');
    this.loose.push(texts);
    this.length += texts.length;
  }

  at(index: number): string | undefined {
    if (this.lent) throw new Error('the feature texts are lent to another thread');
    if (!(index >= 0 && index < this.length)) return undefined;
    const c = this.chunk[index] as number;
    const s = this.start[index] as number;
    if (s < 0) return this.loose[c]![this.end[index]!];
    const chunk = this.chunks[c]!;
    return typeof chunk === 'string' ? chunk.slice(s, this.end[index]) : chunk.toString('utf8', s, this.end[index]);
  }

  *[Symbol.iterator](): Iterator<string> {
    for (let i = 0; i < this.length; i++) yield this.at(i) as string;
  }

  private place(i: number, c: number, start: number, end: number): void {
    this.chunk[i] = c;
    this.start[i] = start;
    this.end[i] = end;
  }

  private reserve(more: number): void {
    const need = this.length + more;
    if (need <= this.start.length) return;
    const size = Math.max(need, this.start.length * 2);
    this.chunk = grown(this.chunk, size);
    this.start = grown(this.start, size);
    this.end = grown(this.end, size);
  }
}

/** Run input gathered row by row, in growable columns. */
export class RunColumns {
  private n = 0;
  private weighted = false;
  ids: string[] = [];
  private seq: Float64Array;
  private lon: Float64Array;
  private lat: Float64Array;
  private observedAt: Float64Array;
  private weight: Float64Array;
  constructor(capacity: number) {
    const size = Math.max(16, capacity);
    this.seq = new Float64Array(size);
    this.lon = new Float64Array(size);
    this.lat = new Float64Array(size);
    this.observedAt = new Float64Array(size);
    this.weight = new Float64Array(size);
  }
  /** One row; a time or weight that is null or NaN is absent. */
  row(seq: number, lon: number, lat: number, observedAt: number | null, weight: number | null): void {
    const i = this.n++;
    if (i === this.seq.length) this.grow();
    this.seq[i] = seq;
    this.lon[i] = lon;
    this.lat[i] = lat;
    this.observedAt[i] = observedAt === null ? NaN : observedAt;
    if (weight === null || Number.isNaN(weight)) this.weight[i] = NaN;
    else {
      this.weight[i] = weight;
      this.weighted = true;
    }
  }
  get length(): number {
    return this.n;
  }
  seqs(): Float64Array {
    return this.seq.subarray(0, this.n);
  }
  ascending(): boolean {
    for (let i = 1; i < this.n; i++) if (!(this.seq[i - 1]! < this.seq[i]!)) return false;
    return true;
  }
  /**
   * Puts the rows in seq order and returns the permutation applied (`order[k]` is the old index
   * of the row now at k), or null when they already were. Ids must be set first.
   */
  sortBySeq(): Uint32Array | null {
    if (this.ascending()) return null;
    const n = this.n;
    const seq = this.seq;
    const order = new Uint32Array(n);
    for (let i = 0; i < n; i++) order[i] = i;
    order.sort((a, b) => seq[a]! - seq[b]!);
    const pick = (a: Float64Array): Float64Array => {
      const b = new Float64Array(a.length);
      for (let k = 0; k < n; k++) b[k] = a[order[k]!]!;
      return b;
    };
    this.seq = pick(this.seq);
    this.lon = pick(this.lon);
    this.lat = pick(this.lat);
    this.observedAt = pick(this.observedAt);
    this.weight = pick(this.weight);
    const ids = this.ids;
    const sorted = new Array<string>(n);
    for (let k = 0; k < n; k++) sorted[k] = ids[order[k]!] as string;
    this.ids = sorted;
    return order;
  }
  finish(features: FeatureTexts): RunInput {
    const n = this.n;
    // a view when little is spare: copying would touch as much new memory again
    const cut = (a: Float64Array): Float64Array => (n === a.length ? a : n >= a.length * 0.875 ? a.subarray(0, n) : a.slice(0, n));
    return { ids: this.ids, lon: cut(this.lon), lat: cut(this.lat), observedAt: cut(this.observedAt), weight: this.weighted ? cut(this.weight) : null, features };
  }
  private grow(): void {
    const size = this.seq.length * 2;
    this.seq = grown(this.seq, size);
    this.lon = grown(this.lon, size);
    this.lat = grown(this.lat, size);
    this.observedAt = grown(this.observedAt, size);
    this.weight = grown(this.weight, size);
  }
}
