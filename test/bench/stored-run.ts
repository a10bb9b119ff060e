/**
 * Benchmark (not a test): one whole stored run (load → cluster → tracks → layers → save) of the
 * seeded benchmark points (test/bench/data.ts: eps 250 m, min_points 5) on SQLite or PostgreSQL,
 * with the run's own stage timings, the process's peak RSS and the load average.
 *
 *   node --import tsx test/bench/stored-run.ts sqlite [n=1000000] [runs=1]
 *   node --import tsx test/bench/stored-run.ts postgres 10000000
 *
 * The dataset is filled through the store in batches of 10 000 (each observation with an id, an
 * `observed_at` and a count, ~200 bytes, as survey apps send them) and kept between invocations
 * (SQLite file, PostgreSQL schema named after n) so that a run can be measured again without
 * filling again; BENCH_FRESH=1 fills anew, BENCH_DROP=1 removes the fill at the end.
 * BENCH_CODE=dist runs the compiled modules (as `npm start` does) instead of the source through tsx.
 * BENCH_INLINE=1 executes the run on this thread (for `node --cpu-prof`); otherwise the run goes
 * through the service as the server executes runs: a job worker thread with a store connection
 * of its own. Each run is a new run of the same dataset, so the second and later runs match their
 * hotspots against the previous run's tracks. "main-thread delay" is the longest the service's
 * event loop was held during the run (what a /healthz request would have waited at most).
 */
import { existsSync, mkdirSync, rmSync, statSync } from 'node:fs';
import { loadavg, tmpdir } from 'node:os';
import { monitorEventLoopDelay } from 'node:perf_hooks';
import { join } from 'node:path';
import pg from 'pg';
import type { RunContext } from '../../src/jobs/hooks.js';
import type { StoreConfig } from '../../src/storage/index.js';
import type { ObservationRecord, Store } from '../../src/storage/store.js';
import { BENCH_EPS_METERS, BENCH_MIN_POINTS, benchPoints } from './data.js';

// the source through tsx, or with BENCH_CODE=dist the compiled modules as the service runs them
// (its worker threads then start from compiled code too; `npm run build` first)
const CODE = process.env.BENCH_CODE === 'dist' ? 'dist' : 'src';
const code = (path: string): string => new URL(`../../${CODE}/${path}`, import.meta.url).href;
const { buildApp } = (await import(code('http/app.js'))) as typeof import('../../src/http/app.js');
const { resolveConfig } = (await import(code('http/config.js'))) as typeof import('../../src/http/config.js');
const { contentHash } = (await import(code('ingest/records.js'))) as typeof import('../../src/ingest/records.js');
const { executeRun } = (await import(code('jobs/execute.js'))) as typeof import('../../src/jobs/execute.js');
const { assignTracks } = (await import(code('jobs/tracking.js'))) as typeof import('../../src/jobs/tracking.js');
const { openStore } = (await import(code('storage/index.js'))) as typeof import('../../src/storage/index.js');

const ENGINE = process.argv[2] ?? 'sqlite';
const N = Number(process.argv[3] ?? 1_000_000);
const RUNS = Number(process.argv[4] ?? 1);
const PG_URL = process.env.DATABASE_URL?.startsWith('postgres') ? process.env.DATABASE_URL : 'postgres://postgres@127.0.0.1:5432/test';
const DIR = process.env.BENCH_DIR ?? join(tmpdir(), 'roost-stored-run');
const FILL_BATCH = 10_000;

if (ENGINE !== 'sqlite' && ENGINE !== 'postgres') throw new Error(`engine must be sqlite or postgres, got ${ENGINE}`);
mkdirSync(DIR, { recursive: true });
const sqlitePath = join(DIR, `bench-${N}.db`);
const schema = `roost_stored_run_${N}`;
const config: StoreConfig = ENGINE === 'sqlite' ? { sqlitePath } : { databaseUrl: PG_URL, pgSchema: schema };
const load = (): string => loadavg().map((x) => x.toFixed(2)).join(' ');

async function dropFill(): Promise<void> {
  if (ENGINE === 'sqlite') {
    for (const s of ['', '-wal', '-shm']) rmSync(sqlitePath + s, { force: true });
  } else {
    const admin = new pg.Client({ connectionString: PG_URL });
    await admin.connect();
    await admin.query(`DROP SCHEMA IF EXISTS ${schema} CASCADE`);
    await admin.end();
  }
}

/** The dataset `bench` with the n benchmark points, unless it is already there. */
async function fill(store: Store): Promise<void> {
  if ((await store.getDataset('bench')) !== null && (await store.countObservations('bench')) === N) return;
  await store.createDataset({ id: 'bench', name: 'bench', settings: { eps: BENCH_EPS_METERS, min_points: BENCH_MIN_POINTS }, idProperty: null, window: null, schedule: null, webhook: null });
  const t0 = performance.now();
  const points = benchPoints(N);
  for (let b = 0; b < N; b += FILL_BATCH) {
    const recs: ObservationRecord[] = [];
    for (let i = b; i < Math.min(N, b + FILL_BATCH); i++) {
      const lon = Number(points.lon[i]!.toFixed(7));
      const lat = Number(points.lat[i]!.toFixed(7));
      const day = 1 + (i % 28);
      const at = `2026-05-${String(day).padStart(2, '0')}T12:00:00Z`;
      // canonical text: what the reader's JSON.stringify of the parsed feature gives
      const feature = `{"type":"Feature","id":"b${i}","properties":{"observed_at":"${at}","count":${1 + (i % 4)}},"geometry":{"type":"Point","coordinates":[${lon},${lat}]}}`;
      recs.push({ id: `b${i}`, lon, lat, observedAt: Date.parse(at), weight: null, feature, contentHash: contentHash(feature) });
    }
    const r = await store.ingest('bench', recs, { replace: false, partial: false });
    if (!r.stored) throw new Error('fill batch not stored');
    if ((b / FILL_BATCH) % 100 === 99) console.error(`filled ${b + FILL_BATCH} (${((performance.now() - t0) / 1000).toFixed(0)} s, load ${load()})`);
  }
  if (ENGINE === 'postgres') {
    // what autovacuum would do on a quiet server after a bulk fill
    const admin = new pg.Client({ connectionString: PG_URL });
    await admin.connect();
    await admin.query(`VACUUM (ANALYZE) ${schema}.observations`);
    await admin.end();
  }
  console.error(`filled ${N} in ${((performance.now() - t0) / 1000).toFixed(1)} s (load ${load()})`);
}

async function inlineRun(store: Store): Promise<Record<string, number>> {
  const dataset = (await store.getDataset('bench'))!;
  const made = await store.createRun({ datasetId: 'bench', settings: dataset.settings, trigger: 'command' });
  const run = await store.claimRun(made.id, 'bench:1', 3_600_000);
  const ctx: RunContext = { store, run, dataset };
  const done = await executeRun(store, run, dataset, { assignTracks: (h) => assignTracks(ctx, h) });
  return done.timings;
}

type App = Awaited<ReturnType<typeof buildApp>>;

async function serviceRun(app: App): Promise<Record<string, number>> {
  {
    const made = await app.inject({ method: 'POST', url: '/v1/datasets/bench/runs', headers: { 'content-type': 'application/json' }, payload: '{}' });
    if (made.statusCode !== 202) throw new Error(`run not accepted: ${made.body}`);
    const runUrl = made.headers.location as string;
    for (;;) {
      await new Promise((resolve) => setTimeout(resolve, 100));
      const run = (await app.inject({ method: 'GET', url: runUrl })).json() as { status: string; timings_ms: Record<string, number> | null; error: string | null };
      if (run.status === 'failed' || run.status === 'cancelled') throw new Error(`run ${run.status}: ${run.error}`);
      if (run.status === 'succeeded') return run.timings_ms ?? {};
    }
  }
}

if (process.env.BENCH_FRESH === '1') await dropFill();
const store = await openStore(config);
let app: App | null = null;
try {
  await fill(store);
  const size = ENGINE === 'sqlite' && existsSync(sqlitePath) ? ` (${(statSync(sqlitePath).size / 2 ** 20).toFixed(0)} MiB file)` : '';
  console.log(`${ENGINE}, ${N} observations${size}, ${process.env.BENCH_INLINE === '1' ? 'on this thread' : 'in a job worker thread'}, ${CODE === 'dist' ? 'compiled code' : 'source through tsx'}; Node ${process.version}`);
  console.log('| run | load | parse | cluster | tracks | layers | save | total | peak RSS | main-thread delay | load average |');
  console.log('| ---: | ---: | ---: | ---: | ---: | ---: | ---: | ---: | ---: | ---: | --- |');
  for (let k = 1; k <= RUNS; k++) {
    const before = load();
    if (process.env.BENCH_INLINE !== '1') app ??= await buildApp({ config: resolveConfig({ port: 0, workers: 1, logLevel: 'silent', maxEventLoopDelayMs: 0 }, {}), logger: false, store, storeConfig: config });
    const delay = monitorEventLoopDelay({ resolution: 10 });
    delay.enable();
    const t = app === null ? await inlineRun(store) : await serviceRun(app);
    delay.disable();
    const s = (x: number | undefined): string => (x === undefined ? '–' : (x / 1000).toFixed(2));
    const rss = process.resourceUsage().maxRSS / 1024;
    const held = app === null ? '–' : `${(delay.max / 1e9).toFixed(2)} s`;
    console.log(`| ${k} | ${s(t.load)} | ${s(t.parse)} | ${s(t.cluster)} | ${s(t.tracks)} | ${s(t.layers)} | ${s(t.save)} | ${s(t.total)} | ${rss.toFixed(0)} MiB | ${held} | ${before} → ${load()} |`);
  }
} finally {
  // the service closes the store it was given
  if (app !== null) await app.close();
  else await store.close();
  if (process.env.BENCH_DROP === '1') await dropFill();
}
