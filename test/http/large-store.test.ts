/**
 * Large observation posts on an SQLite file are read, stored (one transaction) and placed in a
 * job thread with its own connection (src/jobs/store-batch.ts): while the database is locked,
 * the service keeps answering, /healthz counts the post under `storing`, and a write of the main
 * thread waits for the lock without blocking; a fault injected by a trigger on the 15 001st
 * insert stores nothing and answers 503 store-failed, without the database's own words. Not timed:
 * every wait is a poll with a bound.
 */
import { mkdtempSync, rmSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import Database from 'better-sqlite3';
import type { FastifyInstance } from 'fastify';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { buildApp } from '../../src/http/app.js';
import { LARGE_STORE_BYTES } from '../../src/http/routes/observations.js';
import { expectMatchesSpec, pointsCollection, testConfig } from './helper.js';
import { collection, GEO, health, healthUntil, JSON_TYPE, postObservations } from './large-store-helpers.js';

const PATH = '/v1/datasets/{id}/observations';


describe('large observation posts on an SQLite file', () => {
  let dir = '';
  let dbPath = '';
  let app: FastifyInstance;
  let base = '';

  /** Every observation id of a dataset in stored (seq) order. */
  const storedIds = (id: string): string[] => {
    const db = new Database(dbPath, { readonly: true });
    try {
      return db.prepare('SELECT obs_id FROM observations WHERE dataset_id = ? ORDER BY seq').pluck().all(id) as string[];
    } finally {
      db.close();
    }
  };

  beforeAll(async () => {
    dir = mkdtempSync(join(tmpdir(), 'roost-large-'));
    dbPath = join(dir, 'roost.db');
    app = await buildApp({ config: testConfig({ dbPath, scheduleScanMs: 0 }), logger: false });
    base = await app.listen({ host: '127.0.0.1', port: 0 });
    for (const id of ['order', 'fault', 'placed']) {
      expect((await fetch(`${base}/v1/datasets`, { method: 'POST', headers: JSON_TYPE, body: JSON.stringify({ id, settings: { eps: 60, min_points: 5 } }) })).status).toBe(201);
    }
  });
  afterAll(async () => {
    await app?.close();
    rmSync(dir, { recursive: true, force: true });
  });

  it('stores a large post in a thread while the service answers, and a small write waits its turn: counts exact, each batch whole and in order', async () => {
    const large = collection('L', 20_000, 11);
    const small = collection('s', 10, 12);
    expect(Buffer.byteLength(large)).toBeGreaterThan(LARGE_STORE_BYTES);
    expect(Buffer.byteLength(small)).toBeLessThanOrEqual(LARGE_STORE_BYTES);
    // another connection holds the write lock: neither post can store until it lets go
    const holder = new Database(dbPath);
    holder.exec('BEGIN IMMEDIATE');
    let released = false;
    try {
      const largeAnswer = postObservations(base, 'order', large);
      await healthUntil(base, (h) => h.storing === 1);
      const smallAnswer = postObservations(base, 'order', small);
      // the main thread is not blocked by the small post waiting for the lock: it keeps answering
      for (let k = 0; k < 5; k++) expect((await health(base)).storing).toBe(1);
      holder.exec('COMMIT');
      released = true;
      const [l, s] = await Promise.all([largeAnswer, smallAnswer]);
      expect(l.status).toBe(200);
      expect(s.status).toBe(200);
      expect(await l.json()).toMatchObject({ stored: true, accepted: 20_000, duplicate: 0, placements_total: 20_000 });
      expect(await s.json()).toMatchObject({ stored: true, accepted: 10 });
    } finally {
      if (!released) holder.exec('ROLLBACK');
      holder.close();
    }
    await healthUntil(base, (h) => h.storing === 0);
    const ids = storedIds('order');
    expect(ids.length).toBe(20_010);
    // each batch in one piece, in its input order, whichever took the lock first
    const largeIds = Array.from({ length: 20_000 }, (_, i) => `L${i}`);
    const smallIds = Array.from({ length: 10 }, (_, i) => `s${i}`);
    expect(ids[0] === 'L0' ? ids : [...ids.slice(10), ...ids.slice(0, 10)]).toEqual([...largeIds, ...smallIds]);
    // a repeat stores nothing and counts every observation as a duplicate
    const again = await postObservations(base, 'order', large);
    expect(await again.json()).toMatchObject({ stored: true, accepted: 0, duplicate: 20_000 });
    expect(storedIds('order').length).toBe(20_010);
  });

  it('stores nothing of a large post when the database fails on its 15 001st insert, and answers 503 store-failed without internal text', async () => {
    const db = new Database(dbPath);
    // the injected fault: a counter table and a trigger that aborts the 15 001st insert
    db.exec(`CREATE TABLE fault_count (n INTEGER NOT NULL);
      INSERT INTO fault_count VALUES (0);
      CREATE TRIGGER fault_15001 BEFORE INSERT ON observations WHEN NEW.dataset_id = 'fault' BEGIN
        UPDATE fault_count SET n = n + 1;
        SELECT RAISE(ABORT, 'injected fault at insert 15001') WHERE (SELECT n FROM fault_count) > 15000;
      END;`);
    try {
      // 15 000 inserts pass the trigger
      expect((await postObservations(base, 'fault', collection('E', 15_000, 15))).status).toBe(200);
      expect(db.prepare('SELECT n FROM fault_count').pluck().get()).toBe(15_000);
      db.exec('UPDATE fault_count SET n = 0');
      const res = await postObservations(base, 'fault', collection('F', 20_000, 13));
      expect(res.status).toBe(503);
      expect(res.headers.get('content-type')).toMatch(/^application\/problem\+json/);
      expect(res.headers.get('retry-after')).toMatch(/^\d+$/);
      const body = (await res.json()) as Record<string, unknown>;
      expect(body).toMatchObject({ code: 'store-failed', status: 503 });
      expect(String(body.detail)).toMatch(/nothing of it was stored/);
      expect(String(body.detail)).toContain(String(body.request_id));
      expect(String(body.detail)).not.toMatch(/injected|trigger|SQLITE/i);
      // the whole transaction was rolled back, the trigger's own counting with it
      expect(db.prepare('SELECT n FROM fault_count').pluck().get()).toBe(0);
      expect(storedIds('fault').length).toBe(15_000);
      expect(storedIds('fault').some((id) => id.startsWith('F'))).toBe(false);

      // the same fault on the main thread (a small post): also nothing stored, also 503
      db.exec('UPDATE fault_count SET n = 14990');
      const smallRes = await postObservations(base, 'fault', collection('G', 50, 14));
      expect(smallRes.status).toBe(503);
      expect(((await smallRes.json()) as { code: string }).code).toBe('store-failed');
      expect(storedIds('fault').length).toBe(15_000);
    } finally {
      db.exec('DROP TRIGGER fault_15001; DROP TABLE fault_count;');
      db.close();
    }
    // with the fault gone the same post is stored whole
    const ok = await postObservations(base, 'fault', collection('F', 20_000, 13));
    expect(ok.status).toBe(200);
    expect(storedIds('fault').length).toBe(35_000);
  });

  it('places a large post against the latest run as a small post is placed', async () => {
    expect((await postObservations(base, 'placed', pointsCollection(400, 3))).status).toBe(200);
    const run = (await (await fetch(`${base}/v1/datasets/placed/runs`, { method: 'POST', headers: JSON_TYPE, body: '{}' })).json()) as { id: string };
    const end = Date.now() + 60_000;
    for (;;) {
      const status = ((await (await fetch(`${base}/v1/datasets/placed/runs/${run.id}`)).json()) as { status: string }).status;
      if (status === 'succeeded') break;
      if (status !== 'queued' && status !== 'running') throw new Error(`run ${status}`);
      if (Date.now() > end) throw new Error('run not finished in 60 s');
      await new Promise((r) => setTimeout(r, 50));
    }
    // the stored points again under new ids, over LARGE_STORE_BYTES: placed in the job thread
    const again = pointsCollection(1200, 3).replace(/"id":"p(\d+)"/g, '"id":"q$1"');
    expect(Buffer.byteLength(again)).toBeGreaterThan(LARGE_STORE_BYTES);
    const res = await app.inject({ method: 'POST', url: '/v1/datasets/placed/observations', headers: GEO, payload: again });
    expectMatchesSpec(res, PATH, 'POST');
    const body = res.json();
    expect(body).toMatchObject({ accepted: 1200, latest_run: run.id, placements_total: 1200 });
    expect(body.placements.length).toBe(1000);
    // each of the first few, posted alone (small: placed on the main thread), is placed the same
    const features = (JSON.parse(again) as { features: unknown[] }).features;
    for (const k of [0, 1, 2, 3, 7]) {
      const one = (await app.inject({ method: 'POST', url: '/v1/datasets/placed/observations', headers: GEO, payload: JSON.stringify(features[k]) })).json();
      expect(one.duplicate).toBe(1);
      expect(body.placements[k]).toEqual({ index: k, observation_id: `q${k}`, hotspot: one.hotspot, nearest_hotspot: one.nearest_hotspot });
    }
    expect(body.placements.some((p: { hotspot: unknown }) => p.hotspot !== null)).toBe(true);
  });
});
