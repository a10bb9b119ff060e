/**
 * Large observation posts on PostgreSQL take the same path as on an SQLite file
 * (test/http/large-store.test.ts): read, stored (one transaction) and placed in a job thread with
 * a connection of its own (src/jobs/store-batch.ts). While another connection holds the dataset's
 * row locked (as an ingest of the same dataset does), the service keeps answering, /healthz
 * counts the post under `storing`, and a small post of the same dataset waits its turn; a fault
 * injected by a trigger on the 15 001st insert stores nothing and answers 503 store-failed,
 * without the database's own words. Not timed: every wait is a poll with a bound.
 */
import type { FastifyInstance } from 'fastify';
import pg from 'pg';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { buildApp } from '../../src/http/app.js';
import { LARGE_STORE_BYTES } from '../../src/http/routes/observations.js';
import { openStore, type StoreConfig } from '../../src/storage/index.js';
import { postgresSkipReason, TEST_DATABASE_URL } from '../reference/postgres.js';
import { testConfig } from './helper.js';
import { collection, health, healthUntil, JSON_TYPE, postObservations } from './large-store-helpers.js';

const pgSkip = await postgresSkipReason();


describe.skipIf(pgSkip !== null)(`large observation posts on PostgreSQL${pgSkip ? ` (skipped: ${pgSkip})` : ''}`, () => {
  const schema = `roost_large_${process.pid}`;
  let app: FastifyInstance;
  let base = '';
  let db: pg.Client;

  /** Every observation id of a dataset in stored (seq) order. */
  const storedIds = async (id: string): Promise<string[]> => (await db.query(`SELECT obs_id FROM ${schema}.observations WHERE dataset_id = $1 ORDER BY seq`, [id])).rows.map((r: { obs_id: string }) => r.obs_id);

  beforeAll(async () => {
    const config: StoreConfig = { databaseUrl: TEST_DATABASE_URL, pgSchema: schema };
    const store = await openStore(config);
    app = await buildApp({ config: testConfig({ scheduleScanMs: 0 }), logger: false, store, storeConfig: config });
    base = await app.listen({ host: '127.0.0.1', port: 0 });
    db = new pg.Client({ connectionString: TEST_DATABASE_URL });
    await db.connect();
    for (const id of ['order', 'fault']) {
      expect((await fetch(`${base}/v1/datasets`, { method: 'POST', headers: JSON_TYPE, body: JSON.stringify({ id, settings: { eps: 60, min_points: 5 } }) })).status).toBe(201);
    }
  });
  afterAll(async () => {
    await app?.close();
    if (db !== undefined) {
      await db.query(`DROP SCHEMA IF EXISTS ${schema} CASCADE`);
      await db.end();
    }
  });

  it('stores a large post in a thread while the service answers, and a small write waits its turn: counts exact, each batch whole and in order', async () => {
    const large = collection('L', 20_000, 11);
    const small = collection('s', 10, 12);
    expect(Buffer.byteLength(large)).toBeGreaterThan(LARGE_STORE_BYTES);
    expect(Buffer.byteLength(small)).toBeLessThanOrEqual(LARGE_STORE_BYTES);
    // another connection holds the dataset's row locked: neither post can store until it lets go
    await db.query('BEGIN');
    await db.query(`SELECT id FROM ${schema}.datasets WHERE id = 'order' FOR UPDATE`);
    let released = false;
    try {
      const largeAnswer = postObservations(base, 'order', large);
      // counted under `storing`: the post is in the job thread, not on the main thread
      await healthUntil(base, (h) => h.storing === 1);
      const smallAnswer = postObservations(base, 'order', small);
      for (let k = 0; k < 5; k++) expect((await health(base)).storing).toBe(1);
      await db.query('COMMIT');
      released = true;
      const [l, s] = await Promise.all([largeAnswer, smallAnswer]);
      expect(l.status).toBe(200);
      expect(s.status).toBe(200);
      expect(await l.json()).toMatchObject({ stored: true, accepted: 20_000, duplicate: 0, placements_total: 20_000 });
      expect(await s.json()).toMatchObject({ stored: true, accepted: 10 });
    } finally {
      if (!released) await db.query('ROLLBACK');
    }
    await healthUntil(base, (h) => h.storing === 0);
    const ids = await storedIds('order');
    expect(ids.length).toBe(20_010);
    const largeIds = Array.from({ length: 20_000 }, (_, i) => `L${i}`);
    const smallIds = Array.from({ length: 10 }, (_, i) => `s${i}`);
    expect(ids[0] === 'L0' ? ids : [...ids.slice(10), ...ids.slice(0, 10)]).toEqual([...largeIds, ...smallIds]);
    // a repeat stores nothing and counts every observation as a duplicate
    const again = await postObservations(base, 'order', large);
    expect(await again.json()).toMatchObject({ stored: true, accepted: 0, duplicate: 20_000 });
    expect((await storedIds('order')).length).toBe(20_010);
  });

  it('stores nothing of a large post when the database fails on its 15 001st insert, and answers 503 store-failed without internal text', async () => {
    // the injected fault: a counter table and a trigger that aborts the 15 001st insert
    await db.query(`CREATE TABLE ${schema}.fault_count (n INTEGER NOT NULL);
      INSERT INTO ${schema}.fault_count VALUES (0);
      CREATE FUNCTION ${schema}.fault_15001() RETURNS trigger LANGUAGE plpgsql AS $$
      BEGIN
        IF NEW.dataset_id = 'fault' THEN
          UPDATE ${schema}.fault_count SET n = n + 1;
          IF (SELECT n FROM ${schema}.fault_count) > 15000 THEN RAISE EXCEPTION 'injected fault at insert 15001'; END IF;
        END IF;
        RETURN NEW;
      END $$;
      CREATE TRIGGER fault_15001 BEFORE INSERT ON ${schema}.observations FOR EACH ROW EXECUTE FUNCTION ${schema}.fault_15001();`);
    const count = async (): Promise<number> => (await db.query(`SELECT n FROM ${schema}.fault_count`)).rows[0].n as number;
    try {
      // 15 000 inserts pass the trigger
      expect((await postObservations(base, 'fault', collection('E', 15_000, 15))).status).toBe(200);
      expect(await count()).toBe(15_000);
      await db.query(`UPDATE ${schema}.fault_count SET n = 0`);
      const res = await postObservations(base, 'fault', collection('F', 20_000, 13));
      expect(res.status).toBe(503);
      expect(res.headers.get('content-type')).toMatch(/^application\/problem\+json/);
      expect(res.headers.get('retry-after')).toMatch(/^\d+$/);
      const body = (await res.json()) as Record<string, unknown>;
      expect(body).toMatchObject({ code: 'store-failed', status: 503 });
      expect(String(body.detail)).toMatch(/nothing of it was stored/);
      expect(String(body.detail)).toContain(String(body.request_id));
      expect(String(body.detail)).not.toMatch(/injected|trigger|plpgsql|postgres/i);
      // the whole transaction was rolled back, the trigger's own counting with it
      expect(await count()).toBe(0);
      const ids = await storedIds('fault');
      expect(ids.length).toBe(15_000);
      expect(ids.some((id) => id.startsWith('F'))).toBe(false);
    } finally {
      await db.query(`DROP TRIGGER fault_15001 ON ${schema}.observations; DROP FUNCTION ${schema}.fault_15001(); DROP TABLE ${schema}.fault_count;`);
    }
    // with the fault gone the same post is stored whole
    const ok = await postObservations(base, 'fault', collection('F', 20_000, 13));
    expect(ok.status).toBe(200);
    expect((await storedIds('fault')).length).toBe(35_000);
  });
});
