/**
 * Runs whose process dies are taken over: `roost serve` is killed with SIGKILL in the middle of a
 * stored run, on PostgreSQL and on a SQLite file, and either started again at once or left to a
 * second instance already running on the same database. The run must be claimed again within the
 * documented bound (src/jobs/lease.ts: at most 1.75 heartbeats after the dead process's last
 * renewal, stated as 2 heartbeats; for a restart, or at the restarted instance's start), and
 * succeed. Nothing here sleeps for a set time: the test polls the store and the service.
 *
 * PostgreSQL: the server named by DATABASE_URL (default postgres://postgres@127.0.0.1:5432/test),
 * in a database of this test's own; reported as skipped with the reason when no server answers.
 */
import { mkdtempSync, rmSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import pg from 'pg';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { leaseMs } from '../../src/jobs/lease.js';
import { openPostgresStore } from '../../src/storage/postgres.js';
import { openSqliteStore } from '../../src/storage/sqlite.js';
import type { Run, Store } from '../../src/storage/store.js';
import { pointsCollection } from '../http/helper.js';
import { postgresSkipReason, TEST_DATABASE_URL } from '../reference/postgres.js';
import { ChildServers, type ChildServer } from './child-server.js';

const dir = mkdtempSync(join(tmpdir(), 'roost-takeover-'));
const HEARTBEAT_MS = 2000;
const BOUND_MS = 2 * HEARTBEAT_MS;
const POINTS = 40_000;

const pgSkip = await postgresSkipReason();
if (pgSkip !== null) console.warn(`[jobs] run takeover on PostgreSQL SKIPPED: ${pgSkip}`);
const PG_DB = `roost_takeover_${process.pid}`;
const PG_URL = ((): string => {
  const u = new URL(TEST_DATABASE_URL);
  u.pathname = `/${PG_DB}`;
  return u.href;
})();

const servers = new ChildServers();
beforeAll(async () => {
  if (pgSkip !== null) return;
  const admin = new pg.Client({ connectionString: TEST_DATABASE_URL });
  await admin.connect();
  await admin.query(`DROP DATABASE IF EXISTS ${PG_DB}`);
  await admin.query(`CREATE DATABASE ${PG_DB}`);
  await admin.end();
});
afterAll(async () => {
  servers.killAll();
  rmSync(dir, { recursive: true, force: true });
  if (pgSkip === null) {
    const admin = new pg.Client({ connectionString: TEST_DATABASE_URL });
    await admin.connect();
    await admin.query(`DROP DATABASE IF EXISTS ${PG_DB} WITH (FORCE)`);
    await admin.end();
  }
});

type Server = ChildServer;

/** Starts `roost serve` on a free port on the database `db` names (flags); resolves once it listens (bounded wait). */
function serve(db: string[]): Promise<Server> {
  const args = [...db, '--workers', '1', '--run-heartbeat-ms', String(HEARTBEAT_MS), '--max-event-loop-delay-ms', '0'];
  return servers.serve(args, { startMs: 60_000, env: { ...process.env, DATABASE_URL: '' } });
}

const kill = (s: Server): Promise<void> => servers.kill(s);

/** Polls until `done` holds (every 25 ms, at most `withinMs`). */
async function until<T>(what: string, get: () => Promise<T>, done: (v: T) => boolean, withinMs = 120_000): Promise<T> {
  const end = Date.now() + withinMs;
  for (;;) {
    const v = await get();
    if (done(v)) return v;
    if (Date.now() > end) throw new Error(`${what}: still ${JSON.stringify(v)}`);
    await new Promise((r) => setTimeout(r, 25));
  }
}

const JSON_TYPE = { 'content-type': 'application/json' };
const GEO = { 'content-type': 'application/geo+json' };

interface Engine {
  name: string;
  skip: string | null;
  /** serve arguments for a database of this case */
  db(key: string): string[];
  /** a store on the same database, to watch the run */
  watch(key: string): Store;
}

const ENGINES: Engine[] = [
  {
    name: 'PostgreSQL',
    skip: pgSkip,
    db: () => ['--database-url', PG_URL],
    watch: () => openPostgresStore({ connectionString: PG_URL, poolSize: 2 }),
  },
  {
    name: 'SQLite shared by two processes',
    skip: null,
    db: (key) => ['--db', join(dir, `${key}.db`)],
    watch: (key) => openSqliteStore({ path: join(dir, `${key}.db`) }),
  },
];

for (const engine of ENGINES) {
  describe.skipIf(engine.skip !== null)(`a run whose process is killed (${engine.name})${engine.skip ? ` (skipped: ${engine.skip})` : ''}`, () => {
    /**
     * Creates a dataset, starts a run and, as soon as the run is claimed, kills the server that
     * claimed it (its claim names its process id). @returns the run as the dead process left it, and the survivors
     */
    async function killMidRun(servers: Server[], watch: Store, dataset: string): Promise<{ dead: Run; left: Server[] }> {
      const s = servers[0]!;
      expect((await fetch(`${s.url}/v1/datasets`, { method: 'POST', headers: JSON_TYPE, body: JSON.stringify({ id: dataset, settings: { eps: 60, min_points: 5 } }) })).status).toBe(201);
      const posted = await fetch(`${s.url}/v1/datasets/${dataset}/observations`, { method: 'POST', headers: GEO, body: pointsCollection(POINTS, 5) });
      expect(((await posted.json()) as { accepted: number }).accepted).toBe(POINTS);
      const asked = await fetch(`${s.url}/v1/datasets/${dataset}/runs`, { method: 'POST' });
      const created = (await asked.json()) as { id: string };
      expect(asked.status, JSON.stringify(created)).toBe(202);
      // the claim sets the lease: kill at once, while the run is running
      const claimed = await until('the run is claimed', () => watch.getRun(dataset, created.id), (r) => r !== null && r.status !== 'queued');
      expect(claimed!.status).toBe('running');
      const holder = servers.find((x) => claimed!.workerId!.includes(`:${x.child.pid}:`));
      expect(holder, `claimed by ${claimed!.workerId}`).toBeDefined();
      await kill(holder!);
      const dead = (await watch.getRun(dataset, created.id))!;
      expect(dead.status, 'the run was still running when its process died').toBe('running');
      expect(dead.workerId).toBe(claimed!.workerId);
      expect(dead.leaseUntil).not.toBeNull();
      return { dead, left: servers.filter((x) => x !== holder) };
    }

    /** Waits for the run to end; checks that another claim finished it, once, and returns it. */
    async function finished(watch: Store, dataset: string, dead: Run): Promise<Run> {
      const run = (await until('the run ends', () => watch.getRun(dataset, dead.id), (r) => r !== null && r.status !== 'queued' && r.status !== 'running'))!;
      expect(run.status, run.error ?? '').toBe('succeeded');
      expect(run.workerId).not.toBe(dead.workerId);
      expect(run.interruptions).toBe(1);
      expect(run.error).toBeNull();
      expect((await watch.getRunHotspots(run.id)).length).toBeGreaterThan(0);
      return run;
    }

    it('started again at once: the restarted instance takes the run over and it succeeds', async () => {
      const key = `restart-${engine.name.slice(0, 2)}`;
      const watch = engine.watch(key);
      try {
        const first = await serve(engine.db(key));
        const { dead } = await killMidRun([first], watch, `${key}-ds`);
        const second = await serve(engine.db(key));
        const run = await finished(watch, `${key}-ds`, dead);
        // the dead process's last renewal is its lease's end less one lease
        const lastRenewal = Date.parse(dead.leaseUntil!) - leaseMs(HEARTBEAT_MS);
        // claimed within the bound after the last renewal, or (when starting took longer) as soon as the restarted instance was up
        const latest = Math.max(lastRenewal + BOUND_MS, second.readyAt + HEARTBEAT_MS / 2);
        expect(Date.parse(run.startedAt!), `claimed ${Date.parse(run.startedAt!) - lastRenewal} ms after the last renewal`).toBeLessThanOrEqual(latest);
        const listed = (await (await fetch(`${second.url}/v1/datasets/${key}-ds/runs/latest/hotspots`)).json()) as { features: unknown[] };
        expect(listed.features.length).toBeGreaterThan(0);
        await kill(second);
      } finally {
        await watch.close();
      }
    }, 240_000);

    it('with a second instance running: it takes the run over within two heartbeats and the run succeeds', async () => {
      const key = `second-${engine.name.slice(0, 2)}`;
      const watch = engine.watch(key);
      try {
        const servers = [await serve(engine.db(key)), await serve(engine.db(key))];
        const { dead, left } = await killMidRun(servers, watch, `${key}-ds`);
        expect(left).toHaveLength(1);
        const run = await finished(watch, `${key}-ds`, dead);
        const lastRenewal = Date.parse(dead.leaseUntil!) - leaseMs(HEARTBEAT_MS);
        const after = Date.parse(run.startedAt!) - lastRenewal;
        // not before the lease ran out, and within the documented bound
        expect(after, `claimed ${after} ms after the last renewal`).toBeGreaterThanOrEqual(leaseMs(HEARTBEAT_MS));
        expect(after, `claimed ${after} ms after the last renewal`).toBeLessThanOrEqual(BOUND_MS);
        await kill(left[0]!);
      } finally {
        await watch.close();
      }
    }, 240_000);
  });
}
