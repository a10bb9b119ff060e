/**
 * What both engines share: argument checks, cursors, run ids and the ingest classification
 * (which records are new, duplicate, replaced or conflicting), so that the two engines differ only
 * in their SQL.
 */
import type {
  ApiKey,
  AuditPage,
  AuditRecord,
  DatasetPatch,
  NewApiKey,
  NewAuditRecord,
  FeatureTexts,
  IngestOptions,
  IngestResult,
  NewDataset,
  NewRun,
  ObservationPage,
  ObservationQuery,
  ObservationRecord,
  RunInput,
  RunPatch,
  RunResult,
  RunStatus,
  WhereCondition,
} from './store.js';
import { LAYER_NAMES, type LayerName } from '../run/layers.js';
import { RUN_STATUSES, RUN_TRIGGERS, StoreError } from './store.js';
import { contentProblem, textFault } from '../ingest/limits.js';

/** A new dataset's id: URL-safe, starting with a letter or digit (so never "." or ".."). */
const NEW_DATASET_ID = /^[A-Za-z0-9][A-Za-z0-9._~-]{0,127}$/;
/** Ids datasets created before that rule may have; anything else names no dataset. */
const DATASET_ID = /^[A-Za-z0-9._~-]{1,128}$/;

/** @throws StoreError 'invalid' when the id is not 1–128 URL-safe characters starting with a letter or digit */
export function checkDatasetId(id: string): void {
  if (typeof id !== 'string' || !NEW_DATASET_ID.test(id)) {
    throw new StoreError('invalid', `dataset id ${JSON.stringify(id)} must be 1 to 128 characters from A-Z a-z 0-9 . _ ~ -, starting with a letter or digit`);
  }
}

/**
 * Whether the text can name a dataset at all. Lookups with anything else find nothing without a
 * query (a NUL, for one, cannot even be sent to PostgreSQL).
 */
export function canBeDatasetId(id: string): boolean {
  return typeof id === 'string' && DATASET_ID.test(id);
}

/** Whether the text can be sent to either database as it is (no NUL, no lone surrogate). */
export function plainText(s: string): boolean {
  return typeof s === 'string' && textFault(s) === null;
}

function isPlainObject(v: unknown): v is Record<string, unknown> {
  return typeof v === 'object' && v !== null && !Array.isArray(v);
}

/** Checks the fields a new dataset or a patch carries. @throws StoreError 'invalid' */
export function checkDatasetFields(d: DatasetPatch | NewDataset): void {
  if (d.name !== undefined && (typeof d.name !== 'string' || d.name.trim() === '')) throw new StoreError('invalid', 'dataset name must be a non-empty string');
  // every text member, nested ones included, must be storable on both engines
  const content = contentProblem({ name: d.name, settings: d.settings, id_property: d.idProperty, window: d.window, schedule: d.schedule, webhook: d.webhook }, true);
  if (content !== null) throw new StoreError('invalid', `the dataset: ${content.message}`);
  if (d.settings !== undefined && !isPlainObject(d.settings)) throw new StoreError('invalid', 'dataset settings must be a JSON object, for example {"eps": 250, "min_points": 5}');
  if (d.idProperty !== undefined && d.idProperty !== null && (typeof d.idProperty !== 'string' || d.idProperty === '')) throw new StoreError('invalid', 'idProperty must be a property name or null');
  if (d.window !== undefined && d.window !== null && (typeof d.window !== 'string' || d.window === '')) throw new StoreError('invalid', 'window must be an ISO 8601 duration such as "P30D", or null');
  if (d.schedule !== undefined && d.schedule !== null && (!isPlainObject(d.schedule) || typeof d.schedule.cron !== 'string' || typeof d.schedule.timezone !== 'string')) {
    throw new StoreError('invalid', 'schedule must be {"cron": "...", "timezone": "..."} or null');
  }
  if (d.publish !== undefined && d.publish !== null && !isPlainObject(d.publish)) throw new StoreError('invalid', 'publish must be a JSON object or null');
  if (d.webhook !== undefined && d.webhook !== null && (!isPlainObject(d.webhook) || typeof d.webhook.url !== 'string' || typeof d.webhook.secret !== 'string')) {
    throw new StoreError('invalid', 'webhook must be {"url": "...", "secret": "..."} or null');
  }
}

/** @throws StoreError 'invalid' naming the first malformed record (a caller bug: the ingest layer checks input first) */
export function checkRecords(records: ObservationRecord[]): void {
  if (!Array.isArray(records)) throw new StoreError('invalid', 'records must be an array');
  for (let i = 0; i < records.length; i++) {
    const r = records[i] as ObservationRecord;
    const bad =
      typeof r.id !== 'string' || r.id === '' ? 'id must be a non-empty string'
      : !(r.lon >= -180 && r.lon <= 180) ? 'lon must be a number in [-180, 180]'
      : !(r.lat >= -90 && r.lat <= 90) ? 'lat must be a number in [-90, 90]'
      : r.observedAt !== null && !Number.isSafeInteger(r.observedAt) ? 'observedAt must be whole epoch milliseconds or null'
      : r.weight !== null && !Number.isFinite(r.weight) ? 'weight must be a finite number or null'
      : typeof r.feature !== 'string' || typeof r.contentHash !== 'string' ? 'feature and contentHash must be strings'
      : null;
    if (bad !== null) throw new StoreError('invalid', `record ${i}: ${bad}`);
  }
}

/** @throws StoreError 'invalid' for a malformed bbox, window or condition */
export function checkQuery(q: ObservationQuery): void {
  if (q.bbox !== undefined) {
    const b = q.bbox;
    if (!Array.isArray(b) || b.length !== 4 || !b.every(Number.isFinite)) throw new StoreError('invalid', 'bbox must be [west, south, east, north] in degrees');
    if (b[1] > b[3]) throw new StoreError('invalid', 'bbox south must not exceed north');
  }
  if (q.from !== undefined && !Number.isFinite(q.from)) throw new StoreError('invalid', 'from must be epoch milliseconds');
  if (q.to !== undefined && !Number.isFinite(q.to)) throw new StoreError('invalid', 'to must be epoch milliseconds');
  if (q.untimed === true && (q.from !== undefined || q.to !== undefined)) throw new StoreError('invalid', 'untimed observations have no time: leave from and to out');
  for (const c of q.where ?? []) {
    if (typeof c.property !== 'string' || c.property === '' || typeof c.value !== 'string') throw new StoreError('invalid', 'where conditions must be {property, value} strings');
    if (!plainText(c.property) || !plainText(c.value)) throw new StoreError('invalid', 'a where condition holds a NUL character or a lone surrogate, which no stored observation can hold');
  }
}

/** @throws StoreError 'invalid' unless 1 ≤ limit ≤ max */
export function checkLimit(limit: number, max = 10_000): void {
  if (!Number.isInteger(limit) || limit < 1 || limit > max) throw new StoreError('invalid', `limit must be an integer from 1 to ${max}`);
}

/** A track-number reservation is for 1 to 1 000 000 numbers. */
export function checkTrackCount(count: number): void {
  if (!Number.isSafeInteger(count) || count < 1 || count > 1_000_000) {
    throw new StoreError('invalid', `reserve between 1 and 1000000 track numbers, got ${String(count)}`);
  }
}

/** Opaque cursor for a position in a sequence (base64url of a small JSON object). */
export function encodeCursor(seq: number): string {
  return Buffer.from(JSON.stringify({ s: seq })).toString('base64url');
}

/** @throws StoreError 'invalid' when the cursor was not made by `encodeCursor` */
export function decodeCursor(cursor: string): number {
  try {
    const v = JSON.parse(Buffer.from(cursor, 'base64url').toString('utf8')) as { s?: unknown };
    if (typeof v.s === 'number' && Number.isSafeInteger(v.s) && v.s >= 0) return v.s;
  } catch {
    // fall through to the error below
  }
  throw new StoreError('invalid', 'cursor is not one this service issued; start again without a cursor');
}

/** "r" and at least six digits. */
export function formatRunId(seq: number): string {
  return `r${String(seq).padStart(6, '0')}`;
}

/** The sequence number of a run id, or null when the text is not a run id. */
export function parseRunId(runId: string): number | null {
  const m = typeof runId === 'string' ? /^r(\d{1,15})$/.exec(runId) : null;
  return m === null ? null : Number(m[1]);
}

/**
 * A claim's lease when the claimer names none, milliseconds. The run queue passes its own
 * (src/jobs/lease.ts); this default fits a caller that renews every 10 s.
 */
export const DEFAULT_LEASE_MS = 15_000;

/** @throws StoreError 'invalid' unless the lease is a whole number of milliseconds from 1 to a day */
export function checkLease(workerId: string, leaseMs: number): void {
  if (typeof workerId !== 'string' || workerId === '') throw new StoreError('invalid', 'a claim needs a worker id');
  if (!Number.isSafeInteger(leaseMs) || leaseMs < 1 || leaseMs > 86_400_000) throw new StoreError('invalid', `lease must be 1 to 86 400 000 ms, got ${String(leaseMs)}`);
}

/**
 * What a run says after its process stopped `times` times before it finished: queued again, or
 * (at the limit) failed, with what the user can do.
 */
export function interruptedMessage(times: number, failed: boolean): string {
  const head = `interrupted ${times} time${times === 1 ? '' : 's'}: the process running it stopped before it finished`;
  return failed
    ? `${head}; not tried again. A run this large may need more memory than the service has: narrow it (a shorter window, a where condition) or ask the operator to look at the service log for this run`
    : `${head}; queued again`;
}

/** @throws StoreError 'invalid' for an unknown status or progress outside 0–100 */
export function checkRunPatch(p: RunPatch): void {
  if (p.status !== undefined && !RUN_STATUSES.includes(p.status)) throw new StoreError('invalid', `status must be one of ${RUN_STATUSES.join(', ')}`);
  if (p.progress !== undefined && !(p.progress >= 0 && p.progress <= 100)) throw new StoreError('invalid', 'progress must be a number from 0 to 100');
  if (p.summary != null && !isPlainObject(p.summary)) throw new StoreError('invalid', 'summary must be a JSON object or null');
  if (p.timings != null && !isPlainObject(p.timings)) throw new StoreError('invalid', 'timings must be an object of milliseconds or null');
}

export function checkStatuses(s: RunStatus[]): void {
  for (const x of s) if (!RUN_STATUSES.includes(x)) throw new StoreError('invalid', `status must be one of ${RUN_STATUSES.join(', ')}`);
}

/** The slot instant normalised to RFC 3339 UTC with milliseconds. @throws StoreError 'invalid' */
export function normaliseSlot(slotIso: string): string {
  const t = typeof slotIso === 'string' ? Date.parse(slotIso) : NaN;
  if (!Number.isFinite(t)) throw new StoreError('invalid', `slot ${JSON.stringify(slotIso)} is not an RFC 3339 instant`);
  return new Date(t).toISOString();
}

/** What one ingest call will do, decided from the batch and the hashes already stored for its ids. */
export interface IngestPlan {
  result: IngestResult;
  insert: ObservationRecord[];
  replace: ObservationRecord[];
}

/** The distinct ids of a batch, in first-seen order. */
export function batchIds(records: ObservationRecord[]): string[] {
  const seen = new Set<string>();
  for (const r of records) seen.add(r.id);
  return [...seen];
}

/**
 * Classifies a batch against the stored hashes (`stored`: id → content hash for the batch's ids
 * already in the dataset). Lists keep batch order.
 */
export function planIngest(records: ObservationRecord[], stored: Map<string, string>, options: IngestOptions): IngestPlan {
  const first = new Map<string, ObservationRecord>();
  const inBatchConflict = new Set<string>();
  const duplicates: string[] = [];
  for (const r of records) {
    const f = first.get(r.id);
    if (f === undefined) first.set(r.id, r);
    else if (f.contentHash === r.contentHash) duplicates.push(r.id);
    else inBatchConflict.add(r.id);
  }
  const accepted: string[] = [];
  const replaced: string[] = [];
  const conflicts: string[] = [];
  const insert: ObservationRecord[] = [];
  const replace: ObservationRecord[] = [];
  for (const [id, r] of first) {
    if (inBatchConflict.has(id)) {
      conflicts.push(id);
      continue;
    }
    const hash = stored.get(id);
    if (hash === undefined) {
      accepted.push(id);
      insert.push(r);
    } else if (hash === r.contentHash) {
      duplicates.push(id);
    } else if (options.replace) {
      replaced.push(id);
      replace.push(r);
    } else {
      conflicts.push(id);
    }
  }
  // duplicates found in the batch pass come before those found against the store; restore batch order
  if (duplicates.length > 1) {
    const order = new Map<string, number>();
    records.forEach((r, i) => order.has(r.id) || order.set(r.id, i));
    duplicates.sort((a, b) => (order.get(a) as number) - (order.get(b) as number));
  }
  const rejected = options.rejected?.length ?? 0;
  const stored_ = options.partial || (conflicts.length === 0 && rejected === 0);
  return {
    result: { accepted, duplicates, replaced, conflicts, stored: stored_ },
    insert: stored_ ? insert : [],
    replace: stored_ ? replace : [],
  };
}

/**
 * How a `where` value can match: always as a string; also as a boolean, null or number when the
 * text is exactly how that value is written (JavaScript's `String(v)`), which is the rule of the
 * file filter in src/ingest/filter.ts.
 */
export interface WhereMatch {
  property: string;
  text: string;
  bool: boolean | null;
  isNull: boolean;
  number: number | null;
}

export function whereMatches(where: WhereCondition[] | undefined): WhereMatch[] {
  return (where ?? []).map((c) => {
    const n = Number(c.value);
    return {
      property: c.property,
      text: c.value,
      bool: c.value === 'true' ? true : c.value === 'false' ? false : null,
      isNull: c.value === 'null',
      number: Number.isFinite(n) && String(n) === c.value ? n : null,
    };
  });
}

/** A page from rows (seq, feature, lon, lat) fetched with one row more than `limit`, the extra one telling that more follow. */
export function observationPage(rows: [number, string, number, number][], limit: number): ObservationPage {
  const more = rows.length > limit;
  if (more) rows.pop();
  const last = rows[rows.length - 1];
  return {
    features: rows.map((r) => r[1]),
    lon: rows.map((r) => r[2]),
    lat: rows.map((r) => r[3]),
    nextCursor: more && last !== undefined ? encodeCursor(last[0]) : null,
  };
}

/** Characters per stored piece of a result layer: about 1 MiB of ASCII text. */
export const LAYER_PIECE_CHARS = 1 << 20;
/** Stored pieces read per query when a layer is served: a few MiB in memory at a time. */
const LAYER_PIECES_PER_READ = 8;

/** Cuts a text into pieces of at most `size` characters, never between the two halves of a surrogate pair. */
export function cutText(text: string, size = LAYER_PIECE_CHARS): string[] {
  const out: string[] = [];
  for (let at = 0; at < text.length; ) {
    let end = Math.min(text.length, at + size);
    const last = text.charCodeAt(end - 1);
    if (end < text.length && last >= 0xd800 && last <= 0xdbff) end--;
    out.push(text.slice(at, end));
    at = end;
  }
  return out.length > 0 ? out : [''];
}

/** A result's layers as the pieces to store. @throws StoreError 'invalid' when a layer is not text */
export function layerPieces(result: RunResult): Record<LayerName, string[]> {
  const out = {} as Record<LayerName, string[]>;
  for (const layer of LAYER_NAMES) {
    const v = result.layers?.[layer] as unknown;
    if (typeof v === 'string') out[layer] = cutText(v);
    else if (Array.isArray(v) && v.length > 0 && v.every((x) => typeof x === 'string')) out[layer] = [...(v as string[])];
    else throw new StoreError('invalid', `result layer ${layer} must be GeoJSON text, whole or in pieces`);
  }
  return out;
}

/**
 * A stored layer read piece by piece through `read(fromPart, count)`: null when it has no piece,
 * else its pieces in order. Each read is its own query, so a result saved again while a layer is
 * being served could mix; a run's result is saved once, before the run is marked succeeded.
 */
export async function storedPieces(read: (fromPart: number, count: number) => Promise<string[]> | string[]): Promise<AsyncIterable<string> | null> {
  const first = await read(0, LAYER_PIECES_PER_READ);
  if (first.length === 0) return null;
  return (async function* () {
    let batch = first;
    let at = 0;
    for (;;) {
      yield* batch;
      if (batch.length < LAYER_PIECES_PER_READ) return;
      at += batch.length;
      batch = await read(at, LAYER_PIECES_PER_READ);
      if (batch.length === 0) return;
    }
  })();
}

/** All pieces joined, or null. */
export async function joinPieces(pieces: AsyncIterable<string> | null): Promise<string | null> {
  if (pieces === null) return null;
  const parts: string[] = [];
  for await (const p of pieces) parts.push(p);
  return parts.join('');
}

/** @throws StoreError 'invalid' for an unknown trigger or settings that are not an object */
export function checkNewRun(r: NewRun): void {
  if (!RUN_TRIGGERS.includes(r.trigger)) throw new StoreError('invalid', `trigger must be one of ${RUN_TRIGGERS.join(', ')}`);
  if (typeof r.settings !== 'object' || r.settings === null || Array.isArray(r.settings)) throw new StoreError('invalid', 'run settings must be a JSON object');
}

export function nowIso(): string {
  return new Date().toISOString();
}

/** A typed array of `size` elements that starts with `a`'s. */
export function grown<T extends Float64Array | Int32Array | Uint32Array>(a: T, size: number): T {
  const b = new (a.constructor as new (n: number) => T)(size);
  b.set(a);
  return b;
}

/**
 * Feature texts kept as a few large strings: joined by "\n" (canonical JSON text never holds a
 * raw line break; a chunk whose texts do have one is kept as separate strings instead), or as
 * spans of a larger string (PostgreSQL's COPY reader). `at(i)` cuts one text out on demand.
 */
export class PackedTexts implements FeatureTexts {
  private readonly chunks: string[] = [];
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
   * Adds `count` texts that are parts of one string: text k is `chunk.slice(starts[k], ends[k])`.
   * What lies between them in the chunk is never handed out.
   */
  addSpans(chunk: string, starts: Int32Array, ends: Int32Array, count: number): void {
    if (count === 0) return;
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
    if (!(index >= 0 && index < this.length)) return undefined;
    const c = this.chunk[index] as number;
    const s = this.start[index] as number;
    return s < 0 ? this.loose[c]![this.end[index]!] : this.chunks[c]!.slice(s, this.end[index]);
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
    this.ids = Array.from(order, (i) => ids[i] as string);
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

const KEY_ROLES = ['reader', 'contributor', 'manager', 'admin'];

/** Checks a new key's fields. @throws StoreError 'invalid' */
export function checkNewKey(k: NewApiKey): void {
  if (typeof k.id !== 'string' || !/^k_[0-9a-f]{12}$/.test(k.id)) throw new StoreError('invalid', 'key id must be "k_" and 12 hex digits');
  if (typeof k.tokenHash !== 'string' || !/^[0-9a-f]{64}$/.test(k.tokenHash)) throw new StoreError('invalid', 'tokenHash must be a SHA-256 in lower-case hex');
  if (!KEY_ROLES.includes(k.role)) throw new StoreError('invalid', `role must be one of ${KEY_ROLES.join(', ')}`);
  if (k.datasetId !== null) checkDatasetId(k.datasetId);
  if (k.label !== null && (typeof k.label !== 'string' || k.label.length > 200)) throw new StoreError('invalid', 'label must be text of at most 200 characters, or null');
}

/** Checks an audit record's fields. @throws StoreError 'invalid' */
export function checkAuditRecord(r: NewAuditRecord): void {
  if (!['key', 'open', 'command'].includes(r.actor)) throw new StoreError('invalid', 'actor must be key, open or command');
  if (typeof r.action !== 'string' || r.action === '') throw new StoreError('invalid', 'action must be non-empty text');
  if (!Number.isSafeInteger(r.status)) throw new StoreError('invalid', 'status must be a whole number');
}

/** A key row (either engine) as an ApiKey. */
export function keyFromRow(row: Record<string, unknown>): ApiKey {
  const iso = (v: unknown): string | null => (v === null || v === undefined ? null : v instanceof Date ? v.toISOString() : String(v));
  return {
    id: row.id as string,
    role: row.role as ApiKey['role'],
    datasetId: (row.dataset_id as string | null) ?? null,
    label: (row.label as string | null) ?? null,
    createdAt: iso(row.created_at)!,
    revokedAt: iso(row.revoked_at),
  };
}

/** Audit rows (either engine, newest first, one more than `limit` when there is a next page) as a page. */
export function auditPage(rows: Record<string, unknown>[], limit: number): AuditPage {
  const page = rows.slice(0, limit);
  const records: AuditRecord[] = page.map((row) => ({
    at: row.at instanceof Date ? row.at.toISOString() : String(row.at),
    keyId: (row.key_id as string | null) ?? null,
    actor: row.actor as AuditRecord['actor'],
    action: row.action as string,
    datasetId: (row.dataset_id as string | null) ?? null,
    target: (row.target as string | null) ?? null,
    status: Number(row.status),
  }));
  const last = page[page.length - 1];
  return { records, nextCursor: rows.length > limit && last !== undefined ? encodeCursor(Number(last.seq)) : null };
}
