/**
 * The storage contract: one `Store` interface with two engines behind it, SQLite (embedded
 * default, `better-sqlite3`) and PostgreSQL (`pg`, for several instances sharing one database).
 * Both pass the same contract test suite (test/storage/contract.ts); callers never see which is in
 * use. Every method is async so that PostgreSQL fits; the SQLite engine does its work synchronously
 * inside them.
 *
 * What is stored
 * - datasets: id, name, default settings (a JSON object with the API's snake_case names), the
 *   property holding observation ids, a time window (ISO 8601 duration such as "P30D"), a schedule
 *   (cron + IANA time zone) and a webhook. `settings` and the nested objects are replaced wholesale
 *   by `updateDataset`, never merged.
 * - observations: one row per (dataset, observation id) holding the position, `observed_at` (epoch
 *   ms), weight, the SHA-256 of the feature text and the feature text itself, byte for byte as given
 *   (the caller canonicalises it). Every row has an insertion sequence number; listings, cursors
 *   and `loadForRun` follow it, so the order is stable. A replaced observation keeps its place.
 * - runs: a global sequence gives ids "r000001", "r000002", … (at least six digits, in creation
 *   order); a run belongs to one dataset. Results (four GeoJSON layer texts and the hotspots with
 *   their member ids, hulls and track ids) are stored with the run and served as stored.
 * - schedule slots: one row per (dataset, slot instant) so that a scheduled run happens once even
 *   with several processes or instances on one database.
 *
 * Ingestion rules (`ingest`), one transaction per call:
 * - same id and same content hash as stored → duplicate, nothing written;
 * - same id, different hash → conflict, unless `replace` (then the stored row is replaced);
 * - new id → accepted.
 * - Within one batch an id seen again with the same hash is stored once and reported once more as
 *   a duplicate; seen again with a different hash, the id is a conflict (even with `replace`: the
 *   batch itself does not say which version is meant) and no version of it is written.
 * - Any conflict (without replace) or any rejected entry passed in by the caller means nothing is
 *   written, unless `partial` is set, in which case the valid records are written. `stored` tells
 *   which happened; `accepted`/`replaced` then list what was written (or would have been).
 *
 * Property conditions (`where`) match like the file filter in src/ingest/filter.ts: a condition
 * holds when the property's value written as text equals the given text exactly (`3` matches the
 * number 3 and the string "3"; `true` matches true; `null` matches null); objects, arrays and
 * missing properties never match. Time windows are [from, to) in epoch ms and leave out
 * observations without `observed_at`. A bbox [west, south, east, north] in degrees with
 * west > east crosses the antimeridian.
 *
 * Runs are jobs: queued → running → succeeded | failed | cancelled. `claimNextRun` hands the oldest
 * queued run to exactly one claimer (SQLite: an IMMEDIATE transaction, which holds the database's
 * single write lock; PostgreSQL: `FOR UPDATE SKIP LOCKED`). A claim is a lease: the claimer's id
 * (unique per claim) is kept in `workerId` and the run is its own until `leaseUntil`, which the
 * claimer renews (`renewRunLease`). `reclaimExpiredRuns` puts runs whose lease ran out back in the
 * queue, or fails them after too many interruptions; it may be called by any process at any time.
 * Lease times are the database's clock on PostgreSQL (instances on several machines agree) and the
 * process's clock on SQLite (all processes on one machine). The writes a claimer makes to its run
 * (`updateRun`, `saveRunResult`) take its claim id (`ifWorker`) and fail with 'conflict' once the
 * run was taken over, so a process that lost its lease cannot overwrite the new claimer's work.
 * `markInterruptedRuns` and `requeueInterruptedRuns` do the same for runs chosen by worker id or
 * staleness, for operators' tools.
 *
 * Durability (SQLite): WAL with synchronous=NORMAL by default. A committed transaction survives a
 * crash of the process (SIGKILL included); on power loss or an operating-system crash the last
 * transactions before the failure may be lost, but the database is never corrupted. `synchronous:
 * 'FULL'` makes every commit durable against power loss at the cost of one fsync per transaction
 * (see test/bench/storage-results.md for the measured difference).
 *
 * Errors: `StoreError` with a code the HTTP layer maps: 'not-found' (404), 'conflict' (409),
 * 'invalid' (400).
 */
import type { LayerName } from '../run/layers.js';

/** Stable machine-readable kinds of store errors. */
export type StoreErrorCode = 'not-found' | 'conflict' | 'invalid';

/** A storage error the HTTP layer can map to a status ('not-found' 404, 'conflict' 409, 'invalid' 400). */
export class StoreError extends Error {
  readonly code: StoreErrorCode;
  constructor(code: StoreErrorCode, message: string) {
    super(message);
    this.name = 'StoreError';
    this.code = code;
  }
}

/** A dataset's schedule: a cron expression evaluated in an IANA time zone. */
export interface DatasetSchedule {
  cron: string;
  timezone: string;
}

/** Where run summaries are POSTed, and the secret that signs them. */
export interface DatasetWebhook {
  url: string;
  secret: string;
}

export interface NewDataset {
  /** 1–128 characters from A–Z a–z 0–9 . _ ~ - (safe in a URL path without escaping) */
  id: string;
  name: string;
  /** default clustering settings, API names (for example {"eps": 250, "min_points": 5}) */
  settings: Record<string, unknown>;
  /** property holding each observation's id (null: the GeoJSON `id`) */
  idProperty: string | null;
  /** time window as an ISO 8601 duration, for example "P30D" (null: all observations) */
  window: string | null;
  schedule: DatasetSchedule | null;
  webhook: DatasetWebhook | null;
  /**
   * how the dataset's runs are published (API names: public, generalise_m, min_count, noise,
   * properties; checked by src/publish/publish.ts, kept here as given); absent or null: not published
   */
  publish?: Record<string, unknown> | null;
}

export interface Dataset extends NewDataset {
  publish: Record<string, unknown> | null;
  /** RFC 3339, UTC, millisecond precision */
  createdAt: string;
  updatedAt: string;
}

/** Fields to change; absent fields stay, null clears the nullable ones. */
export type DatasetPatch = Partial<Omit<NewDataset, 'id'>>;

/** One observation as the ingest layer prepared it. */
export interface ObservationRecord {
  /** the observation's id, unique within its dataset */
  id: string;
  /** degrees, WGS 84 */
  lon: number;
  lat: number;
  /** epoch milliseconds, null when the observation has no time */
  observedAt: number | null;
  /** weight (for example the number of animals seen), null when absent */
  weight: number | null;
  /** the whole GeoJSON Feature as canonical JSON text; stored and returned byte for byte */
  feature: string;
  /** SHA-256 (hex) of `feature` */
  contentHash: string;
}

export interface IngestOptions {
  /** replace stored observations whose content differs instead of reporting a conflict */
  replace: boolean;
  /** store the valid records even when others conflict or were rejected */
  partial: boolean;
  /** entries the caller already rejected (bad input): any of them makes the batch all-or-nothing fail unless partial */
  rejected?: { index: number; reason: string }[];
}

export interface IngestResult {
  /** new ids (written when `stored`) */
  accepted: string[];
  /** ids whose identical content was already stored or appeared earlier in the batch */
  duplicates: string[];
  /** ids whose stored content was replaced (written when `stored`) */
  replaced: string[];
  /** ids stored with different content (without replace) or given twice with different content in the batch */
  conflicts: string[];
  /** whether the batch was written (false: nothing at all was written) */
  stored: boolean;
}

/** A property condition: the property's value written as text equals `value`. */
export interface WhereCondition {
  property: string;
  value: string;
}

export interface ObservationQuery {
  /** [west, south, east, north] in degrees; west > east crosses the antimeridian */
  bbox?: [number, number, number, number];
  /** epoch ms, inclusive */
  from?: number;
  /** epoch ms, exclusive */
  to?: number;
  where?: WhereCondition[];
  /** only observations without a time (from and to must then be absent) */
  untimed?: boolean;
}

export interface ListObservationsOptions extends ObservationQuery {
  /** opaque cursor from a previous page's `nextCursor` */
  cursor?: string;
  /** page size, 1–10 000 */
  limit: number;
}

/** Where and when a dataset's observations lie. */
export interface ObservationExtent {
  count: number;
  /** [west, south, east, north] in degrees (least and greatest longitude and latitude), null when there are none */
  bbox: [number, number, number, number] | null;
  /** earliest and latest `observed_at`, epoch ms, null when no observation has a time */
  first: number | null;
  last: number | null;
}

export interface ObservationPage {
  /** stored feature texts in insertion order */
  features: string[];
  /** each listed observation's position, degrees (for the page's bbox) */
  lon: number[];
  lat: number[];
  /** cursor for the next page, null on the last page */
  nextCursor: string | null;
}

/**
 * Feature texts by position: `at(i)` for 0 ≤ i < length, and iteration in order. A plain string
 * array qualifies; the engines hand out packed texts (a few large strings) because a million
 * separate strings cost more in garbage collection than reading them.
 */
export interface FeatureTexts extends Iterable<string> {
  readonly length: number;
  at(index: number): string | undefined;
}

/** A dataset's observations in columns, in insertion order, ready for clustering. */
export interface RunInput {
  ids: string[];
  /** degrees */
  lon: Float64Array;
  lat: Float64Array;
  /** epoch ms, NaN where absent */
  observedAt: Float64Array;
  /** null when no loaded observation has a weight; NaN where absent otherwise */
  weight: Float64Array | null;
  /** stored feature texts */
  features: FeatureTexts;
}

export type RunStatus = 'queued' | 'running' | 'succeeded' | 'failed' | 'cancelled';
export type RunTrigger = 'request' | 'schedule' | 'command';
export const RUN_STATUSES: readonly RunStatus[] = ['queued', 'running', 'succeeded', 'failed', 'cancelled'];
export const RUN_TRIGGERS: readonly RunTrigger[] = ['request', 'schedule', 'command'];

export interface NewRun {
  datasetId: string;
  /** the settings the run uses (dataset defaults with the request's overrides applied) */
  settings: Record<string, unknown>;
  trigger: RunTrigger;
}

export interface Run {
  /** "r" and at least six digits, global creation order */
  id: string;
  datasetId: string;
  status: RunStatus;
  trigger: RunTrigger;
  settings: Record<string, unknown>;
  /** 0–100 */
  progress: number;
  /** why the run failed or was cancelled */
  error: string | null;
  /** the worker that claimed it */
  workerId: string | null;
  /** RFC 3339 instants */
  createdAt: string;
  startedAt: string | null;
  finishedAt: string | null;
  /** last change of any kind (a heartbeat for `staleMs`) */
  updatedAt: string;
  /** RFC 3339: while 'running', the claim holds until then unless renewed; null otherwise */
  leaseUntil: string | null;
  /** times the run's process stopped (its lease ran out) before it finished */
  interruptions: number;
  summary: Record<string, unknown> | null;
  /** stage → milliseconds */
  timings: Record<string, number> | null;
}

export interface RunPatch {
  status?: RunStatus;
  progress?: number;
  error?: string | null;
  /** RFC 3339 */
  startedAt?: string | null;
  finishedAt?: string | null;
  summary?: Record<string, unknown> | null;
  timings?: Record<string, number> | null;
}

export interface RunPage {
  /** newest first */
  runs: Run[];
  nextCursor: string | null;
}


export interface RunHotspot {
  /** the hotspot's number in the run */
  hotspotId: number;
  /** identity across runs, null until tracks are assigned */
  trackId: string | null;
  /** observation ids of all members */
  members: string[];
  /** observation ids of the core members */
  coreMembers: string[];
  /** GeoJSON geometry text of the hull */
  hull: string;
  /** the hotspot's figures (size, area, centre, …) as the run computed them, for track histories */
  figures?: Record<string, unknown> | null;
}

/**
 * A result layer's pieces produced on demand, in order: each a string or the UTF-8 bytes of whole
 * characters. The engine reads them one at a time while it stores them, inside its transaction.
 */
export type LayerSource = Iterable<string | Uint8Array>;

export interface RunResult {
  /**
   * GeoJSON FeatureCollection texts, each whole, as pieces to be joined in order, or as a
   * LayerSource. They are stored in pieces of about a MiB (see LAYER_PIECE_CHARS; pieces given
   * are kept as given), so no layer is one huge value.
   */
  layers: Record<LayerName, string | readonly string[] | LayerSource>;
  hotspots: RunHotspot[];
  /**
   * The run's own update (its status, summary, timings), asked for once the layers and hotspots
   * are written and applied in the same transaction, so that the run is finished when its result
   * is stored and not one write later. On SQLite this also puts the checkpoint that copies the
   * result from the write-ahead log into the database file (which `COMMIT` starts) after the run
   * is seen finished, where a separate update would have waited for it.
   */
  finish?: () => RunPatch;
}

/** One run's hotspot on a track. */
export interface TrackPoint {
  runId: string;
  hotspotId: number;
  memberCount: number;
  hull: string;
  figures: Record<string, unknown> | null;
}

/** A run named in a track listing. */
export interface TrackRunRef {
  id: string;
  /** RFC 3339 */
  createdAt: string;
  finishedAt: string | null;
}

/** One track of a dataset, as the listing of tracks shows it. */
export interface TrackSummary {
  trackId: string;
  /** succeeded runs that have a hotspot on the track */
  runCount: number;
  /** the first and the last of those runs */
  firstRun: TrackRunRef;
  lastRun: TrackRunRef;
  /** whether the last of them is the dataset's latest succeeded run */
  active: boolean;
  /** the track's hotspot in its last run: number, member count and figures */
  hotspotId: number;
  memberCount: number;
  figures: Record<string, unknown> | null;
}

export interface ListTracksOptions {
  /** 1 to 1000 */
  limit: number;
  /** from the previous page's nextCursor */
  cursor?: string;
  /** true: only tracks in the latest succeeded run; false: only tracks that ended; absent: all */
  active?: boolean;
}

export interface TrackPage {
  /** by track id, shorter ids first (the order they were given out) */
  tracks: TrackSummary[];
  nextCursor: string | null;
}

/** Restricts crash recovery to one worker's runs or to runs not updated for a while. */
export interface InterruptedRunFilter {
  /** only runs claimed by this worker */
  workerId?: string;
  /** only runs whose last update is at least this many milliseconds old */
  staleMs?: number;
}

/** An API key's role (see src/auth/roles.ts). */
export type KeyRole = 'reader' | 'contributor' | 'manager' | 'admin';

export interface NewApiKey {
  /** `k_` and 12 hex digits */
  id: string;
  /** SHA-256 of the token, lower-case hex; the token itself is never stored */
  tokenHash: string;
  role: KeyRole;
  /** the one dataset the key may act on (it must exist); null: any */
  datasetId: string | null;
  /** who or what the key is for, free text up to 200 characters */
  label: string | null;
}

/** A stored key as listings show it (never with its hash). */
export interface ApiKey {
  id: string;
  role: KeyRole;
  datasetId: string | null;
  label: string | null;
  /** RFC 3339 */
  createdAt: string;
  /** RFC 3339, null while the key is in force */
  revokedAt: string | null;
}

/** One change or deletion, for the audit records. */
export interface NewAuditRecord {
  /** the key that made it; null in open mode or from the command line */
  keyId: string | null;
  /** 'key', 'open' (no key in the store) or 'command' (the roost command line) */
  actor: 'key' | 'open' | 'command';
  /** what was done: the HTTP method and route (`DELETE /v1/datasets/{id}`) or a command */
  action: string;
  /** the dataset it concerned, if any */
  datasetId: string | null;
  /** the resource (observation id, run id, key id), if any */
  target: string | null;
  /** the HTTP status answered (0 for commands) */
  status: number;
}

export interface AuditRecord extends NewAuditRecord {
  /** RFC 3339 */
  at: string;
}

export interface AuditPage {
  /** newest first */
  records: AuditRecord[];
  nextCursor: string | null;
}

export interface Store {
  /** 'sqlite' or 'postgres' */
  readonly engine: 'sqlite' | 'postgres';
  /** Applies the migrations not yet recorded in `schema_migrations`; safe to call again and from several processes. */
  migrate(): Promise<void>;
  /** Releases the connection(s). */
  close(): Promise<void>;

  /** @throws StoreError 'conflict' when the id exists, 'invalid' for a bad id or settings */
  createDataset(d: NewDataset): Promise<Dataset>;
  /** @returns null when there is no such dataset */
  getDataset(id: string): Promise<Dataset | null>;
  /** All datasets by id. */
  listDatasets(): Promise<Dataset[]>;
  /** @throws StoreError 'not-found' */
  updateDataset(id: string, patch: DatasetPatch): Promise<Dataset>;
  /** Deletes the dataset with its observations, runs and results. @returns false when there was none */
  deleteDataset(id: string): Promise<boolean>;

  /** Stores a batch in one transaction (rules in the header). @throws StoreError 'not-found' for an unknown dataset */
  ingest(datasetId: string, records: ObservationRecord[], options: IngestOptions): Promise<IngestResult>;
  /** A page of stored feature texts. @throws StoreError 'invalid' for a bad cursor, bbox or limit */
  listObservations(datasetId: string, options: ListObservationsOptions): Promise<ObservationPage>;
  /** Removes one observation (a retraction). @returns false when it was not stored */
  deleteObservation(datasetId: string, id: string): Promise<boolean>;
  /** Observations of a dataset, all of them or those matching a query (for example `{ untimed: true }` or a bbox). */
  countObservations(datasetId: string, query?: ObservationQuery): Promise<number>;
  /** One stored observation's feature text, null when it is not stored. */
  getObservation(datasetId: string, id: string): Promise<string | null>;
  /** Count, bounding box and time span of the dataset's observations. */
  observationExtent(datasetId: string): Promise<ObservationExtent>;
  /** The matching observations as columns, in insertion order. */
  loadForRun(datasetId: string, query?: Omit<ObservationQuery, 'bbox'>): Promise<RunInput>;
  /** Positions of the given observations (for example a run's core members); unknown ids are left out. */
  getPositions(datasetId: string, ids: string[]): Promise<Map<string, { lon: number; lat: number }>>;

  /** @throws StoreError 'not-found' for an unknown dataset */
  createRun(r: NewRun): Promise<Run>;
  /**
   * Takes the oldest queued run, marks it running (startedAt now) under a lease of `leaseMs`
   * (default DEFAULT_LEASE_MS) held by `workerId`, and returns it; null when none is queued.
   */
  claimNextRun(workerId: string, leaseMs?: number): Promise<Run | null>;
  /** Claims one queued run as claimNextRun would. @throws StoreError 'not-found', 'conflict' when it is not queued */
  claimRun(runId: string, workerId: string, leaseMs?: number): Promise<Run>;
  /** Extends the lease to `leaseMs` from now. @returns false when the run is no longer running under this claim */
  renewRunLease(runId: string, workerId: string, leaseMs: number): Promise<boolean>;
  /**
   * Runs 'running' whose lease has run out count one more interruption and go back to the queue
   * (progress 0, no worker), or are failed once they reach `maxInterruptions`.
   * @returns the ids queued again and failed
   */
  reclaimExpiredRuns(maxInterruptions: number): Promise<{ requeued: string[]; failed: string[] }>;
  /**
   * Changes a run. With `ifStatus`, changes it only when its current status is one of those, else
   * throws 'conflict' (so a cancelled run is not marked succeeded by a late worker). With
   * `ifWorker`, only while that claim holds the run (else 'conflict').
   * @throws StoreError 'not-found', 'conflict', 'invalid'
   */
  updateRun(runId: string, patch: RunPatch, ifStatus?: RunStatus[], ifWorker?: string): Promise<Run>;
  /** Runs with the status across all datasets (for example how many wait in the queue). */
  countRuns(status: RunStatus): Promise<number>;
  /** @returns null when the dataset has no such run */
  getRun(datasetId: string, runId: string): Promise<Run | null>;
  /** Newest first. */
  listRuns(datasetId: string, options: { limit: number; cursor?: string }): Promise<RunPage>;
  /** The newest run (creation order) with the status, default 'succeeded'; `before` restricts to runs created before that run. */
  latestRun(datasetId: string, status?: RunStatus, before?: string): Promise<Run | null>;
  /**
   * Stores a run's result, replacing any earlier one; with `ifWorker`, only while that claim holds
   * the run 'running'. @throws StoreError 'not-found', 'conflict'
   */
  saveRunResult(runId: string, result: RunResult, ifWorker?: string): Promise<void>;
  /** A stored layer text; null when the run has no stored result. @throws StoreError 'not-found' for an unknown run */
  getRunLayer(runId: string, layer: LayerName): Promise<string | null>;
  /**
   * A stored layer as its pieces in order (join them for the text), read a few at a time so that
   * a large layer is never one string; null when the run has no stored result.
   * @throws StoreError 'not-found' for an unknown run
   */
  getRunLayerPieces(runId: string, layer: LayerName): Promise<AsyncIterable<string> | null>;
  /**
   * The same pieces as their UTF-8 bytes, read a few at a time, for sending as stored without
   * decoding them into strings and encoding them again; null when the run has no stored result.
   * @throws StoreError 'not-found' for an unknown run
   */
  getRunLayerBytes(runId: string, layer: LayerName): Promise<AsyncIterable<Buffer> | null>;
  /** The run's hotspots by hotspot id; empty when none were stored. @throws StoreError 'not-found' */
  getRunHotspots(runId: string): Promise<RunHotspot[]>;
  /** The hotspots of succeeded runs carrying the track id, oldest run first. */
  getTrack(datasetId: string, trackId: string): Promise<TrackPoint[]>;
  /**
   * A page of the dataset's tracks (those on a hotspot of a succeeded run), in track id order,
   * shorter ids first. An unknown dataset has none. @throws StoreError 'invalid' for a bad limit or cursor
   */
  listTracks(datasetId: string, options: ListTracksOptions): Promise<TrackPage>;
  /** Runs left 'running' become 'failed' with the reason. @returns their ids */
  markInterruptedRuns(reason: string, filter?: InterruptedRunFilter): Promise<string[]>;
  /** Runs left 'running' go back to 'queued' (progress 0, no worker). @returns their ids */
  requeueInterruptedRuns(filter?: InterruptedRunFilter): Promise<string[]>;

  /**
   * Claims the slot and creates its run in one transaction: the run for exactly one caller per
   * (dataset, slot), null for the others. A crash between the two cannot leave a slot claimed
   * with no run. @throws StoreError 'not-found', 'invalid'
   */
  createScheduledRun(r: NewRun, slotIso: string): Promise<Run | null>;

  /**
   * Reserves `count` (≥ 1) new track numbers for the dataset and returns the first; the block is
   * first … first + count − 1. Numbers are never handed out twice, across processes and instances,
   * and start after the largest `t<n>` track id stored before counters existed.
   * @throws StoreError 'not-found' for an unknown dataset, 'invalid' for a bad count
   */
  reserveTrackNumbers(datasetId: string, count: number): Promise<number>;

  /**
   * Stores a new API key. @throws StoreError 'conflict' for an id or hash already stored,
   * 'not-found' when the dataset does not exist, 'invalid' for a bad role, id, hash or label
   */
  createKey(k: NewApiKey): Promise<ApiKey>;
  /** The key in force whose token has this hash; null when none (unknown or revoked). */
  findKey(tokenHash: string): Promise<ApiKey | null>;
  /** Every key, in force or revoked, oldest first. Keys of a deleted dataset are deleted with it. */
  listKeys(): Promise<ApiKey[]>;
  /** Revokes a key (it stays listed, with revokedAt). @returns the key, null when there is no such key */
  revokeKey(id: string): Promise<ApiKey | null>;
  /** How many keys are in force. */
  countKeys(): Promise<number>;
  /** Appends an audit record. */
  appendAudit(r: NewAuditRecord): Promise<void>;
  /** Audit records, newest first. @throws StoreError 'invalid' for a bad cursor or limit */
  listAudit(options: { limit: number; cursor?: string }): Promise<AuditPage>;
}
