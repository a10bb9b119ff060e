/**
 * The PostgreSQL engine (pg): a connection pool whose connections all use one schema (configurable,
 * so several stores or test files can share a database without colliding). Settings and summaries
 * are JSONB; feature texts are TEXT so they come back byte for byte. Ingestion serialises per
 * dataset by locking the dataset row, so two instances posting the same ids cannot both insert;
 * run claims use `FOR UPDATE SKIP LOCKED`; schedule slots are a unique row.
 */
import pg from 'pg';
import type {
  Dataset,
  DatasetPatch,
  IngestOptions,
  IngestResult,
  InterruptedRunFilter,
  ListObservationsOptions,
  NewDataset,
  NewRun,
  ObservationPage,
  ObservationQuery,
  ObservationRecord,
  Run,
  RunHotspot,
  RunInput,
  RunLayer,
  RunPage,
  RunPatch,
  RunResult,
  RunStatus,
  Store,
  TrackPoint,
} from './store.js';
import { RUN_LAYERS, RUN_TRIGGERS, StoreError } from './store.js';
import {
  batchIds,
  checkDatasetFields,
  checkDatasetId,
  checkLimit,
  checkQuery,
  checkRecords,
  checkRunPatch,
  checkStatuses,
  decodeCursor,
  encodeCursor,
  formatRunId,
  normaliseSlot,
  checkTrackCount,
  nowIso,
  parseRunId,
  PackedTexts,
  planIngest,
  whereMatches,
} from './common.js';
import { MIGRATIONS } from './migrations.js';

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
/** rows per round trip of `loadForRun` (bounds the size of one aggregated reply) */
const LOAD_CHUNK = 100_000;
/** feature texts per string of a run input (about 4 MB at 200 bytes a text) */
const TEXT_CHUNK = 20_000;

/** Stored hashes of a batch's ids (those not stored are left out). */
const INGEST_HASHES = `SELECT u.id, h.content_hash FROM unnest($2::text[]) AS u(id)
  CROSS JOIN LATERAL (SELECT content_hash FROM observations WHERE dataset_id = $1 AND obs_id = u.id) h`;

const INGEST_INSERT = `INSERT INTO observations (dataset_id, obs_id, lon, lat, observed_at, weight, content_hash, feature)
  SELECT $1, * FROM unnest($2::text[], $3::float8[], $4::float8[], $5::int8[], $6::float8[], $7::text[], $8::text[])`;

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

  private async tx<T>(fn: (c: pg.PoolClient) => Promise<T>, begin = 'BEGIN'): Promise<T> {
    const c = await this.pool.connect();
    try {
      await c.query(begin);
      const out = await fn(c);
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
        'INSERT INTO datasets (id, name, settings, id_property, time_window, schedule, webhook, created_at, updated_at) VALUES ($1, $2, $3, $4, $5, $6, $7, $8, $8) RETURNING *',
        [d.id, d.name, JSON.stringify(d.settings), d.idProperty, d.window, json(d.schedule), json(d.webhook), now],
      );
      return datasetFromRow(r.rows[0] as Row);
    } catch (e) {
      if (pgCode(e) === '23505') throw new StoreError('conflict', `dataset ${JSON.stringify(d.id)} already exists; choose another id or update it`);
      throw e;
    }
  }

  async getDataset(id: string): Promise<Dataset | null> {
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
    sets.push(`updated_at = ${p.add(nowIso())}`);
    const r = await this.pool.query(`UPDATE datasets SET ${sets.join(', ')} WHERE id = ${p.add(id)} RETURNING *`, p.values);
    if (r.rows.length === 0) throw notFoundDataset(id);
    return datasetFromRow(r.rows[0] as Row);
  }

  async deleteDataset(id: string): Promise<boolean> {
    return ((await this.pool.query('DELETE FROM datasets WHERE id = $1', [id])).rowCount ?? 0) > 0;
  }

  // ------------------------------------------------------------ observations

  async ingest(datasetId: string, records: ObservationRecord[], options: IngestOptions): Promise<IngestResult> {
    checkRecords(records);
    return this.tx(async (c) => {
      // Locks the dataset row against other ingests of the same dataset (FK checks only take KEY SHARE, which this does not block).
      // Named statements: each connection parses and plans them once.
      const ds = await c.query({ name: 'roost-ingest-lock', text: 'SELECT 1 FROM datasets WHERE id = $1 FOR NO KEY UPDATE', values: [datasetId] });
      if (ds.rows.length === 0) throw notFoundDataset(datasetId);
      const stored = new Map<string, string>();
      // One unique-index probe per id, whatever the statistics say: with `obs_id = ANY($2)` and
      // statistics from when the dataset was small, the server read every row of the dataset
      // (25 ms per batch at 200 000 stored, growing with the dataset).
      const existing = await c.query({ name: 'roost-ingest-hashes', text: INGEST_HASHES, values: [datasetId, batchIds(records)], rowMode: 'array' });
      for (const row of existing.rows as [string, string][]) stored.set(row[0], row[1]);
      const plan = planIngest(records, stored, options);
      for (let i = 0; i < plan.insert.length; i += WRITE_CHUNK) {
        await c.query({ name: 'roost-ingest-insert', text: INGEST_INSERT, values: [datasetId, ...columns(plan.insert.slice(i, i + WRITE_CHUNK))] });
      }
      for (let i = 0; i < plan.replace.length; i += WRITE_CHUNK) {
        await c.query(
          `UPDATE observations o SET lon = u.lon, lat = u.lat, observed_at = u.observed_at, weight = u.weight, content_hash = u.content_hash, feature = u.feature
           FROM unnest($2::text[], $3::float8[], $4::float8[], $5::int8[], $6::float8[], $7::text[], $8::text[]) AS u(obs_id, lon, lat, observed_at, weight, content_hash, feature)
           WHERE o.dataset_id = $1 AND o.obs_id = u.obs_id`,
          [datasetId, ...columns(plan.replace.slice(i, i + WRITE_CHUNK))],
        );
      }
      return plan.result;
    });
  }

  async listObservations(datasetId: string, options: ListObservationsOptions): Promise<ObservationPage> {
    checkQuery(options);
    checkLimit(options.limit);
    const after = options.cursor === undefined ? 0 : decodeCursor(options.cursor);
    const p = new Params();
    const { from, clause } = whereClause(p, datasetId, options);
    const r = await this.pool.query({
      text: `SELECT o.seq, o.feature FROM ${from} WHERE ${clause} AND o.seq > ${p.add(after)} ORDER BY o.seq LIMIT ${p.add(options.limit + 1)}`,
      values: p.values,
      rowMode: 'array',
    });
    const rows = r.rows as [number, string][];
    const more = rows.length > options.limit;
    if (more) rows.pop();
    const last = rows[rows.length - 1];
    return { features: rows.map((x) => x[1]), nextCursor: more && last !== undefined ? encodeCursor(last[0]) : null };
  }

  async deleteObservation(datasetId: string, id: string): Promise<boolean> {
    return ((await this.pool.query('DELETE FROM observations WHERE dataset_id = $1 AND obs_id = $2', [datasetId, id])).rowCount ?? 0) > 0;
  }

  async countObservations(datasetId: string): Promise<number> {
    return (await this.pool.query('SELECT count(*)::int AS n FROM observations WHERE dataset_id = $1', [datasetId])).rows[0].n as number;
  }

  /**
   * Reads in chunks of LOAD_CHUNK rows: the numbers of a chunk as ONE row of aggregates (packed
   * big-endian doubles, `float8send` concatenated into a bytea: ~8 bytes per number and no
   * per-value text parsing), then the ids as rows and the feature texts joined into a few large strings. A REPEATABLE READ
   * transaction gives all reads one snapshot.
   */
  async loadForRun(datasetId: string, query: Omit<ObservationQuery, 'bbox'> = {}): Promise<RunInput> {
    checkQuery(query);
    const texts = new PackedTexts();
    const parts = await this.tx(async (c) => {
      const out: { n: number; ids: string[]; lon: Buffer; lat: Buffer; t: Buffer; w: Buffer; weighted: boolean }[] = [];
      let at = 0;
      // Chunk boundaries first, from the (dataset_id, seq) index alone: every chunk is then a
      // bounded seq range, whatever plan the server picks for it. (With LIMIT chunks and stale
      // statistics the server sorted the whole dataset once per chunk: 1.1 s per 100 000 rows.)
      const bounds = await c.query({
        text: `SELECT seq FROM (SELECT seq, row_number() OVER (ORDER BY seq) AS k FROM observations WHERE dataset_id = $1) s WHERE k % ${LOAD_CHUNK} = 0 ORDER BY seq`,
        values: [datasetId],
        rowMode: 'array',
      });
      const ends = [...(bounds.rows as [number][]).map((r) => r[0]), Number.MAX_SAFE_INTEGER];
      for (let e = 0, after = 0; e < ends.length; after = ends[e++] as number) {
        const until = ends[e] as number;
        const p = new Params();
        const { from, clause } = whereClause(p, datasetId, query);
        const sql = (order: string): string => `SELECT count(*)::int, max(seq),
                   string_agg(float8send(lon), ''::bytea ${order}),
                   string_agg(float8send(lat), ''::bytea ${order}),
                   string_agg(float8send(coalesce(observed_at::float8, 'NaN')), ''::bytea ${order}),
                   string_agg(float8send(coalesce(weight, 'NaN')), ''::bytea ${order}),
                   coalesce(bool_or(weight IS NOT NULL), false),
                   string_agg(int8send(seq), ''::bytea ${order})
                 FROM (SELECT o.seq, o.lon, o.lat, o.observed_at, o.weight FROM ${from}
                       WHERE ${clause} AND o.seq > ${p.add(after)} AND o.seq <= ${p.add(until)} ORDER BY o.seq) s`;
        // Aggregates without their own ORDER BY take the rows in the sorted subquery's order (one
        // sort instead of one per aggregate); the sequence column proves it, else sort per aggregate.
        let r = await c.query({ text: sql(''), values: p.values, rowMode: 'array' });
        if (!ascending((r.rows[0] as unknown[])[7] as Buffer | null)) r = await c.query({ text: sql('ORDER BY seq'), values: p.values, rowMode: 'array' });
        const row = r.rows[0] as [number, number | null, Buffer, Buffer, Buffer, Buffer, boolean, Buffer];
        if (row[0] === 0) continue;
        // Ids come as rows; the feature texts of a chunk as TEXT_CHUNK-row strings joined by "\n"
        // (see PackedTexts): a million separate strings cost more in garbage collection than
        // the transfer.
        const q = new Params();
        const w = whereClause(q, datasetId, query);
        const range = `${w.clause} AND o.seq > ${q.add(after)} AND o.seq <= ${q.add(row[1])}`;
        const ids = await c.query({ text: `SELECT o.obs_id FROM ${w.from} WHERE ${range} ORDER BY o.seq`, values: q.values, rowMode: 'array' });
        if (ids.rows.length !== row[0]) throw new Error('observations changed between two reads of one snapshot');
        const joined = await c.query({
          text: `SELECT count(*)::int, string_agg(feature, E'\n' ORDER BY seq) FROM (SELECT o.seq, o.feature, (row_number() OVER (ORDER BY o.seq) - 1) / ${TEXT_CHUNK} AS part FROM ${w.from} WHERE ${range}) s GROUP BY part ORDER BY part`,
          values: q.values,
          rowMode: 'array',
        });
        for (const [count, text] of joined.rows as [number, string][]) {
          if (texts.addJoined(text, count)) continue;
          const q2 = new Params();
          const w2 = whereClause(q2, datasetId, query);
          const each = await c.query({
            text: `SELECT o.feature FROM ${w2.from} WHERE ${w2.clause} AND o.seq > ${q2.add(after)} AND o.seq <= ${q2.add(until)} ORDER BY o.seq OFFSET ${q2.add(texts.length - at)} LIMIT ${q2.add(count)}`,
            values: q2.values,
            rowMode: 'array',
          });
          texts.addEach((each.rows as [string][]).map((r) => r[0]));
        }
        if (texts.length - at !== row[0]) throw new Error('observations changed between two reads of one snapshot');
        out.push({ n: row[0], ids: (ids.rows as [string][]).map((r) => r[0]), lon: row[2], lat: row[3], t: row[4], w: row[5], weighted: row[6] });
        at += row[0];
      }
      return out;
    }, 'BEGIN ISOLATION LEVEL REPEATABLE READ READ ONLY');
    let n = 0;
    for (const part of parts) n += part.n;
    const lon = new Float64Array(n);
    const lat = new Float64Array(n);
    const observedAt = new Float64Array(n);
    const weight = new Float64Array(n);
    let weighted = false;
    let ids: string[] = [];
    let at = 0;
    for (const part of parts) {
      unpackDoubles(part.lon, lon, at);
      unpackDoubles(part.lat, lat, at);
      unpackDoubles(part.t, observedAt, at);
      unpackDoubles(part.w, weight, at);
      weighted ||= part.weighted;
      ids = ids.length === 0 ? part.ids : ids.concat(part.ids);
      at += part.n;
    }
    return { ids, lon, lat, observedAt, weight: weighted ? weight : null, features: texts };
  }

  async getPositions(datasetId: string, ids: string[]): Promise<Map<string, { lon: number; lat: number }>> {
    const r = await this.pool.query({ text: 'SELECT obs_id, lon, lat FROM observations WHERE dataset_id = $1 AND obs_id = ANY($2::text[])', values: [datasetId, ids], rowMode: 'array' });
    const out = new Map<string, { lon: number; lat: number }>();
    for (const row of r.rows as [string, number, number][]) out.set(row[0], { lon: row[1], lat: row[2] });
    return out;
  }

  // -------------------------------------------------------------------- runs

  async createRun(r: NewRun): Promise<Run> {
    if (!RUN_TRIGGERS.includes(r.trigger)) throw new StoreError('invalid', `trigger must be one of ${RUN_TRIGGERS.join(', ')}`);
    if (typeof r.settings !== 'object' || r.settings === null || Array.isArray(r.settings)) throw new StoreError('invalid', 'run settings must be a JSON object');
    const now = nowIso();
    try {
      const q = await this.pool.query(
        `INSERT INTO runs (dataset_id, status, trigger, settings, created_at, updated_at) VALUES ($1, 'queued', $2, $3, $4, $4) RETURNING *`,
        [r.datasetId, r.trigger, JSON.stringify(r.settings), now],
      );
      return runFromRow(q.rows[0] as Row);
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

  async claimNextRun(workerId: string): Promise<Run | null> {
    // Under READ COMMITTED the locked row is re-checked after a competing claim commits and may no
    // longer be queued; the statement then finds nothing although other runs wait, so try again.
    for (let attempt = 0; attempt < 5; attempt++) {
      const now = nowIso();
      const r = await this.pool.query(
        `UPDATE runs SET status = 'running', worker_id = $1, started_at = $2, updated_at = $2
         WHERE seq = (SELECT seq FROM runs WHERE status = 'queued' ORDER BY seq LIMIT 1 FOR UPDATE SKIP LOCKED)
         RETURNING *`,
        [workerId, now],
      );
      if (r.rows.length > 0) return runFromRow(r.rows[0] as Row);
      const left = await this.pool.query(`SELECT EXISTS (SELECT 1 FROM runs WHERE status = 'queued') AS any`);
      if (!(left.rows[0] as { any: boolean }).any) return null;
    }
    return null;
  }

  async updateRun(runId: string, patch: RunPatch, ifStatus?: RunStatus[]): Promise<Run> {
    checkRunPatch(patch);
    if (ifStatus !== undefined) checkStatuses(ifStatus);
    return this.tx(async (c) => {
      const { seq, status } = await this.requireRunSeq(c, runId, 'FOR UPDATE');
      if (ifStatus !== undefined && !ifStatus.includes(status)) throw new StoreError('conflict', `run ${runId} is ${status}, not ${ifStatus.join(' or ')}`);
      const p = new Params();
      const sets: string[] = [];
      if (patch.status !== undefined) sets.push(`status = ${p.add(patch.status)}`);
      if (patch.progress !== undefined) sets.push(`progress = ${p.add(patch.progress)}`);
      if (patch.error !== undefined) sets.push(`error = ${p.add(patch.error)}`);
      if (patch.startedAt !== undefined) sets.push(`started_at = ${p.add(patch.startedAt)}`);
      if (patch.finishedAt !== undefined) sets.push(`finished_at = ${p.add(patch.finishedAt)}`);
      if (patch.summary !== undefined) sets.push(`summary = ${p.add(json(patch.summary))}`);
      if (patch.timings !== undefined) sets.push(`timings = ${p.add(json(patch.timings))}`);
      sets.push(`updated_at = ${p.add(nowIso())}`);
      const r = await c.query(`UPDATE runs SET ${sets.join(', ')} WHERE seq = ${p.add(seq)} RETURNING *`, p.values);
      return runFromRow(r.rows[0] as Row);
    });
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
    const r = await this.pool.query('SELECT * FROM runs WHERE dataset_id = $1 AND status = $2 AND seq < $3 ORDER BY seq DESC LIMIT 1', [datasetId, status, limit]);
    return r.rows.length === 0 ? null : runFromRow(r.rows[0] as Row);
  }

  async saveRunResult(runId: string, result: RunResult): Promise<void> {
    for (const layer of RUN_LAYERS) if (typeof result.layers?.[layer] !== 'string') throw new StoreError('invalid', `result layer ${layer} must be GeoJSON text`);
    await this.tx(async (c) => {
      const { seq } = await this.requireRunSeq(c, runId, 'FOR UPDATE');
      await c.query('DELETE FROM run_layers WHERE run_seq = $1', [seq]);
      await c.query('DELETE FROM run_hotspots WHERE run_seq = $1', [seq]);
      await c.query('INSERT INTO run_layers (run_seq, layer, body) SELECT $1, * FROM unnest($2::text[], $3::text[])', [seq, [...RUN_LAYERS], RUN_LAYERS.map((l) => result.layers[l])]);
      const h = result.hotspots;
      if (h.length > 0) {
        await c.query(
          `INSERT INTO run_hotspots (run_seq, hotspot_id, track_id, members, core_members, member_count, hull, figures)
           SELECT $1, * FROM unnest($2::int[], $3::text[], $4::text[], $5::text[], $6::int[], $7::text[], $8::jsonb[])`,
          [
            seq,
            h.map((x) => x.hotspotId),
            h.map((x) => x.trackId),
            h.map((x) => JSON.stringify(x.members)),
            h.map((x) => JSON.stringify(x.coreMembers)),
            h.map((x) => x.members.length),
            h.map((x) => x.hull),
            h.map((x) => json(x.figures ?? null)),
          ],
        );
      }
    });
  }

  async getRunLayer(runId: string, layer: RunLayer): Promise<string | null> {
    if (!RUN_LAYERS.includes(layer)) throw new StoreError('invalid', `layer must be one of ${RUN_LAYERS.join(', ')}`);
    const { seq } = await this.requireRunSeq(this.pool, runId);
    const r = await this.pool.query('SELECT body FROM run_layers WHERE run_seq = $1 AND layer = $2', [seq, layer]);
    return r.rows.length === 0 ? null : ((r.rows[0] as Row).body as string);
  }

  async getRunHotspots(runId: string): Promise<RunHotspot[]> {
    const { seq } = await this.requireRunSeq(this.pool, runId);
    const r = await this.pool.query('SELECT * FROM run_hotspots WHERE run_seq = $1 ORDER BY hotspot_id', [seq]);
    return (r.rows as Row[]).map((x) => ({
      hotspotId: x.hotspot_id as number,
      trackId: x.track_id as string | null,
      members: JSON.parse(x.members as string) as string[],
      coreMembers: JSON.parse(x.core_members as string) as string[],
      hull: x.hull as string,
      figures: (x.figures ?? null) as Record<string, unknown> | null,
    }));
  }

  async getTrack(datasetId: string, trackId: string): Promise<TrackPoint[]> {
    const r = await this.pool.query(
      'SELECT h.run_seq, h.hotspot_id, h.member_count, h.hull, h.figures FROM run_hotspots h JOIN runs r ON r.seq = h.run_seq WHERE h.track_id = $1 AND r.dataset_id = $2 ORDER BY h.run_seq, h.hotspot_id',
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

  async markInterruptedRuns(reason: string, filter: InterruptedRunFilter = {}): Promise<string[]> {
    const now = nowIso();
    const p = new Params();
    return this.interrupted(p, filter, `status = 'failed', error = ${p.add(reason)}, finished_at = ${p.add(now)}, updated_at = ${p.add(now)}`);
  }

  async requeueInterruptedRuns(filter: InterruptedRunFilter = {}): Promise<string[]> {
    const p = new Params();
    return this.interrupted(p, filter, `status = 'queued', progress = 0, worker_id = NULL, started_at = NULL, updated_at = ${p.add(nowIso())}`);
  }

  private async interrupted(p: Params, filter: InterruptedRunFilter, set: string): Promise<string[]> {
    let where = `status = 'running'`;
    if (filter.workerId !== undefined) where += ` AND worker_id = ${p.add(filter.workerId)}`;
    if (filter.staleMs !== undefined) where += ` AND updated_at <= ${p.add(new Date(Date.now() - filter.staleMs).toISOString())}`;
    const r = await this.pool.query(`UPDATE runs SET ${set} WHERE ${where} RETURNING seq`, p.values);
    return (r.rows as Row[]).map((x) => x.seq as number).sort((a, b) => a - b).map(formatRunId);
  }

  async claimScheduledSlot(datasetId: string, slotIso: string): Promise<boolean> {
    const slot = normaliseSlot(slotIso);
    try {
      const r = await this.pool.query('INSERT INTO schedule_slots (dataset_id, slot, claimed_at) VALUES ($1, $2, $3) ON CONFLICT DO NOTHING', [datasetId, slot, nowIso()]);
      return r.rowCount === 1;
    } catch (e) {
      if (pgCode(e) === '23503') throw notFoundDataset(datasetId);
      throw e;
    }
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
}

/** Collects query parameters and hands out their `$n` placeholders. */
class Params {
  readonly values: unknown[] = [];
  add(v: unknown): string {
    this.values.push(v);
    return `$${this.values.length}`;
  }
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

function columns(rs: ObservationRecord[]): unknown[][] {
  return [rs.map((r) => r.id), rs.map((r) => r.lon), rs.map((r) => r.lat), rs.map((r) => r.observedAt), rs.map((r) => r.weight), rs.map((r) => r.contentHash), rs.map((r) => r.feature)];
}

/** True when the packed big-endian int8 values are strictly increasing (or absent). */
function ascending(buf: Buffer | null): boolean {
  if (buf === null) return true;
  let prev = -1n;
  for (let off = 0; off + 8 <= buf.length; off += 8) {
    const v = buf.readBigInt64BE(off);
    if (v <= prev) return false;
    prev = v;
  }
  return true;
}

/** Copies big-endian doubles from `buf` into `out` starting at index `at`. */
function unpackDoubles(buf: Buffer, out: Float64Array, at: number): void {
  const n = buf.length >>> 3;
  if (n === 0) return;
  const copy = Buffer.from(buf); // swap64 works in place; leave the reply untouched
  if (new Uint8Array(new Uint16Array([1]).buffer)[0] === 1) copy.swap64();
  new Uint8Array(out.buffer, out.byteOffset + at * 8, n * 8).set(copy);
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
    summary: (r.summary ?? null) as Record<string, unknown> | null,
    timings: (r.timings ?? null) as Record<string, number> | null,
  };
}

/** FROM and WHERE for a dataset and a query, the observations aliased `o`. */
function whereClause(p: Params, datasetId: string, q: ObservationQuery): { from: string; clause: string } {
  const parts = [`o.dataset_id = ${p.add(datasetId)}`];
  if (q.bbox !== undefined) {
    const [w, s, e, n] = q.bbox;
    parts.push(`o.lat >= ${p.add(s)} AND o.lat <= ${p.add(n)}`);
    parts.push(w <= e ? `o.lon >= ${p.add(w)} AND o.lon <= ${p.add(e)}` : `(o.lon >= ${p.add(w)} OR o.lon <= ${p.add(e)})`);
  }
  if (q.from !== undefined) parts.push(`o.observed_at >= ${p.add(q.from)}`);
  if (q.to !== undefined) parts.push(`o.observed_at < ${p.add(q.to)}`);
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
