/**
 * The PostgreSQL engine (pg): a connection pool whose connections all use one schema (configurable,
 * so several stores or test files can share a database without colliding). Settings and summaries
 * are JSONB; feature texts are TEXT so they come back byte for byte. Ingestion serialises per
 * dataset by locking the dataset row, so two instances posting the same ids cannot both insert;
 * run claims use `FOR UPDATE SKIP LOCKED`; schedule slots are a unique row.
 */
import { BIN_DEGREES, lonRange } from './extent.js';
import { Readable } from 'node:stream';
import { pipeline } from 'node:stream/promises';
import pg from 'pg';
import { from as copyFrom } from 'pg-copy-streams';
import type {
  ApiKey,
  AuditPage,
  Dataset,
  DatasetPatch,
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
  RunInput,
  RunPage,
  RunPatch,
  RunResult,
  RunStatus,
  Store,
  TrackPoint,
  ListTracksOptions,
  TrackPage,
} from './store.js';
import { LAYER_NAMES, type LayerName } from '../run/layers.js';
import { StoreError } from './store.js';
import { auditPage, decodeCursor, encodeCursor, observationPage } from './cursors.js';
import { batchIds, planIngest } from './ingest-plan.js';
import { keyFromRow } from './key-rows.js';
import { joinPieces, storedPieces } from './layer-pieces.js';
import { layerSource, pgHotspotCopyData, pgLayerCopyData } from './layer-write.js';
import { DEFAULT_LEASE_MS, FinishedRuns, formatRunId, interruptedMessage, nowIso, parseMembers, parseRunId, storedHotspot } from './runs.js';
import { canBeDatasetId, checkAuditRecord, checkDatasetFields, checkDatasetId, checkLease, checkLimit, checkNewKey, checkNewRun, checkQuery, checkRecords, checkRunPatch, checkStatuses, checkTrackCount, normaliseSlot, plainText } from './validation.js';
import { whereMatches } from './where-match.js';
import { trackListSql, trackPage } from './track-list.js';
import { MIGRATIONS } from './migrations.js';
import { RUN_COPY_COLUMNS, RunCopyQuery } from './pg-copy.js';

/** The bin of a longitude (extent.ts): floor, since PostgreSQL's integer cast rounds. */
const LON_BIN_SQL_PG = `floor((lon + 180) * ${1 / BIN_DEGREES})::int`;

export interface PostgresStoreOptions {
  /** postgres:// or postgresql:// URL */
  connectionString: string;
  /** schema holding the tables, created by `migrate()`; default 'public' */
  schema?: string;
  /** most connections the pool opens; default 10 */
  poolSize?: number;
}

type Row = Record<string, unknown>;

const SCHEMA = /^[a-z_][a-z0-9_]{0,62}$/;
/** rows per INSERT/UPDATE statement when a batch is large */
const WRITE_CHUNK = 5000;

/** Stored hashes of a batch's ids (those not stored are left out). */
const INGEST_HASHES = `SELECT u.id, h.content_hash FROM unnest($2::text[]) AS u(id)
  CROSS JOIN LATERAL (SELECT content_hash FROM observations WHERE dataset_id = $1 AND obs_id = u.id) h`;

/** New observations go in by COPY (text format): 1 000 rows in 22 ms against 28 ms for an INSERT over unnest()ed arrays, measured. */
const LAYER_COPY = 'COPY run_layer_parts (run_seq, layer, part, body) FROM STDIN (FORMAT binary)';
const HOTSPOT_COPY = 'COPY run_hotspots (run_seq, hotspot_id, track_id, members, core_members, member_count, hull, figures) FROM STDIN (FORMAT binary)';
const INGEST_COPY = 'COPY observations (dataset_id, obs_id, lon, lat, observed_at, weight, content_hash, feature) FROM STDIN';

/** int8 (bigint) as a JavaScript number: sequences and epoch milliseconds stay far below 2^53. */
const types = {
  getTypeParser(oid: number, format?: 'text' | 'binary'): unknown {
    if (oid === 20 && format !== 'binary') return (v: string) => Number(v);
    return (pg.types.getTypeParser as (oid: number, format?: string) => unknown)(oid, format);
  },
};

/** Opens a PostgreSQL store; call `migrate()` before use. */
export function openPostgresStore(options: PostgresStoreOptions): PostgresStore {
  return new PostgresStore(options);
}

export class PostgresStore implements Store {
  readonly engine = 'postgres' as const;
  readonly schema: string;
  readonly pool: pg.Pool;
  private closed = false;
  /** finished runs as last read (see FinishedRuns) */
  private readonly finished = new FinishedRuns<Run>();

  constructor(options: PostgresStoreOptions) {
    const schema = options.schema ?? 'public';
    if (!SCHEMA.test(schema)) throw new StoreError('invalid', `schema ${JSON.stringify(schema)} must be a lower-case SQL name (a-z, 0-9, _; not starting with a digit)`);
    this.schema = schema;
    this.pool = new pg.Pool({
      connectionString: options.connectionString,
      max: options.poolSize ?? 10,
      options: `-c search_path=${schema}`,
      types: types as unknown as pg.CustomTypesConfig,
    });
    // An idle connection dropped by the server must not crash the process; the next query reconnects.
    this.pool.on('error', () => undefined);
  }

  /** Runs `fn` in a transaction; `begin` may carry statements after BEGIN (one round trip), whose results `fn` receives. */
  private async tx<T>(fn: (c: pg.PoolClient, begun: pg.QueryResult[]) => Promise<T>, begin = 'BEGIN'): Promise<T> {
    const c = await this.pool.connect();
    try {
      const begun = (await c.query(begin)) as unknown as pg.QueryResult | pg.QueryResult[];
      const out = await fn(c, Array.isArray(begun) ? begun : [begun]);
      await c.query('COMMIT');
      return out;
    } catch (e) {
      await c.query('ROLLBACK').catch(() => undefined);
      throw e;
    } finally {
      c.release();
    }
  }

  async migrate(): Promise<void> {
    await this.tx(async (c) => {
      // Instances starting together take turns; the lock ends with the transaction.
      await c.query('SELECT pg_advisory_xact_lock(hashtext($1))', [`roost-migrate:${this.schema}`]);
      await c.query(`CREATE SCHEMA IF NOT EXISTS ${this.schema}`);
      await c.query(`SET LOCAL search_path TO ${this.schema}`);
      await c.query('CREATE TABLE IF NOT EXISTS schema_migrations (version INTEGER PRIMARY KEY, name TEXT NOT NULL, applied_at TIMESTAMPTZ NOT NULL)');
      const done = new Set((await c.query('SELECT version FROM schema_migrations')).rows.map((r: Row) => r.version as number));
      for (const m of MIGRATIONS) {
        if (done.has(m.version)) continue;
        await c.query(m.postgres);
        await c.query('INSERT INTO schema_migrations (version, name, applied_at) VALUES ($1, $2, $3)', [m.version, m.name, nowIso()]);
      }
    });
  }

  async close(): Promise<void> {
    if (this.closed) return;
    this.closed = true;
    await this.pool.end();
  }

  // ---------------------------------------------------------------- datasets

  async createDataset(d: NewDataset): Promise<Dataset> {
    checkDatasetId(d.id);
    checkDatasetFields(d);
    const now = nowIso();
    try {
      const r = await this.pool.query(
        'INSERT INTO datasets (id, name, settings, id_property, time_window, schedule, webhook, publish, created_at, updated_at) VALUES ($1, $2, $3, $4, $5, $6, $7, $9, $8, $8) RETURNING *',
        [d.id, d.name, JSON.stringify(d.settings), d.idProperty, d.window, json(d.schedule), json(d.webhook), now, json(d.publish ?? null)],
      );
      return datasetFromRow(r.rows[0] as Row);
    } catch (e) {
      if (pgCode(e) === '23505') throw new StoreError('conflict', `dataset ${JSON.stringify(d.id)} already exists; choose another id or update it`);
      throw e;
    }
  }

  async getDataset(id: string): Promise<Dataset | null> {
    if (!canBeDatasetId(id)) return null;
    const r = await this.pool.query('SELECT * FROM datasets WHERE id = $1', [id]);
    return r.rows.length === 0 ? null : datasetFromRow(r.rows[0] as Row);
  }

  async listDatasets(): Promise<Dataset[]> {
    const r = await this.pool.query('SELECT * FROM datasets ORDER BY id COLLATE "C"');
    return (r.rows as Row[]).map(datasetFromRow);
  }

  async updateDataset(id: string, patch: DatasetPatch): Promise<Dataset> {
    checkDatasetFields(patch);
    const p = new Params();
    const sets: string[] = [];
    if (patch.name !== undefined) sets.push(`name = ${p.add(patch.name)}`);
    if (patch.settings !== undefined) sets.push(`settings = ${p.add(JSON.stringify(patch.settings))}`);
    if (patch.idProperty !== undefined) sets.push(`id_property = ${p.add(patch.idProperty)}`);
    if (patch.window !== undefined) sets.push(`time_window = ${p.add(patch.window)}`);
    if (patch.schedule !== undefined) sets.push(`schedule = ${p.add(json(patch.schedule))}`);
    if (patch.webhook !== undefined) sets.push(`webhook = ${p.add(json(patch.webhook))}`);
    if (patch.publish !== undefined) sets.push(`publish = ${p.add(json(patch.publish))}`);
    sets.push(`updated_at = ${p.add(nowIso())}`);
    const r = await this.pool.query(`UPDATE datasets SET ${sets.join(', ')} WHERE id = ${p.add(id)} RETURNING *`, p.values);
    if (r.rows.length === 0) throw notFoundDataset(id);
    return datasetFromRow(r.rows[0] as Row);
  }

  async deleteDataset(id: string): Promise<boolean> {
    if (!canBeDatasetId(id)) return false;
    // The row first: its lock waits for an ingest of the dataset under way (which holds the row
    // locked) and keeps new ones out, so the observations deleted next are all there will be.
    return this.tx(async (c) => {
      if (((await c.query('DELETE FROM datasets WHERE id = $1', [id])).rowCount ?? 0) === 0) return false;
      await c.query('DELETE FROM observations WHERE dataset_id = $1', [id]);
      return true;
    });
  }

  // ------------------------------------------------------------ observations

  async ingest(datasetId: string, records: ObservationRecord[], options: IngestOptions): Promise<IngestResult> {
    checkRecords(records);
    // The dataset row is locked against other ingests of the same dataset and against its
    // deletion, in the round trip of BEGIN; the hash lookup then runs in a snapshot taken after
    // the lock, so it sees what an ingest before this one stored.
    return this.tx(async (c, begun) => {
      if (begun[1]?.rows.length !== 1) throw notFoundDataset(datasetId);
      // Named statements: each connection parses and plans them once.
      const stored = new Map<string, string>();
      // One unique-index probe per id, whatever the statistics say: with `obs_id = ANY($2)` and
      // statistics from when the dataset was small, the server read every row of the dataset
      // (25 ms per batch at 200 000 stored, growing with the dataset).
      const existing = await c.query({ name: 'roost-ingest-hashes', text: INGEST_HASHES, values: [datasetId, batchIds(records)], rowMode: 'array' });
      for (const row of existing.rows as [string, string][]) stored.set(row[0], row[1]);
      const plan = planIngest(records, stored, options);
      if (plan.insert.length > 0) await pipeline(Readable.from(copyRows(datasetId, plan.insert)), c.query(copyFrom(INGEST_COPY)));
      for (let i = 0; i < plan.replace.length; i += WRITE_CHUNK) {
        await c.query(
          `UPDATE observations o SET lon = u.lon, lat = u.lat, observed_at = u.observed_at, weight = u.weight, content_hash = u.content_hash, feature = u.feature
           FROM unnest($2::text[], $3::float8[], $4::float8[], $5::int8[], $6::float8[], $7::text[], $8::text[]) AS u(obs_id, lon, lat, observed_at, weight, content_hash, feature)
           WHERE o.dataset_id = $1 AND o.obs_id = u.obs_id`,
          [datasetId, ...columns(plan.replace.slice(i, i + WRITE_CHUNK))],
        );
      }
      return plan.result;
    }, `BEGIN; SELECT 1 FROM datasets WHERE id = ${pg.escapeLiteral(datasetId)} FOR NO KEY UPDATE`);
  }

  async listObservations(datasetId: string, options: ListObservationsOptions): Promise<ObservationPage> {
    checkQuery(options);
    checkLimit(options.limit);
    const after = options.cursor === undefined ? 0 : decodeCursor(options.cursor);
    const p = new Params();
    const { from, clause } = whereClause(p, datasetId, options);
    const r = await this.pool.query({
      text: `SELECT o.seq, o.feature, o.lon, o.lat FROM ${from} WHERE ${clause} AND o.seq > ${p.add(after)} ORDER BY o.seq LIMIT ${p.add(options.limit + 1)}`,
      values: p.values,
      rowMode: 'array',
    });
    return observationPage(r.rows as [number, string, number, number][], options.limit);
  }

  async deleteObservation(datasetId: string, id: string): Promise<boolean> {
    if (!plainText(id)) return false;
    return ((await this.pool.query('DELETE FROM observations WHERE dataset_id = $1 AND obs_id = $2', [datasetId, id])).rowCount ?? 0) > 0;
  }

  async countObservations(datasetId: string, query: ObservationQuery = {}): Promise<number> {
    checkQuery(query);
    const p = new Params();
    const { from, clause } = whereClause(p, datasetId, query);
    return (await this.pool.query(`SELECT count(*)::int AS n FROM ${from} WHERE ${clause}`, p.values)).rows[0].n as number;
  }

  async getObservation(datasetId: string, id: string): Promise<string | null> {
    const r = await this.pool.query({ text: 'SELECT feature FROM observations WHERE dataset_id = $1 AND obs_id = $2', values: [datasetId, id], rowMode: 'array' });
    return r.rows.length === 0 ? null : String((r.rows[0] as [unknown])[0]);
  }

  async observationExtent(datasetId: string): Promise<ObservationExtent> {
    const r = await this.pool.query({
      text: 'SELECT count(*)::int, min(lon), min(lat), max(lon), max(lat), min(observed_at)::float8, max(observed_at)::float8 FROM observations WHERE dataset_id = $1',
      values: [datasetId],
      rowMode: 'array',
    });
    const [count, w, s, e, n, first, last] = r.rows[0] as [number, number | null, number | null, number | null, number | null, number | null, number | null];
    if (count === 0) return { count, bbox: null, first, last };
    // least and greatest longitude per bin, for a range that may cross ±180 (extent.ts)
    const b = await this.pool.query({
      text: `SELECT min(lon)::float8, max(lon)::float8 FROM observations WHERE dataset_id = $1 GROUP BY ${LON_BIN_SQL_PG} ORDER BY ${LON_BIN_SQL_PG}`,
      values: [datasetId],
      rowMode: 'array',
    });
    const bins = (b.rows as [unknown, unknown][]).map(([lo, hi]) => [Number(lo), Number(hi)] as [number, number]);
    const [west, east] = bins.length > 0 ? lonRange(bins) : [Number(w), Number(e)];
    return { count, bbox: [west, Number(s), east, Number(n)], first, last };
  }

  /**
   * One binary COPY of the matching rows (see pg-copy.ts): one statement is one snapshot, and
   * the rows stream without a message per row. The statement cannot take parameters, so the
   * query's values are written into it as literals.
   */
  async loadForRun(datasetId: string, query: Omit<ObservationQuery, 'bbox'> = {}): Promise<RunInput> {
    checkQuery(query);
    const { from, clause } = whereClause(new Literals(), datasetId, query);
    const c = await this.pool.connect();
    try {
      // A scan joining another one already under way would start in the middle of the table.
      await c.query('BEGIN READ ONLY; SET LOCAL synchronize_seqscans = off');
      const copy = new RunCopyQuery(`COPY (SELECT ${RUN_COPY_COLUMNS} FROM ${from} WHERE ${clause}) TO STDOUT (FORMAT binary)`);
      c.query(copy as unknown as pg.Submittable);
      const input = await copy.result;
      await c.query('COMMIT');
      c.release();
      return input;
    } catch (e) {
      // after a failure the connection's state is not known: close it rather than reuse it
      c.release(e instanceof Error ? e : new Error(String(e)));
      throw e;
    }
  }

  async getPositions(datasetId: string, ids: string[]): Promise<Map<string, { lon: number; lat: number }>> {
    const r = await this.pool.query({ text: 'SELECT obs_id, lon, lat FROM observations WHERE dataset_id = $1 AND obs_id = ANY($2::text[])', values: [datasetId, ids], rowMode: 'array' });
    const out = new Map<string, { lon: number; lat: number }>();
    for (const row of r.rows as [string, number, number][]) out.set(row[0], { lon: row[1], lat: row[2] });
    return out;
  }

  // -------------------------------------------------------------------- runs

  async createRun(r: NewRun): Promise<Run> {
    checkNewRun(r);
    try {
      return await insertRun(this.pool, r, nowIso());
    } catch (e) {
      if (pgCode(e) === '23503') throw notFoundDataset(r.datasetId);
      throw e;
    }
  }

  async createScheduledRun(r: NewRun, slotIso: string): Promise<Run | null> {
    checkNewRun(r);
    const slot = normaliseSlot(slotIso);
    try {
      // A competing claim of the same slot waits on the unique key until this transaction ends:
      // it then finds the slot taken, or, when this one rolled back, claims it itself.
      return await this.tx(async (c) => {
        const now = nowIso();
        const claimed = await c.query('INSERT INTO schedule_slots (dataset_id, slot, claimed_at) VALUES ($1, $2, $3) ON CONFLICT DO NOTHING', [r.datasetId, slot, now]);
        return claimed.rowCount === 1 ? insertRun(c, r, now) : null;
      });
    } catch (e) {
      if (pgCode(e) === '23503') throw notFoundDataset(r.datasetId);
      throw e;
    }
  }

  private async requireRunSeq(c: pg.PoolClient | pg.Pool, runId: string, lock = ''): Promise<{ seq: number; status: RunStatus }> {
    const seq = parseRunId(runId);
    const r = seq === null ? null : await c.query(`SELECT seq, status FROM runs WHERE seq = $1 ${lock}`, [seq]);
    if (r === null || r.rows.length === 0) throw new StoreError('not-found', `there is no run ${JSON.stringify(runId)}`);
    return r.rows[0] as { seq: number; status: RunStatus };
  }

  async claimNextRun(workerId: string, leaseMs = DEFAULT_LEASE_MS): Promise<Run | null> {
    checkLease(workerId, leaseMs);
    // Under READ COMMITTED the locked row is re-checked after a competing claim commits and may no
    // longer be queued; the statement then finds nothing although other runs wait, so try again.
    for (let attempt = 0; attempt < 5; attempt++) {
      const now = nowIso();
      // the lease runs on the database's clock, which every instance shares
      const r = await this.pool.query(
        `UPDATE runs SET status = 'running', worker_id = $1, started_at = $2, updated_at = $2, lease_until = now() + $3 * interval '1 millisecond'
         WHERE seq = (SELECT seq FROM runs WHERE status = 'queued' ORDER BY seq LIMIT 1 FOR UPDATE SKIP LOCKED)
         RETURNING *`,
        [workerId, now, leaseMs],
      );
      if (r.rows.length > 0) return runFromRow(r.rows[0] as Row);
      const left = await this.pool.query(`SELECT EXISTS (SELECT 1 FROM runs WHERE status = 'queued') AS any`);
      if (!(left.rows[0] as { any: boolean }).any) return null;
    }
    return null;
  }

  async claimRun(runId: string, workerId: string, leaseMs = DEFAULT_LEASE_MS): Promise<Run> {
    checkLease(workerId, leaseMs);
    return this.tx(async (c) => {
      const { seq, status } = await this.requireRunSeq(c, runId, 'FOR UPDATE');
      if (status !== 'queued') throw new StoreError('conflict', `run ${runId} is ${status}, not queued`);
      const now = nowIso();
      const r = await c.query(
        `UPDATE runs SET status = 'running', worker_id = $1, started_at = $2, updated_at = $2, lease_until = now() + $3 * interval '1 millisecond' WHERE seq = $4 RETURNING *`,
        [workerId, now, leaseMs, seq],
      );
      return runFromRow(r.rows[0] as Row);
    });
  }

  async renewRunLease(runId: string, workerId: string, leaseMs: number): Promise<boolean> {
    checkLease(workerId, leaseMs);
    const seq = parseRunId(runId);
    if (seq === null) return false;
    const r = await this.pool.query(
      `UPDATE runs SET lease_until = now() + $1 * interval '1 millisecond', updated_at = $2 WHERE seq = $3 AND status = 'running' AND worker_id = $4`,
      [leaseMs, nowIso(), seq, workerId],
    );
    return r.rowCount === 1;
  }

  async reclaimExpiredRuns(maxInterruptions: number): Promise<{ requeued: string[]; failed: string[] }> {
    return this.tx(async (c) => {
      const now = nowIso();
      // A run reclaimed by a competing call meanwhile is re-checked after that call commits, is no
      // longer 'running' with an expired lease, and is left alone.
      const r = await c.query(
        `UPDATE runs SET
           interruptions = interruptions + 1,
           status = CASE WHEN interruptions + 1 >= $1 THEN 'failed' ELSE 'queued' END,
           progress = CASE WHEN interruptions + 1 >= $1 THEN progress ELSE 0 END,
           worker_id = CASE WHEN interruptions + 1 >= $1 THEN worker_id ELSE NULL END,
           started_at = CASE WHEN interruptions + 1 >= $1 THEN started_at ELSE NULL END,
           finished_at = CASE WHEN interruptions + 1 >= $1 THEN $2::timestamptz ELSE NULL END,
           lease_until = NULL,
           updated_at = $2
         WHERE status = 'running' AND lease_until < now()
         RETURNING seq, status, interruptions`,
        [maxInterruptions, now],
      );
      const rows = (r.rows as Row[]).map((x) => ({ seq: Number(x.seq), failed: x.status === 'failed', times: x.interruptions as number })).sort((a, b) => a.seq - b.seq);
      if (rows.length > 0) {
        await c.query('UPDATE runs SET error = x.e FROM unnest($1::bigint[], $2::text[]) AS x(s, e) WHERE runs.seq = x.s', [
          rows.map((x) => x.seq),
          rows.map((x) => interruptedMessage(x.times, x.failed)),
        ]);
      }
      return { requeued: rows.filter((x) => !x.failed).map((x) => formatRunId(x.seq)), failed: rows.filter((x) => x.failed).map((x) => formatRunId(x.seq)) };
    });
  }

  /** Throws 'conflict' unless the run's status is one of `ifStatus` and (when given) `ifWorker` holds it; locks the row. */
  private async requireClaim(c: pg.PoolClient, runId: string, ifStatus: RunStatus[] | undefined, ifWorker: string | undefined): Promise<number> {
    const seq = parseRunId(runId);
    const r = seq === null ? null : await c.query('SELECT seq, status, worker_id FROM runs WHERE seq = $1 FOR UPDATE', [seq]);
    if (r === null || r.rows.length === 0) throw new StoreError('not-found', `there is no run ${JSON.stringify(runId)}`);
    const row = r.rows[0] as { seq: number; status: RunStatus; worker_id: string | null };
    if (ifStatus !== undefined && !ifStatus.includes(row.status)) throw new StoreError('conflict', `run ${runId} is ${row.status}, not ${ifStatus.join(' or ')}`);
    if (ifWorker !== undefined && row.worker_id !== ifWorker) throw new StoreError('conflict', `run ${runId} was taken over by another process`);
    return Number(row.seq);
  }

  async updateRun(runId: string, patch: RunPatch, ifStatus?: RunStatus[], ifWorker?: string): Promise<Run> {
    checkRunPatch(patch);
    if (ifStatus !== undefined) checkStatuses(ifStatus);
    return this.tx(async (c) => {
      const seq = await this.requireClaim(c, runId, ifStatus, ifWorker);
      return this.patchRun(c, seq, patch);
    });
  }

  /** Applies a checked patch to run `seq` inside the caller's transaction; @returns the run as it then is */
  private async patchRun(c: pg.PoolClient, seq: number, patch: RunPatch): Promise<Run> {
    const p = new Params();
    const sets: string[] = [];
    if (patch.status !== undefined) {
      sets.push(`status = ${p.add(patch.status)}`);
      // a lease belongs to a running run only
      if (patch.status !== 'running') sets.push('lease_until = NULL');
    }
    if (patch.progress !== undefined) sets.push(`progress = ${p.add(patch.progress)}`);
    if (patch.error !== undefined) sets.push(`error = ${p.add(patch.error)}`);
    if (patch.startedAt !== undefined) sets.push(`started_at = ${p.add(patch.startedAt)}`);
    if (patch.finishedAt !== undefined) sets.push(`finished_at = ${p.add(patch.finishedAt)}`);
    if (patch.summary !== undefined) sets.push(`summary = ${p.add(json(patch.summary))}`);
    if (patch.timings !== undefined) sets.push(`timings = ${p.add(json(patch.timings))}`);
    sets.push(`updated_at = ${p.add(nowIso())}`);
    const r = await c.query(`UPDATE runs SET ${sets.join(', ')} WHERE seq = ${p.add(seq)} RETURNING *`, p.values);
    return runFromRow(r.rows[0] as Row);
  }

  async countRuns(status: RunStatus): Promise<number> {
    checkStatuses([status]);
    return (await this.pool.query('SELECT count(*)::int AS n FROM runs WHERE status = $1', [status])).rows[0].n as number;
  }

  async getRun(datasetId: string, runId: string): Promise<Run | null> {
    const seq = parseRunId(runId);
    if (seq === null) return null;
    const r = await this.pool.query('SELECT * FROM runs WHERE seq = $1 AND dataset_id = $2', [seq, datasetId]);
    return r.rows.length === 0 ? null : runFromRow(r.rows[0] as Row);
  }

  async listRuns(datasetId: string, options: { limit: number; cursor?: string }): Promise<RunPage> {
    checkLimit(options.limit, 1000);
    const before = options.cursor === undefined ? Number.MAX_SAFE_INTEGER : decodeCursor(options.cursor);
    const r = await this.pool.query('SELECT * FROM runs WHERE dataset_id = $1 AND seq < $2 ORDER BY seq DESC LIMIT $3', [datasetId, before, options.limit + 1]);
    const rows = r.rows as Row[];
    const more = rows.length > options.limit;
    if (more) rows.pop();
    const last = rows[rows.length - 1];
    return { runs: rows.map(runFromRow), nextCursor: more && last !== undefined ? encodeCursor(last.seq as number) : null };
  }

  async latestRun(datasetId: string, status: RunStatus = 'succeeded', before?: string): Promise<Run | null> {
    checkStatuses([status]);
    const limit = before === undefined ? Number.MAX_SAFE_INTEGER : parseRunId(before);
    if (limit === null) throw new StoreError('invalid', `${JSON.stringify(before)} is not a run id`);
    // the key and update time only: the row itself (its JSON) is read when not kept already
    const r = await this.pool.query('SELECT seq, updated_at FROM runs WHERE dataset_id = $1 AND status = $2 AND seq < $3 ORDER BY seq DESC LIMIT 1', [datasetId, status, limit]);
    const key = r.rows[0] as Row | undefined;
    if (key === undefined) return null;
    const seq = Number(key.seq);
    return this.finished.get(seq, iso(key.updated_at) as string, async () => {
      const row = await this.pool.query('SELECT * FROM runs WHERE seq = $1', [seq]);
      return row.rows.length === 0 ? null : runFromRow(row.rows[0] as Row);
    });
  }

  async saveRunResult(runId: string, result: RunResult, ifWorker?: string): Promise<void> {
    const sources = LAYER_NAMES.map((name) => [name, layerSource(name, result.layers?.[name])] as const);
    await this.tx(async (c) => {
      const seq = await this.requireClaim(c, runId, ifWorker === undefined ? undefined : ['running'], ifWorker);
      await c.query('DELETE FROM run_layer_parts WHERE run_seq = $1', [seq]);
      await c.query('DELETE FROM run_hotspots WHERE run_seq = $1', [seq]);
      // One binary COPY of all pieces: the bodies go out as their bytes (no escaping, no array for
      // the server to parse back: a text[] parameter took 45 s against 7 s for a points layer of
      // 1 000 000 features, measured), and while the server stores one piece this process is
      // already producing the next, where a statement per piece waited for each answer.
      await pipeline(Readable.from(pgLayerCopyData(Number(seq), sources), { objectMode: false, highWaterMark: 4 << 20 }), c.query(copyFrom(LAYER_COPY)));
      // the hotspots by a binary COPY too (see pgHotspotCopyData)
      if (result.hotspots.length > 0) await pipeline(Readable.from(pgHotspotCopyData(Number(seq), result.hotspots), { objectMode: false, highWaterMark: 4 << 20 }), c.query(copyFrom(HOTSPOT_COPY)));
      // The run's row is locked from the claim check on, so a heartbeat waits for this transaction;
      // the time it took is added to the lease (now() is the transaction's start), so the claim
      // comes out of the save with the time it had going in, as on SQLite.
      if (ifWorker !== undefined) await c.query("UPDATE runs SET lease_until = lease_until + (clock_timestamp() - now()) WHERE seq = $1 AND worker_id = $2", [seq, ifWorker]);
      if (result.finish !== undefined) {
        const patch = result.finish();
        checkRunPatch(patch);
        await this.patchRun(c, seq, patch);
      }
    });
  }

  async getRunLayer(runId: string, layer: LayerName): Promise<string | null> {
    return joinPieces(await this.getRunLayerPieces(runId, layer));
  }

  async getRunLayerPieces(runId: string, layer: LayerName): Promise<AsyncIterable<string> | null> {
    if (!LAYER_NAMES.includes(layer)) throw new StoreError('invalid', `layer must be one of ${LAYER_NAMES.join(', ')}`);
    const { seq } = await this.requireRunSeq(this.pool, runId);
    return storedPieces(async (from, count) => {
      const r = await this.pool.query({
        name: 'roost-layer-parts',
        text: 'SELECT body FROM run_layer_parts WHERE run_seq = $1 AND layer = $2 AND part >= $3 ORDER BY part LIMIT $4',
        values: [seq, layer, from, count],
        rowMode: 'array',
      });
      return (r.rows as [string][]).map((x) => x[0]);
    });
  }

  async getRunLayerBytes(runId: string, layer: LayerName): Promise<AsyncIterable<Buffer> | null> {
    // node-postgres hands every field over as a decoded string (bytea as hex text, which measured
    // slower still): the pieces are read as text and encoded once here, as the socket would
    const pieces = await this.getRunLayerPieces(runId, layer);
    if (pieces === null) return null;
    return (async function* () {
      for await (const p of pieces) yield Buffer.from(p, 'utf8');
    })();
  }

  async getRunHotspots(runId: string): Promise<RunHotspot[]> {
    const { seq } = await this.requireRunSeq(this.pool, runId);
    const r = await this.pool.query('SELECT * FROM run_hotspots WHERE run_seq = $1 ORDER BY hotspot_id', [seq]);
    return (r.rows as Row[]).map((x) => storedHotspot(x.hotspot_id as number, x.track_id as string | null, parseMembers(x.members as string, x.member_count as number), x.core_members as string, x.hull as string, (x.figures ?? null) as Record<string, unknown> | null));
  }

  async getTrack(datasetId: string, trackId: string): Promise<TrackPoint[]> {
    if (!plainText(trackId)) return [];
    const r = await this.pool.query(
      `SELECT h.run_seq, h.hotspot_id, h.member_count, h.hull, h.figures FROM run_hotspots h JOIN runs r ON r.seq = h.run_seq WHERE h.track_id = $1 AND r.dataset_id = $2 AND r.status = 'succeeded' ORDER BY h.run_seq, h.hotspot_id`,
      [trackId, datasetId],
    );
    return (r.rows as Row[]).map((x) => ({
      runId: formatRunId(x.run_seq as number),
      hotspotId: x.hotspot_id as number,
      memberCount: x.member_count as number,
      hull: x.hull as string,
      figures: (x.figures ?? null) as Record<string, unknown> | null,
    }));
  }

  async listTracks(datasetId: string, options: ListTracksOptions): Promise<TrackPage> {
    const p = new Params();
    const sql = trackListSql('postgres', (v) => p.add(v), datasetId, options);
    const r = await this.pool.query(sql, p.values);
    return trackPage(r.rows as Row[], options.limit, iso, (v) => (v ?? null) as Record<string, unknown> | null);
  }

  async markInterruptedRuns(reason: string, filter: InterruptedRunFilter = {}): Promise<string[]> {
    const now = nowIso();
    const p = new Params();
    return this.interrupted(p, filter, `status = 'failed', error = ${p.add(reason)}, finished_at = ${p.add(now)}, lease_until = NULL, updated_at = ${p.add(now)}`);
  }

  async requeueInterruptedRuns(filter: InterruptedRunFilter = {}): Promise<string[]> {
    const p = new Params();
    return this.interrupted(p, filter, `status = 'queued', progress = 0, worker_id = NULL, started_at = NULL, lease_until = NULL, updated_at = ${p.add(nowIso())}`);
  }

  private async interrupted(p: Params, filter: InterruptedRunFilter, set: string): Promise<string[]> {
    let where = `status = 'running'`;
    if (filter.workerId !== undefined) where += ` AND worker_id = ${p.add(filter.workerId)}`;
    if (filter.staleMs !== undefined) where += ` AND updated_at <= ${p.add(new Date(Date.now() - filter.staleMs).toISOString())}`;
    const r = await this.pool.query(`UPDATE runs SET ${set} WHERE ${where} RETURNING seq`, p.values);
    return (r.rows as Row[]).map((x) => x.seq as number).sort((a, b) => a - b).map(formatRunId);
  }

  async reserveTrackNumbers(datasetId: string, count: number): Promise<number> {
    checkTrackCount(count);
    try {
      // one statement: the row lock of the upsert orders concurrent reservations
      const r = await this.pool.query(
        'INSERT INTO track_counters (dataset_id, last_seq) VALUES ($1, $2) ON CONFLICT (dataset_id) DO UPDATE SET last_seq = track_counters.last_seq + excluded.last_seq RETURNING last_seq',
        [datasetId, count],
      );
      return Number((r.rows[0] as Row).last_seq) - count + 1;
    } catch (e) {
      if (pgCode(e) === '23503') throw notFoundDataset(datasetId);
      throw e;
    }
  }

  // -------------------------------------------------------- keys and audit

  async createKey(k: NewApiKey): Promise<ApiKey> {
    checkNewKey(k);
    try {
      const r = await this.pool.query(
        'INSERT INTO api_keys (id, token_hash, role, dataset_id, label, created_at) VALUES ($1, $2, $3, $4, $5, now()) RETURNING *',
        [k.id, k.tokenHash, k.role, k.datasetId, k.label],
      );
      return keyFromRow(r.rows[0] as Row);
    } catch (e) {
      if (pgCode(e) === '23503') throw notFoundDataset(k.datasetId ?? '');
      if (pgCode(e) === '23505') throw new StoreError('conflict', `a key with id ${JSON.stringify(k.id)} or the same token is already stored`);
      throw e;
    }
  }

  async findKey(tokenHash: string): Promise<ApiKey | null> {
    const r = await this.pool.query('SELECT * FROM api_keys WHERE token_hash = $1 AND revoked_at IS NULL', [tokenHash]);
    return r.rows.length === 0 ? null : keyFromRow(r.rows[0] as Row);
  }

  async listKeys(): Promise<ApiKey[]> {
    const r = await this.pool.query('SELECT * FROM api_keys ORDER BY seq');
    return (r.rows as Row[]).map(keyFromRow);
  }

  async revokeKey(id: string): Promise<ApiKey | null> {
    const r = await this.pool.query(
      'UPDATE api_keys SET revoked_at = COALESCE(revoked_at, now()) WHERE id = $1 RETURNING *',
      [id],
    );
    return r.rows.length === 0 ? null : keyFromRow(r.rows[0] as Row);
  }

  async countKeys(): Promise<number> {
    const r = await this.pool.query('SELECT count(*)::int AS n FROM api_keys WHERE revoked_at IS NULL');
    return (r.rows[0] as Row).n as number;
  }

  async appendAudit(rec: NewAuditRecord): Promise<void> {
    checkAuditRecord(rec);
    await this.pool.query(
      'INSERT INTO audit_records (at, key_id, actor, action, dataset_id, target, status) VALUES (now(), $1, $2, $3, $4, $5, $6)',
      [rec.keyId, rec.actor, rec.action, rec.datasetId, rec.target, rec.status],
    );
  }

  async listAudit(options: { limit: number; cursor?: string }): Promise<AuditPage> {
    checkLimit(options.limit);
    const before = options.cursor === undefined ? Number.MAX_SAFE_INTEGER : decodeCursor(options.cursor);
    const r = await this.pool.query('SELECT * FROM audit_records WHERE seq < $1 ORDER BY seq DESC LIMIT $2', [before, options.limit + 1]);
    return auditPage(r.rows as Row[], options.limit);
  }
}

/** Where a value goes into a statement. */
interface Placeholders {
  add(v: unknown): string;
}

/** Collects query parameters and hands out their `$n` placeholders. */
class Params implements Placeholders {
  readonly values: unknown[] = [];
  add(v: unknown): string {
    this.values.push(v);
    return `$${this.values.length}`;
  }
}

/** Writes values into a statement as SQL literals, for statements without parameters (COPY). */
class Literals implements Placeholders {
  add(v: unknown): string {
    if (typeof v === 'string') return pg.escapeLiteral(v);
    if (typeof v === 'number' && Number.isFinite(v)) return `(${String(v)})`;
    throw new StoreError('invalid', `cannot write ${String(v)} into a statement`);
  }
}

/** Inserts a queued run; returns it. */
async function insertRun(c: pg.Pool | pg.PoolClient, r: NewRun, now: string): Promise<Run> {
  const q = await c.query(
    `INSERT INTO runs (dataset_id, status, trigger, settings, created_at, updated_at) VALUES ($1, 'queued', $2, $3, $4, $4) RETURNING *`,
    [r.datasetId, r.trigger, JSON.stringify(r.settings), now],
  );
  return runFromRow(q.rows[0] as Row);
}

function pgCode(e: unknown): string | undefined {
  return (e as { code?: string }).code;
}

function json(v: unknown): string | null {
  return v === null || v === undefined ? null : JSON.stringify(v);
}

function iso(v: unknown): string | null {
  return v === null || v === undefined ? null : (v as Date).toISOString();
}

function notFoundDataset(id: string): StoreError {
  return new StoreError('not-found', `there is no dataset ${JSON.stringify(id)}`);
}

/** COPY's text escapes for a value: backslash, and the line breaks and tab that delimit rows and columns. */
function copyText(v: string): string {
  return /[\\\n\r\t]/.test(v) ? v.replace(/[\\\n\r\t]/g, (ch) => (ch === '\\' ? '\\\\' : ch === '\n' ? '\\n' : ch === '\r' ? '\\r' : '\\t')) : v;
}

/**
 * Records as COPY text rows, in pieces of about 1 MiB. Numbers are written in JavaScript's
 * shortest round-trip form, which PostgreSQL reads back to the same double; absent values as \N.
 */
function* copyRows(datasetId: string, rs: ObservationRecord[]): Generator<Buffer> {
  const ds = copyText(datasetId);
  let part = '';
  for (const r of rs) {
    part += `${ds}\t${copyText(r.id)}\t${r.lon}\t${r.lat}\t${r.observedAt ?? '\\N'}\t${r.weight ?? '\\N'}\t${copyText(r.contentHash)}\t${copyText(r.feature)}\n`;
    if (part.length >= 1 << 20) {
      yield Buffer.from(part);
      part = '';
    }
  }
  if (part !== '') yield Buffer.from(part);
}

function columns(rs: ObservationRecord[]): unknown[][] {
  return [rs.map((r) => r.id), rs.map((r) => r.lon), rs.map((r) => r.lat), rs.map((r) => r.observedAt), rs.map((r) => r.weight), rs.map((r) => r.contentHash), rs.map((r) => r.feature)];
}

function datasetFromRow(r: Row): Dataset {
  return {
    id: r.id as string,
    name: r.name as string,
    settings: r.settings as Record<string, unknown>,
    idProperty: r.id_property as string | null,
    window: r.time_window as string | null,
    schedule: (r.schedule ?? null) as Dataset['schedule'],
    webhook: (r.webhook ?? null) as Dataset['webhook'],
    publish: (r.publish ?? null) as Dataset['publish'],
    createdAt: iso(r.created_at) as string,
    updatedAt: iso(r.updated_at) as string,
  };
}

function runFromRow(r: Row): Run {
  return {
    id: formatRunId(r.seq as number),
    datasetId: r.dataset_id as string,
    status: r.status as RunStatus,
    trigger: r.trigger as Run['trigger'],
    settings: r.settings as Record<string, unknown>,
    progress: r.progress as number,
    error: r.error as string | null,
    workerId: r.worker_id as string | null,
    createdAt: iso(r.created_at) as string,
    startedAt: iso(r.started_at),
    finishedAt: iso(r.finished_at),
    updatedAt: iso(r.updated_at) as string,
    leaseUntil: iso(r.lease_until),
    interruptions: (r.interruptions as number | undefined) ?? 0,
    summary: (r.summary ?? null) as Record<string, unknown> | null,
    timings: (r.timings ?? null) as Record<string, number> | null,
  };
}

/** FROM and WHERE for a dataset and a query, the observations aliased `o`. */
function whereClause(p: Placeholders, datasetId: string, q: ObservationQuery): { from: string; clause: string } {
  const parts = [`o.dataset_id = ${p.add(datasetId)}`];
  if (q.bbox !== undefined) {
    const [w, s, e, n] = q.bbox;
    parts.push(`o.lat >= ${p.add(s)} AND o.lat <= ${p.add(n)}`);
    parts.push(w <= e ? `o.lon >= ${p.add(w)} AND o.lon <= ${p.add(e)}` : `(o.lon >= ${p.add(w)} OR o.lon <= ${p.add(e)})`);
  }
  if (q.from !== undefined) parts.push(`o.observed_at >= ${p.add(q.from)}`);
  if (q.to !== undefined) parts.push(`o.observed_at < ${p.add(q.to)}`);
  if (q.untimed === true) parts.push('o.observed_at IS NULL');
  const matches = whereMatches(q.where);
  let from = 'observations o';
  if (matches.length > 0) {
    // parse each feature once per row, not once per condition
    from = `observations o CROSS JOIN LATERAL (SELECT o.feature::jsonb -> 'properties' AS props) x`;
    for (const m of matches) {
      const v = `(x.props -> ${p.add(m.property)})`;
      const alts = [`(jsonb_typeof(${v}) = 'string' AND ${v} #>> '{}' = ${p.add(m.text)})`];
      if (m.bool !== null || m.isNull) alts.push(`${v} = ${p.add(m.text)}::jsonb`);
      if (m.number !== null) alts.push(`(CASE WHEN jsonb_typeof(${v}) = 'number' THEN (${v})::float8 = ${p.add(m.number)}::float8 ELSE false END)`);
      parts.push(`(${alts.join(' OR ')})`);
    }
  }
  return { from, clause: parts.join(' AND ') };
}
