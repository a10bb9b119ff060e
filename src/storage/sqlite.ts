/**
 * The SQLite engine (better-sqlite3): one file, WAL mode, foreign keys on, no setup. Statements run
 * synchronously inside the async methods; each method is one transaction, and those that read then
 * write (ingest, claims) take the write lock first (BEGIN IMMEDIATE) so that another process on the
 * same file cannot slip in between.
 *
 * Waiting for another connection's write lock (another process, or a thread of this one storing a
 * large batch or a run's result) never blocks the thread: the connection's own busy handler is off
 * once it is open, and every store method that finds the database locked (SQLITE_BUSY) is tried
 * again after a timer, 1 ms doubling up to 50 ms, until `busyTimeoutMs` has passed. Each method is
 * one statement or one transaction, which SQLite rolled back when it was refused, so trying it
 * again is safe.
 */
import { LON_BIN_SQL, lonRange } from './extent.js';
import { isAscii } from 'node:buffer';
import Database from 'better-sqlite3';
import type {
  ApiKey,
  AuditPage,
  Dataset,
  DatasetPatch,
  FeatureTexts,
  IngestOptions,
  IngestResult,
  InterruptedRunFilter,
  ListObservationsOptions,
  NewApiKey,
  NewAuditRecord,
  NewDataset,
  NewRun,
  ObservationExtent,
  ObservationPage,
  ObservationQuery,
  ObservationRecord,
  Run,
  RunHotspot,
  RunPage,
  RunPatch,
  RunResult,
  RunStatus,
  RunInput,
  Store,
  TrackPoint,
  ListTracksOptions,
  TrackPage,
} from './store.js';
import { LAYER_NAMES, type LayerName } from '../run/layers.js';
import { StoreError } from './store.js';
import { PackedTexts, RunColumns } from './columns.js';
import { auditPage, decodeCursor, encodeCursor, observationPage } from './cursors.js';
import { batchIds, planIngest } from './ingest-plan.js';
import { keyFromRow } from './key-rows.js';
import { joinPieces, LAYER_BYTE_PIECES_PER_READ, storedPieces } from './layer-pieces.js';
import { layerSource } from './layer-write.js';
import { DEFAULT_LEASE_MS, FinishedRuns, formatRunId, interruptedMessage, nowIso, parseMembers, parseRunId, storedHotspot } from './runs.js';
import { canBeDatasetId, checkAuditRecord, checkDatasetFields, checkDatasetId, checkLease, checkLimit, checkNewKey, checkNewRun, checkQuery, checkRecords, checkRunPatch, checkStatuses, checkTrackCount, normaliseSlot, plainText } from './validation.js';
import { whereMatches } from './where-match.js';
import { trackListSql, trackPage } from './track-list.js';
import { MIGRATIONS } from './migrations.js';

export interface SqliteStoreOptions {
  /** database file; ':memory:' for a private in-memory database (tests) */
  path: string;
  /** 'NORMAL' (default): durable across process crashes; 'FULL': also across power loss, one fsync per commit */
  synchronous?: 'NORMAL' | 'FULL';
  /** how long to wait for another connection's write lock, milliseconds, without blocking the thread; default 10 000 */
  busyTimeoutMs?: number;
  /**
   * how much of the database file to read through memory mapping, bytes; default 2 GiB (SQLite's
   * upper bound in this build); 0 reads through system calls only. Mapping saves copying every
   * page out of the operating system's cache: loading a run of 1 000 000 observations reads the
   * table twice, and each walk took 190 ms instead of 330 ms (measured). The mapped pages are the
   * operating system's file cache, not the process's heap.
   */
  mmapBytes?: number;
}

type Row = Record<string, unknown>;

/** feature texts per string of a run input (about 4 MB at 200 bytes a text) */
const TEXT_CHUNK = 20_000;

/** 2 GiB less 64 KiB: SQLITE_MAX_MMAP_SIZE of the bundled SQLite, which caps larger requests anyway */
const DEFAULT_MMAP_BYTES = 0x7fff0000;

/** SQLite has a limit on bound parameters per statement (32 766 in recent builds); stay well below. */
const IN_CHUNK = 500;

/** Longest pause between two tries of a method that found the database locked, milliseconds. */
const BUSY_RETRY_MAX_MS = 50;

/**
 * The store methods tried again while the database is locked by another connection (every method
 * of the Store interface that reads or writes; all are one statement or one transaction).
 */
const RETRIED = [
  'migrate', 'createDataset', 'getDataset', 'listDatasets', 'updateDataset', 'deleteDataset', 'ingest', 'listObservations',
  'deleteObservation', 'countObservations', 'getObservation', 'observationExtent', 'loadForRun', 'getPositions', 'createRun',
  'createScheduledRun', 'claimNextRun', 'claimRun', 'renewRunLease', 'reclaimExpiredRuns', 'updateRun', 'countRuns', 'getRun',
  'listRuns', 'latestRun', 'saveRunResult', 'getRunLayer', 'getRunLayerPieces', 'getRunLayerBytes', 'getRunHotspots', 'getTrack', 'listTracks',
  'markInterruptedRuns', 'requeueInterruptedRuns', 'reserveTrackNumbers', 'createKey', 'findKey', 'listKeys', 'revokeKey',
  'countKeys', 'appendAudit', 'listAudit',
] as const satisfies readonly (keyof SqliteStore)[];

/** SQLITE_BUSY and its extended codes: another connection holds the lock this statement needs. */
function isBusy(err: unknown): boolean {
  const code = (err as { code?: unknown } | null)?.code;
  return typeof code === 'string' && code.startsWith('SQLITE_BUSY');
}

/** Opens (creating when needed) an SQLite store; call `migrate()` before use. */
export function openSqliteStore(options: SqliteStoreOptions): SqliteStore {
  return new SqliteStore(options);
}

export class SqliteStore implements Store {
  readonly engine = 'sqlite' as const;
  readonly db: Database.Database;
  private closed = false;
  /** where `roost_run_row` puts the rows of the load in progress */
  private rowSink: RunColumns | null = null;
  /** finished runs as last read (see FinishedRuns) */
  private readonly finished = new FinishedRuns<Run>();

  /** how long a method waits for another connection's lock in all, milliseconds */
  private readonly busyTimeoutMs: number;

  constructor(options: SqliteStoreOptions) {
    if (typeof options.path !== 'string' || options.path === '') throw new StoreError('invalid', 'SQLite path must be a file name (or ":memory:")');
    this.db = new Database(options.path);
    this.busyTimeoutMs = Math.max(0, Math.round(options.busyTimeoutMs ?? 10_000));
    // while opening, SQLite's own busy handler waits (the switch to WAL may need the lock)
    this.db.pragma(`busy_timeout = ${this.busyTimeoutMs}`);
    this.db.pragma('journal_mode = WAL');
    this.db.pragma(`synchronous = ${options.synchronous === 'FULL' ? 'FULL' : 'NORMAL'}`);
    this.db.pragma('foreign_keys = ON');
    this.db.pragma(`mmap_size = ${Math.max(0, Math.round(options.mmapBytes ?? DEFAULT_MMAP_BYTES))}`);
    this.db.function('roost_run_row', { directOnly: true }, (seq: unknown, lon: unknown, lat: unknown, t: unknown, w: unknown) => {
      this.rowSink?.row(seq as number, lon as number, lat as number, t as number | null, w as number | null);
      return null;
    });
    // from now on a locked database is waited for by timers (see the header), not by sleeping the thread
    this.db.pragma('busy_timeout = 0');
    const self = this as unknown as Record<string, (...args: unknown[]) => Promise<unknown>>;
    for (const name of RETRIED) {
      const method = self[name]!;
      self[name] = (...args: unknown[]) => this.whenUnlocked(() => method.apply(this, args));
    }
  }

  /** Runs one method, trying it again after a pause while another connection holds the lock it needs. */
  private async whenUnlocked<T>(work: () => Promise<T>): Promise<T> {
    const deadline = Date.now() + this.busyTimeoutMs;
    for (let pause = 1; ; pause = Math.min(pause * 2, BUSY_RETRY_MAX_MS)) {
      try {
        return await work();
      } catch (err) {
        if (!isBusy(err) || this.closed || Date.now() + pause > deadline) throw err;
      }
      await new Promise((resolve) => setTimeout(resolve, pause));
    }
  }

  async migrate(): Promise<void> {
    this.db.exec('CREATE TABLE IF NOT EXISTS schema_migrations (version INTEGER PRIMARY KEY, name TEXT NOT NULL, applied_at TEXT NOT NULL)');
    const apply = this.db.transaction(() => {
      const done = new Set((this.db.prepare('SELECT version FROM schema_migrations').pluck().all() as number[]));
      for (const m of MIGRATIONS) {
        if (done.has(m.version)) continue;
        this.db.exec(m.sqlite);
        this.db.prepare('INSERT INTO schema_migrations (version, name, applied_at) VALUES (?, ?, ?)').run(m.version, m.name, nowIso());
      }
    });
    apply.immediate();
  }

  async close(): Promise<void> {
    if (this.closed) return;
    this.closed = true;
    this.db.close();
  }

  // ---------------------------------------------------------------- datasets

  async createDataset(d: NewDataset): Promise<Dataset> {
    checkDatasetId(d.id);
    checkDatasetFields(d);
    const now = nowIso();
    try {
      this.db
        .prepare('INSERT INTO datasets (id, name, settings, id_property, time_window, schedule, webhook, publish, created_at, updated_at) VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?, ?)')
        .run(d.id, d.name, JSON.stringify(d.settings), d.idProperty, d.window, json(d.schedule), json(d.webhook), json(d.publish ?? null), now, now);
    } catch (e) {
      if ((e as { code?: string }).code === 'SQLITE_CONSTRAINT_PRIMARYKEY') throw new StoreError('conflict', `dataset ${JSON.stringify(d.id)} already exists; choose another id or update it`);
      throw e;
    }
    return (await this.getDataset(d.id)) as Dataset;
  }

  async getDataset(id: string): Promise<Dataset | null> {
    if (!canBeDatasetId(id)) return null;
    const row = this.db.prepare('SELECT * FROM datasets WHERE id = ?').get(id) as Row | undefined;
    return row === undefined ? null : datasetFromRow(row);
  }

  async listDatasets(): Promise<Dataset[]> {
    return (this.db.prepare('SELECT * FROM datasets ORDER BY id').all() as Row[]).map(datasetFromRow);
  }

  async updateDataset(id: string, patch: DatasetPatch): Promise<Dataset> {
    checkDatasetFields(patch);
    const sets: string[] = [];
    const args: unknown[] = [];
    const put = (col: string, v: unknown): void => {
      sets.push(`${col} = ?`);
      args.push(v);
    };
    if (patch.name !== undefined) put('name', patch.name);
    if (patch.settings !== undefined) put('settings', JSON.stringify(patch.settings));
    if (patch.idProperty !== undefined) put('id_property', patch.idProperty);
    if (patch.window !== undefined) put('time_window', patch.window);
    if (patch.schedule !== undefined) put('schedule', json(patch.schedule));
    if (patch.webhook !== undefined) put('webhook', json(patch.webhook));
    if (patch.publish !== undefined) put('publish', json(patch.publish));
    put('updated_at', nowIso());
    const info = this.db.prepare(`UPDATE datasets SET ${sets.join(', ')} WHERE id = ?`).run(...args, id);
    if (info.changes === 0) throw notFoundDataset(id);
    return (await this.getDataset(id)) as Dataset;
  }

  async deleteDataset(id: string): Promise<boolean> {
    if (!canBeDatasetId(id)) return false;
    return this.db.prepare('DELETE FROM datasets WHERE id = ?').run(id).changes > 0;
  }

  private requireDataset(id: string): void {
    if (this.db.prepare('SELECT 1 FROM datasets WHERE id = ?').get(id) === undefined) throw notFoundDataset(id);
  }

  // ------------------------------------------------------------ observations

  async ingest(datasetId: string, records: ObservationRecord[], options: IngestOptions): Promise<IngestResult> {
    checkRecords(records);
    const lookup = this.db.prepare('SELECT obs_id, content_hash FROM observations WHERE dataset_id = ? AND obs_id = ?').raw();
    const insert = this.db.prepare('INSERT INTO observations (dataset_id, obs_id, lon, lat, observed_at, weight, content_hash, feature) VALUES (?, ?, ?, ?, ?, ?, ?, ?)');
    const replace = this.db.prepare('UPDATE observations SET lon = ?, lat = ?, observed_at = ?, weight = ?, content_hash = ?, feature = ? WHERE dataset_id = ? AND obs_id = ?');
    const tx = this.db.transaction((): IngestResult => {
      this.requireDataset(datasetId);
      const stored = new Map<string, string>();
      for (const id of batchIds(records)) {
        const row = lookup.get(datasetId, id) as [string, string] | undefined;
        if (row !== undefined) stored.set(row[0], row[1]);
      }
      const plan = planIngest(records, stored, options);
      for (const r of plan.insert) insert.run(datasetId, r.id, r.lon, r.lat, r.observedAt, r.weight, r.contentHash, r.feature);
      for (const r of plan.replace) replace.run(r.lon, r.lat, r.observedAt, r.weight, r.contentHash, r.feature, datasetId, r.id);
      return plan.result;
    });
    return tx.immediate();
  }

  async listObservations(datasetId: string, options: ListObservationsOptions): Promise<ObservationPage> {
    checkQuery(options);
    checkLimit(options.limit);
    const after = options.cursor === undefined ? 0 : decodeCursor(options.cursor);
    const { clause, args } = whereClause(datasetId, options);
    const rows = this.db
      .prepare(`SELECT seq, feature, lon, lat FROM observations WHERE ${clause} AND seq > ? ORDER BY seq LIMIT ?`)
      .raw()
      .all(...args, after, options.limit + 1) as [number, string, number, number][];
    return observationPage(rows, options.limit);
  }

  async deleteObservation(datasetId: string, id: string): Promise<boolean> {
    if (!plainText(id)) return false;
    return this.db.prepare('DELETE FROM observations WHERE dataset_id = ? AND obs_id = ?').run(datasetId, id).changes > 0;
  }

  async countObservations(datasetId: string, query: ObservationQuery = {}): Promise<number> {
    checkQuery(query);
    const { clause, args } = whereClause(datasetId, query);
    return this.db.prepare(`SELECT count(*) FROM observations WHERE ${clause}`).pluck().get(...args) as number;
  }

  async getObservation(datasetId: string, id: string): Promise<string | null> {
    const row = this.db.prepare('SELECT feature FROM observations WHERE dataset_id = ? AND obs_id = ?').pluck().get(datasetId, id) as string | undefined;
    return row ?? null;
  }

  async observationExtent(datasetId: string): Promise<ObservationExtent> {
    const [count, w, s, e, n, first, last] = this.db
      .prepare('SELECT count(*), min(lon), min(lat), max(lon), max(lat), min(observed_at), max(observed_at) FROM observations WHERE dataset_id = ?')
      .raw()
      .get(datasetId) as [number, number | null, number | null, number | null, number | null, number | null, number | null];
    if (count === 0) return { count, bbox: null, first, last };
    // least and greatest longitude per bin, for a range that may cross ±180 (extent.ts)
    const bins = this.db.prepare(`SELECT min(lon), max(lon) FROM observations WHERE dataset_id = ? GROUP BY ${LON_BIN_SQL} ORDER BY ${LON_BIN_SQL}`).raw().all(datasetId) as [number, number][];
    const [west, east] = bins.length > 0 ? lonRange(bins) : [w!, e!];
    return { count, bbox: [west, s!, east, n!], first, last };
  }

  async loadForRun(datasetId: string, query: Omit<ObservationQuery, 'bbox'> = {}): Promise<RunInput> {
    checkQuery(query);
    const { clause, args } = whereClause(datasetId, query);
    // One read transaction so that every read below sees the same snapshot.
    const read = this.db.transaction((): RunInput => {
      const [count, first, last] = this.db.prepare('SELECT count(*), min(seq), max(seq) FROM observations WHERE dataset_id = ?').raw().get(datasetId) as [number, number | null, number | null];
      const cols = new RunColumns(count);
      if (count === 0 || first === null || last === null) return cols.finish(new PackedTexts());
      // Rows are wanted in seq order, and seq is the table's rowid. Through the (dataset_id, seq)
      // index every row costs one b-tree descent into the table (about 3.5 µs; 3.5 s for 1 000 000,
      // measured); walking the table's own seq range costs about 0.3 µs per row read, other
      // datasets' rows included. So the walk is taken when the dataset fills at least a quarter of
      // its seq range (the common case of one large dataset), the index otherwise. Both name
      // their access path, so the rows come in seq order whatever the planner would prefer.
      const from = count * 4 >= last - first + 1 ? 'observations NOT INDEXED' : 'observations INDEXED BY observations_by_seq';
      const where = `seq BETWEEN ? AND ? AND ${clause}`;
      // The numbers go straight from SQLite into the typed arrays through a function called once
      // per row (0.8 µs a row against 1.9 µs for iterating rows, measured on 1 000 000).
      // The ids come from the same walk joined by "\n" into one string and are split in one go,
      // which costs less than handing each to the function (0.1 s per 1 000 000, measured); an
      // id holding a line break sends them through rows instead.
      this.rowSink = cols;
      let joinedIds: string | null;
      try {
        const row = this.db.prepare(`SELECT count(roost_run_row(seq, lon, lat, observed_at, weight)), CAST(group_concat(obs_id, char(10)) AS BLOB) FROM ${from} WHERE ${where}`).raw().get(first, last, ...args) as [number, Buffer | null];
        joinedIds = row[1] === null ? null : decodeText(row[1]);
      } finally {
        this.rowSink = null;
      }
      if (!cols.ascending()) return this.loadByRows(from, where, [first, last, ...args]);
      const ids = cols.length === 0 ? [] : (joinedIds ?? '').split('\n');
      cols.ids = ids.length === cols.length ? ids : (this.db.prepare(`SELECT obs_id FROM ${from} WHERE ${where} ORDER BY seq`).pluck().all(first, last, ...args) as string[]);
      if (cols.ids.length !== cols.length) throw new Error('observations changed between two reads of one snapshot');
      // The texts in chunks of TEXT_CHUNK rows, each chunk one buffer of UTF-8 (see PackedTexts).
      const texts = new PackedTexts();
      const joined = this.db.prepare(`SELECT CAST(group_concat(feature, char(10)) AS BLOB) FROM ${from} WHERE ${where}`).pluck();
      const each = this.db.prepare(`SELECT feature FROM ${from} WHERE ${where} ORDER BY seq`).pluck();
      const seqs = cols.seqs();
      for (let k = 0; k < seqs.length; k += TEXT_CHUNK) {
        const m = Math.min(TEXT_CHUNK, seqs.length - k);
        const range = [seqs[k], seqs[k + m - 1], ...args];
        if (!texts.addJoinedBytes(joined.get(...range) as Buffer, m)) texts.addEach(each.all(...range) as string[]);
      }
      return cols.finish(texts);
    });
    return read.deferred();
  }

  /** The plain way, row by row in seq order: used should SQLite ever call the row function out of order. */
  private loadByRows(from: string, where: string, args: unknown[]): RunInput {
    const cols = new RunColumns(0);
    const texts: string[] = [];
    const stmt = this.db.prepare(`SELECT seq, obs_id, lon, lat, observed_at, weight, feature FROM ${from} WHERE ${where} ORDER BY seq`).raw();
    for (const r of stmt.iterate(...args) as IterableIterator<[number, string, number, number, number | null, number | null, string]>) {
      cols.ids.push(r[1]);
      cols.row(r[0], r[2], r[3], r[4], r[5]);
      texts.push(r[6]);
    }
    return cols.finish(texts);
  }

  async getPositions(datasetId: string, ids: string[]): Promise<Map<string, { lon: number; lat: number }>> {
    const out = new Map<string, { lon: number; lat: number }>();
    const stmt = this.db.prepare('SELECT lon, lat FROM observations WHERE dataset_id = ? AND obs_id = ?').raw();
    for (const id of ids) {
      const row = stmt.get(datasetId, id) as [number, number] | undefined;
      if (row !== undefined) out.set(id, { lon: row[0], lat: row[1] });
    }
    return out;
  }

  // -------------------------------------------------------------------- runs

  async createRun(r: NewRun): Promise<Run> {
    checkNewRun(r);
    const tx = this.db.transaction((): number => {
      this.requireDataset(r.datasetId);
      return this.insertRun(r, nowIso());
    });
    return this.runBySeq(tx.immediate()) as Run;
  }

  async createScheduledRun(r: NewRun, slotIso: string): Promise<Run | null> {
    checkNewRun(r);
    const slot = normaliseSlot(slotIso);
    const tx = this.db.transaction((): number | null => {
      this.requireDataset(r.datasetId);
      const now = nowIso();
      if (this.db.prepare('INSERT INTO schedule_slots (dataset_id, slot, claimed_at) VALUES (?, ?, ?) ON CONFLICT DO NOTHING').run(r.datasetId, slot, now).changes !== 1) return null;
      return this.insertRun(r, now);
    });
    const seq = tx.immediate();
    return seq === null ? null : this.runBySeq(seq);
  }

  /** Inserts a queued run inside the caller's transaction; returns its seq. */
  private insertRun(r: NewRun, now: string): number {
    return Number(
      this.db
        .prepare(`INSERT INTO runs (dataset_id, status, trigger, settings, created_at, updated_at, updated_ms) VALUES (?, 'queued', ?, ?, ?, ?, ?)`)
        .run(r.datasetId, r.trigger, JSON.stringify(r.settings), now, now, Date.parse(now)).lastInsertRowid,
    );
  }

  private runBySeq(seq: number): Run | null {
    const row = this.db.prepare('SELECT * FROM runs WHERE seq = ?').get(seq) as Row | undefined;
    return row === undefined ? null : runFromRow(row);
  }

  private requireRunSeq(runId: string): number {
    const seq = parseRunId(runId);
    if (seq === null || this.db.prepare('SELECT 1 FROM runs WHERE seq = ?').get(seq) === undefined) throw new StoreError('not-found', `there is no run ${JSON.stringify(runId)}`);
    return seq;
  }

  async claimNextRun(workerId: string, leaseMs = DEFAULT_LEASE_MS): Promise<Run | null> {
    checkLease(workerId, leaseMs);
    const tx = this.db.transaction((): number | null => {
      const seq = this.db.prepare(`SELECT seq FROM runs WHERE status = 'queued' ORDER BY seq LIMIT 1`).pluck().get() as number | undefined;
      if (seq === undefined) return null;
      this.claim(seq, workerId, leaseMs);
      return seq;
    });
    const seq = tx.immediate();
    return seq === null ? null : this.runBySeq(seq);
  }

  async claimRun(runId: string, workerId: string, leaseMs = DEFAULT_LEASE_MS): Promise<Run> {
    checkLease(workerId, leaseMs);
    const tx = this.db.transaction((): number => {
      const seq = this.requireRunSeq(runId);
      const status = this.db.prepare('SELECT status FROM runs WHERE seq = ?').pluck().get(seq) as RunStatus;
      if (status !== 'queued') throw new StoreError('conflict', `run ${runId} is ${status}, not queued`);
      this.claim(seq, workerId, leaseMs);
      return seq;
    });
    return this.runBySeq(tx.immediate()) as Run;
  }

  /** Marks a queued run running under a new lease, inside the caller's transaction. */
  private claim(seq: number, workerId: string, leaseMs: number): void {
    const now = nowIso();
    const ms = Date.parse(now);
    this.db
      .prepare(`UPDATE runs SET status = 'running', worker_id = ?, started_at = ?, updated_at = ?, updated_ms = ?, lease_until_ms = ? WHERE seq = ?`)
      .run(workerId, now, now, ms, ms + leaseMs, seq);
  }

  async renewRunLease(runId: string, workerId: string, leaseMs: number): Promise<boolean> {
    checkLease(workerId, leaseMs);
    const seq = parseRunId(runId);
    if (seq === null) return false;
    const now = Date.now();
    const changed = this.db
      .prepare(`UPDATE runs SET lease_until_ms = ?, updated_at = ?, updated_ms = ? WHERE seq = ? AND status = 'running' AND worker_id = ?`)
      .run(now + leaseMs, new Date(now).toISOString(), now, seq, workerId).changes;
    return changed === 1;
  }

  async reclaimExpiredRuns(maxInterruptions: number): Promise<{ requeued: string[]; failed: string[] }> {
    const tx = this.db.transaction(() => {
      const now = nowIso();
      const ms = Date.parse(now);
      const rows = this.db.prepare(`SELECT seq, interruptions FROM runs WHERE status = 'running' AND lease_until_ms < ? ORDER BY seq`).all(ms) as { seq: number; interruptions: number }[];
      const requeue = this.db.prepare(
        `UPDATE runs SET status = 'queued', progress = 0, worker_id = NULL, started_at = NULL, lease_until_ms = NULL, interruptions = ?, error = ?, updated_at = ?, updated_ms = ? WHERE seq = ?`,
      );
      const fail = this.db.prepare(`UPDATE runs SET status = 'failed', lease_until_ms = NULL, interruptions = ?, error = ?, finished_at = ?, updated_at = ?, updated_ms = ? WHERE seq = ?`);
      const out = { requeued: [] as string[], failed: [] as string[] };
      for (const r of rows) {
        const times = r.interruptions + 1;
        if (times >= maxInterruptions) {
          fail.run(times, interruptedMessage(times, true), now, now, ms, r.seq);
          out.failed.push(formatRunId(r.seq));
        } else {
          requeue.run(times, interruptedMessage(times, false), now, ms, r.seq);
          out.requeued.push(formatRunId(r.seq));
        }
      }
      return out;
    });
    return tx.immediate();
  }

  /** Throws 'conflict' unless the run's status is one of `ifStatus` and (when given) `ifWorker` holds it. */
  private requireClaim(runId: string, seq: number, ifStatus: RunStatus[] | undefined, ifWorker: string | undefined): void {
    if (ifStatus === undefined && ifWorker === undefined) return;
    const row = this.db.prepare('SELECT status, worker_id FROM runs WHERE seq = ?').get(seq) as { status: RunStatus; worker_id: string | null };
    if (ifStatus !== undefined && !ifStatus.includes(row.status)) throw new StoreError('conflict', `run ${runId} is ${row.status}, not ${ifStatus.join(' or ')}`);
    if (ifWorker !== undefined && row.worker_id !== ifWorker) throw new StoreError('conflict', `run ${runId} was taken over by another process`);
  }

  async updateRun(runId: string, patch: RunPatch, ifStatus?: RunStatus[], ifWorker?: string): Promise<Run> {
    checkRunPatch(patch);
    if (ifStatus !== undefined) checkStatuses(ifStatus);
    const tx = this.db.transaction((): number => {
      const seq = this.requireRunSeq(runId);
      this.requireClaim(runId, seq, ifStatus, ifWorker);
      this.patchRun(seq, patch);
      return seq;
    });
    return this.runBySeq(tx.immediate()) as Run;
  }

  /** Applies a checked patch to run `seq` inside the caller's transaction. */
  private patchRun(seq: number, patch: RunPatch): void {
    const sets: string[] = [];
    const args: unknown[] = [];
    const put = (col: string, v: unknown): void => {
      sets.push(`${col} = ?`);
      args.push(v);
    };
    if (patch.status !== undefined) {
      put('status', patch.status);
      // a lease belongs to a running run only
      if (patch.status !== 'running') put('lease_until_ms', null);
    }
    if (patch.progress !== undefined) put('progress', patch.progress);
    if (patch.error !== undefined) put('error', patch.error);
    if (patch.startedAt !== undefined) put('started_at', patch.startedAt);
    if (patch.finishedAt !== undefined) put('finished_at', patch.finishedAt);
    if (patch.summary !== undefined) put('summary', json(patch.summary));
    if (patch.timings !== undefined) put('timings', json(patch.timings));
    const now = nowIso();
    put('updated_at', now);
    put('updated_ms', Date.parse(now));
    this.db.prepare(`UPDATE runs SET ${sets.join(', ')} WHERE seq = ?`).run(...args, seq);
  }

  async countRuns(status: RunStatus): Promise<number> {
    checkStatuses([status]);
    return this.db.prepare('SELECT count(*) FROM runs WHERE status = ?').pluck().get(status) as number;
  }

  async getRun(datasetId: string, runId: string): Promise<Run | null> {
    const seq = parseRunId(runId);
    if (seq === null) return null;
    const row = this.db.prepare('SELECT * FROM runs WHERE seq = ? AND dataset_id = ?').get(seq, datasetId) as Row | undefined;
    return row === undefined ? null : runFromRow(row);
  }

  async listRuns(datasetId: string, options: { limit: number; cursor?: string }): Promise<RunPage> {
    checkLimit(options.limit, 1000);
    const before = options.cursor === undefined ? Number.MAX_SAFE_INTEGER : decodeCursor(options.cursor);
    const rows = this.db.prepare('SELECT * FROM runs WHERE dataset_id = ? AND seq < ? ORDER BY seq DESC LIMIT ?').all(datasetId, before, options.limit + 1) as Row[];
    const more = rows.length > options.limit;
    if (more) rows.pop();
    const runs = rows.map(runFromRow);
    const last = rows[rows.length - 1];
    return { runs, nextCursor: more && last !== undefined ? encodeCursor(last.seq as number) : null };
  }

  async latestRun(datasetId: string, status: RunStatus = 'succeeded', before?: string): Promise<Run | null> {
    checkStatuses([status]);
    const limit = before === undefined ? Number.MAX_SAFE_INTEGER : parseRunId(before);
    if (limit === null) throw new StoreError('invalid', `${JSON.stringify(before)} is not a run id`);
    // the key and update time only: the row itself (its JSON) is read when not kept already
    const key = this.db.prepare('SELECT seq, updated_at FROM runs WHERE dataset_id = ? AND status = ? AND seq < ? ORDER BY seq DESC LIMIT 1').get(datasetId, status, limit) as Row | undefined;
    if (key === undefined) return null;
    return this.finished.get(key.seq as number, key.updated_at as string, async () => this.runBySeq(key.seq as number));
  }

  async saveRunResult(runId: string, result: RunResult, ifWorker?: string): Promise<void> {
    const sources = LAYER_NAMES.map((name) => [name, layerSource(name, result.layers?.[name])] as const);
    const tx = this.db.transaction(() => {
      const began = Date.now();
      const seq = this.requireRunSeq(runId);
      if (ifWorker !== undefined) this.requireClaim(runId, seq, ['running'], ifWorker);
      this.db.prepare('DELETE FROM run_layer_parts WHERE run_seq = ?').run(seq);
      this.db.prepare('DELETE FROM run_hotspots WHERE run_seq = ?').run(seq);
      // Pieces given as UTF-8 bytes are bound as a BLOB and cast to TEXT, which keeps their bytes
      // ("When casting a BLOB value to TEXT, the sequence of bytes that make up the BLOB is
      // interpreted as text encoded using the database encoding", source:
      // https://www.sqlite.org/lang_expr.html#castexpr): the same stored text as binding a string,
      // without making one. Layers given on demand are produced here, piece by piece.
      const part = this.db.prepare('INSERT INTO run_layer_parts (run_seq, layer, part, body) VALUES (?, ?, ?, CAST(? AS TEXT))');
      for (const [name, pieces] of sources) {
        let k = 0;
        for (const body of pieces()) part.run(seq, name, k++, body);
      }
      const hs = this.db.prepare('INSERT INTO run_hotspots (run_seq, hotspot_id, track_id, members, core_members, member_count, hull, figures) VALUES (?, ?, ?, ?, ?, ?, ?, ?)');
      for (const h of result.hotspots) {
        hs.run(seq, h.hotspotId, h.trackId, JSON.stringify(h.members), JSON.stringify(h.coreMembers), h.members.length, h.hull, json(h.figures ?? null));
      }
      // While this transaction holds the write lock no heartbeat can renew the claim, and a large
      // result (layers made as they are stored) may take longer than a lease: the time held is
      // added to the lease, so the claim comes out of the save with the time it had going in.
      if (ifWorker !== undefined) this.db.prepare('UPDATE runs SET lease_until_ms = lease_until_ms + ? WHERE seq = ? AND worker_id = ?').run(Date.now() - began, seq, ifWorker);
      if (result.finish !== undefined) {
        const patch = result.finish();
        checkRunPatch(patch);
        this.patchRun(seq, patch);
      }
    });
    tx.immediate();
  }

  async getRunLayer(runId: string, layer: LayerName): Promise<string | null> {
    return joinPieces(await this.getRunLayerPieces(runId, layer));
  }

  async getRunLayerPieces(runId: string, layer: LayerName): Promise<AsyncIterable<string> | null> {
    if (!LAYER_NAMES.includes(layer)) throw new StoreError('invalid', `layer must be one of ${LAYER_NAMES.join(', ')}`);
    const seq = this.requireRunSeq(runId);
    // each read a query of its own: a statement left iterating would keep the connection busy
    const stmt = this.db.prepare('SELECT body FROM run_layer_parts WHERE run_seq = ? AND layer = ? AND part >= ? ORDER BY part LIMIT ?').pluck();
    return storedPieces((from, count) => stmt.all(seq, layer, from, count) as string[]);
  }

  async getRunLayerBytes(runId: string, layer: LayerName): Promise<AsyncIterable<Buffer> | null> {
    if (!LAYER_NAMES.includes(layer)) throw new StoreError('invalid', `layer must be one of ${LAYER_NAMES.join(', ')}`);
    const seq = this.requireRunSeq(runId);
    // SQLite keeps TEXT as UTF-8: the cast hands its bytes over as they are, no string is made
    const stmt = this.db.prepare('SELECT CAST(body AS BLOB) FROM run_layer_parts WHERE run_seq = ? AND layer = ? AND part >= ? ORDER BY part LIMIT ?').pluck();
    return storedPieces((from, count) => stmt.all(seq, layer, from, count) as Buffer[], LAYER_BYTE_PIECES_PER_READ);
  }

  async getRunHotspots(runId: string): Promise<RunHotspot[]> {
    const seq = this.requireRunSeq(runId);
    const rows = this.db.prepare('SELECT * FROM run_hotspots WHERE run_seq = ? ORDER BY hotspot_id').all(seq) as Row[];
    return rows.map((r) => storedHotspot(r.hotspot_id as number, r.track_id as string | null, parseMembers(r.members as string, r.member_count as number), r.core_members as string, r.hull as string, parseJson(r.figures)));
  }

  async getTrack(datasetId: string, trackId: string): Promise<TrackPoint[]> {
    if (!plainText(trackId)) return [];
    const rows = this.db
      .prepare(`SELECT h.run_seq, h.hotspot_id, h.member_count, h.hull, h.figures FROM run_hotspots h JOIN runs r ON r.seq = h.run_seq WHERE h.track_id = ? AND r.dataset_id = ? AND r.status = 'succeeded' ORDER BY h.run_seq, h.hotspot_id`)
      .all(trackId, datasetId) as Row[];
    return rows.map((r) => ({
      runId: formatRunId(r.run_seq as number),
      hotspotId: r.hotspot_id as number,
      memberCount: r.member_count as number,
      hull: r.hull as string,
      figures: parseJson(r.figures),
    }));
  }

  async listTracks(datasetId: string, options: ListTracksOptions): Promise<TrackPage> {
    const args: unknown[] = [];
    const sql = trackListSql('sqlite', (v) => (args.push(v), '?'), datasetId, options);
    const rows = this.db.prepare(sql).all(...args) as Row[];
    return trackPage(rows, options.limit, (v) => (v ?? null) as string | null, parseJson);
  }

  async markInterruptedRuns(reason: string, filter: InterruptedRunFilter = {}): Promise<string[]> {
    const now = nowIso();
    return this.interrupted(filter, `status = 'failed', error = ?, finished_at = ?, lease_until_ms = NULL, updated_at = ?, updated_ms = ?`, [reason, now, now, Date.parse(now)]);
  }

  async requeueInterruptedRuns(filter: InterruptedRunFilter = {}): Promise<string[]> {
    const now = nowIso();
    return this.interrupted(filter, `status = 'queued', progress = 0, worker_id = NULL, started_at = NULL, lease_until_ms = NULL, updated_at = ?, updated_ms = ?`, [now, Date.parse(now)]);
  }

  private interrupted(filter: InterruptedRunFilter, set: string, setArgs: unknown[]): string[] {
    let where = `status = 'running'`;
    const args: unknown[] = [];
    if (filter.workerId !== undefined) {
      where += ' AND worker_id = ?';
      args.push(filter.workerId);
    }
    if (filter.staleMs !== undefined) {
      where += ' AND updated_ms <= ?';
      args.push(Date.now() - filter.staleMs);
    }
    const tx = this.db.transaction((): number[] => {
      const seqs = this.db.prepare(`SELECT seq FROM runs WHERE ${where} ORDER BY seq`).pluck().all(...args) as number[];
      const upd = this.db.prepare(`UPDATE runs SET ${set} WHERE seq = ?`);
      for (const s of seqs) upd.run(...setArgs, s);
      return seqs;
    });
    return tx.immediate().map(formatRunId);
  }

  async reserveTrackNumbers(datasetId: string, count: number): Promise<number> {
    checkTrackCount(count);
    const tx = this.db.transaction((): number => {
      this.requireDataset(datasetId);
      const last = this.db
        .prepare('INSERT INTO track_counters (dataset_id, last_seq) VALUES (?, ?) ON CONFLICT (dataset_id) DO UPDATE SET last_seq = last_seq + excluded.last_seq RETURNING last_seq')
        .pluck()
        .get(datasetId, count) as number;
      return last - count + 1;
    });
    return tx.immediate();
  }

  // -------------------------------------------------------- keys and audit

  async createKey(k: NewApiKey): Promise<ApiKey> {
    checkNewKey(k);
    try {
      this.db
        .prepare('INSERT INTO api_keys (id, token_hash, role, dataset_id, label, created_at) VALUES (?, ?, ?, ?, ?, ?)')
        .run(k.id, k.tokenHash, k.role, k.datasetId, k.label, nowIso());
    } catch (e) {
      const code = (e as { code?: string }).code;
      if (code === 'SQLITE_CONSTRAINT_FOREIGNKEY') throw notFoundDataset(k.datasetId ?? '');
      if (code === 'SQLITE_CONSTRAINT_UNIQUE') throw new StoreError('conflict', `a key with id ${JSON.stringify(k.id)} or the same token is already stored`);
      throw e;
    }
    return keyFromRow(this.db.prepare('SELECT * FROM api_keys WHERE id = ?').get(k.id) as Row);
  }

  async findKey(tokenHash: string): Promise<ApiKey | null> {
    const row = this.db.prepare('SELECT * FROM api_keys WHERE token_hash = ? AND revoked_at IS NULL').get(tokenHash) as Row | undefined;
    return row === undefined ? null : keyFromRow(row);
  }

  async listKeys(): Promise<ApiKey[]> {
    return (this.db.prepare('SELECT * FROM api_keys ORDER BY seq').all() as Row[]).map(keyFromRow);
  }

  async revokeKey(id: string): Promise<ApiKey | null> {
    this.db.prepare('UPDATE api_keys SET revoked_at = ? WHERE id = ? AND revoked_at IS NULL').run(nowIso(), id);
    const row = this.db.prepare('SELECT * FROM api_keys WHERE id = ?').get(id) as Row | undefined;
    return row === undefined ? null : keyFromRow(row);
  }

  async countKeys(): Promise<number> {
    return this.db.prepare('SELECT count(*) FROM api_keys WHERE revoked_at IS NULL').pluck().get() as number;
  }

  async appendAudit(r: NewAuditRecord): Promise<void> {
    checkAuditRecord(r);
    this.db
      .prepare('INSERT INTO audit_records (at, key_id, actor, action, dataset_id, target, status) VALUES (?, ?, ?, ?, ?, ?, ?)')
      .run(nowIso(), r.keyId, r.actor, r.action, r.datasetId, r.target, r.status);
  }

  async listAudit(options: { limit: number; cursor?: string }): Promise<AuditPage> {
    checkLimit(options.limit);
    const before = options.cursor === undefined ? Number.MAX_SAFE_INTEGER : decodeCursor(options.cursor);
    const rows = this.db.prepare('SELECT * FROM audit_records WHERE seq < ? ORDER BY seq DESC LIMIT ?').all(before, options.limit + 1) as Row[];
    return auditPage(rows, options.limit);
  }
}

/**
 * UTF-8 bytes as a string. Text that is all ASCII (the usual case for feature texts) is decoded
 * byte for byte, several times faster than UTF-8 decoding: SQLite hands large joined texts over
 * as BLOBs for this reason.
 */
function decodeText(b: Buffer): string {
  return isAscii(b) ? b.toString('latin1') : b.toString('utf8');
}

function json(v: unknown): string | null {
  return v === null || v === undefined ? null : JSON.stringify(v);
}

function parseJson<T = Record<string, unknown>>(v: unknown): T | null {
  return v === null || v === undefined ? null : (JSON.parse(v as string) as T);
}

function notFoundDataset(id: string): StoreError {
  return new StoreError('not-found', `there is no dataset ${JSON.stringify(id)}`);
}

function datasetFromRow(r: Row): Dataset {
  return {
    id: r.id as string,
    name: r.name as string,
    settings: JSON.parse(r.settings as string) as Record<string, unknown>,
    idProperty: r.id_property as string | null,
    window: r.time_window as string | null,
    schedule: parseJson(r.schedule),
    webhook: parseJson(r.webhook),
    publish: parseJson(r.publish),
    createdAt: r.created_at as string,
    updatedAt: r.updated_at as string,
  };
}

function runFromRow(r: Row): Run {
  return {
    id: formatRunId(r.seq as number),
    datasetId: r.dataset_id as string,
    status: r.status as RunStatus,
    trigger: r.trigger as Run['trigger'],
    settings: JSON.parse(r.settings as string) as Record<string, unknown>,
    progress: r.progress as number,
    error: r.error as string | null,
    workerId: r.worker_id as string | null,
    createdAt: r.created_at as string,
    startedAt: r.started_at as string | null,
    finishedAt: r.finished_at as string | null,
    updatedAt: r.updated_at as string,
    leaseUntil: r.lease_until_ms == null ? null : new Date(r.lease_until_ms as number).toISOString(),
    interruptions: (r.interruptions as number | undefined) ?? 0,
    summary: parseJson(r.summary),
    timings: parseJson(r.timings),
  };
}

/** Quotes a property name as one label of an SQLite JSON path. */
function jsonPathLabel(property: string): string {
  return `$.properties."${property.replace(/\\/g, '\\\\').replace(/"/g, '\\"')}"`;
}

/** The WHERE clause for a dataset and a query; `?` parameters in order. */
function whereClause(datasetId: string, q: ObservationQuery): { clause: string; args: unknown[] } {
  const parts = ['dataset_id = ?'];
  const args: unknown[] = [datasetId];
  if (q.bbox !== undefined) {
    const [w, s, e, n] = q.bbox;
    parts.push('lat >= ? AND lat <= ?');
    args.push(s, n);
    if (w <= e) {
      parts.push('lon >= ? AND lon <= ?');
      args.push(w, e);
    } else {
      parts.push('(lon >= ? OR lon <= ?)');
      args.push(w, e);
    }
  }
  if (q.from !== undefined) {
    parts.push('observed_at >= ?');
    args.push(q.from);
  }
  if (q.to !== undefined) {
    parts.push('observed_at < ?');
    args.push(q.to);
  }
  if (q.untimed === true) parts.push('observed_at IS NULL');
  for (const m of whereMatches(q.where)) {
    const path = jsonPathLabel(m.property);
    // `->` gives the value's JSON text (its first character tells the type), `->>` its SQL value.
    const alts = [`(substr(feature -> ?, 1, 1) = '"' AND feature ->> ? = ?)`];
    args.push(path, path, m.text);
    if (m.bool !== null || m.isNull) {
      alts.push('feature -> ? = ?');
      args.push(path, m.text);
    }
    if (m.number !== null) {
      alts.push(`(substr(feature -> ?, 1, 1) IN ('-', '0', '1', '2', '3', '4', '5', '6', '7', '8', '9') AND feature ->> ? = ?)`);
      args.push(path, path, m.number);
    }
    parts.push(`(${alts.join(' OR ')})`);
  }
  return { clause: parts.join(' AND '), args };
}
