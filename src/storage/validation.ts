/**
 * The store's argument checks, shared by both engines: dataset ids and fields, observation
 * records, queries, limits, run patches and triggers, leases, schedule slots, keys and audit
 * records. Each throws StoreError 'invalid' with what is wrong.
 */
import type { DatasetPatch, NewApiKey, NewAuditRecord, NewDataset, NewRun, ObservationQuery, ObservationRecord, RunPatch, RunStatus } from './store.js';
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

/** @throws StoreError 'invalid' unless the lease is a whole number of milliseconds from 1 to a day */
export function checkLease(workerId: string, leaseMs: number): void {
  if (typeof workerId !== 'string' || workerId === '') throw new StoreError('invalid', 'a claim needs a worker id');
  if (!Number.isSafeInteger(leaseMs) || leaseMs < 1 || leaseMs > 86_400_000) throw new StoreError('invalid', `lease must be 1 to 86 400 000 ms, got ${String(leaseMs)}`);
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

/** @throws StoreError 'invalid' for an unknown trigger or settings that are not an object */
export function checkNewRun(r: NewRun): void {
  if (!RUN_TRIGGERS.includes(r.trigger)) throw new StoreError('invalid', `trigger must be one of ${RUN_TRIGGERS.join(', ')}`);
  if (typeof r.settings !== 'object' || r.settings === null || Array.isArray(r.settings)) throw new StoreError('invalid', 'run settings must be a JSON object');
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
