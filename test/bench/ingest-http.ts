/**
 * Benchmark (not a test): observations per second stored over HTTP in batches of 1,000
 * (POST /v1/datasets/{id}/observations on a listening server, one client, sequential posts), on
 * SQLite and on PostgreSQL; then the time to load N stored observations into a run
 * (store.loadForRun), straight after filling and again. Seeded data; figures printed as a
 * Markdown table for test/bench/ingest-http-results.md.
 *
 *   node --import tsx test/bench/ingest-http.ts [httpObservations=50000] [loadObservations=1000000]
 *   BENCH_ENGINES=postgres node --import tsx test/bench/ingest-http.ts   # one engine only (sqlite | postgres)
 */
import { execFile } from 'node:child_process';
import { mkdtempSync, rmSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { promisify } from 'node:util';
import pg from 'pg';
import { buildApp } from '../../src/http/app.js';
import { resolveConfig } from '../../src/http/config.js';
import { openStore, type StoreConfig } from '../../src/storage/index.js';
import type { ObservationRecord, Store } from '../../src/storage/store.js';
import { contentHash } from '../../src/ingest/records.js';
import { seeded } from '../http/helper.js';

const HTTP_N = Number(process.argv[2] ?? 50_000);
const LOAD_N = Number(process.argv[3] ?? 1_000_000);
const BATCH = 1000;
/** batches posted (to another dataset) before the timed ones */
const WARMUP = 20;
const PG_URL = process.env.DATABASE_URL ?? 'postgres://postgres@127.0.0.1:5432/test';
const ENGINES = (process.env.BENCH_ENGINES ?? 'sqlite,postgres').split(',');

function featureText(i: number, rnd: () => number): string {
  const lon = 8.5 + (rnd() - 0.5) * 0.4;
  const lat = 47.3 + (rnd() - 0.5) * 0.4;
  return `{"type":"Feature","id":"o${i}","geometry":{"type":"Point","coordinates":[${lon.toFixed(7)},${lat.toFixed(7)}]},"properties":{"observed_at":"2026-04-${String(1 + (i % 28)).padStart(2, '0')}T12:00:00Z","plant":"${i % 3 ? 'balsam' : 'knotweed'}","stems":${1 + (i % 5)}}}`;
}

async function httpIngest(label: string, storeConfig: StoreConfig, store: Store): Promise<string> {
  const app = await buildApp({ config: resolveConfig({ port: 0, workers: 1, logLevel: 'silent', maxEventLoopDelayMs: 0 }, {}), logger: false, store, storeConfig });
  const url = await app.listen({ port: 0, host: '127.0.0.1' });
  await fetch(`${url}/v1/datasets`, { method: 'POST', headers: { 'content-type': 'application/json' }, body: JSON.stringify({ id: 'bench', settings: { eps: 50 } }) });
  const rnd = seeded(42);
  const bodies: string[] = [];
  for (let b = 0; b < HTTP_N / BATCH; b++) {
    const fs: string[] = [];
    for (let i = 0; i < BATCH; i++) fs.push(featureText(b * BATCH + i, rnd));
    bodies.push(`{"type":"FeatureCollection","features":[${fs.join(',')}]}`);
  }
  const post = async (dataset: string, body: string): Promise<void> => {
    const res = await fetch(`${url}/v1/datasets/${dataset}/observations`, { method: 'POST', headers: { 'content-type': 'application/geo+json' }, body });
    if (res.status !== 200) throw new Error(`${res.status} ${await res.text()}`);
    await res.arrayBuffer();
  };
  // warm-up, not timed: the first batches start the worker thread and compile the parsing code
  await fetch(`${url}/v1/datasets`, { method: 'POST', headers: { 'content-type': 'application/json' }, body: JSON.stringify({ id: 'warmup', settings: { eps: 50 } }) });
  for (const body of bodies.slice(0, WARMUP)) await post('warmup', body);
  const t0 = performance.now();
  for (const body of bodies) await post('bench', body);
  const s = (performance.now() - t0) / 1000;
  await app.close();
  return `| ${label} | HTTP ingest, batches of ${BATCH} | ${HTTP_N} | ${s.toFixed(2)} s | ${Math.round(HTTP_N / s)} obs/s |`;
}

async function loadAndRun(label: string, store: Store, settle?: (store: Store) => Promise<void>): Promise<string[]> {
  await store.createDataset({ id: 'load', name: 'load', settings: { eps: 250, min_points: 5 }, idProperty: null, window: null, schedule: null, webhook: null });
  const rnd = seeded(7);
  for (let b = 0; b < LOAD_N; b += 10_000) {
    const recs: ObservationRecord[] = [];
    for (let i = b; i < Math.min(LOAD_N, b + 10_000); i++) {
      const text = featureText(i, rnd);
      const c = /coordinates":\[([^,]+),([^\]]+)\]/.exec(text)!;
      recs.push({ id: `o${i}`, lon: Number(c[1]), lat: Number(c[2]), observedAt: Date.parse(`2026-04-${String(1 + (i % 28)).padStart(2, '0')}T12:00:00Z`), weight: null, feature: text, contentHash: contentHash(text) });
    }
    await store.ingest('load', recs, { replace: false, partial: false });
  }
  const rows: string[] = [];
  for (let k = 0; k < 2; k++) {
    if (k === 1) await settle?.(store);
    const t0 = performance.now();
    const input = await store.loadForRun('load');
    const s = (performance.now() - t0) / 1000;
    const what = k === 0 ? 'loadForRun straight after the fill' : settle ? 'loadForRun after VACUUM' : 'loadForRun again';
    rows.push(`| ${label} | ${what} | ${input.ids.length} | ${s.toFixed(2)} s | ${Math.round(input.ids.length / s)} obs/s |`);
  }
  return rows;
}

/**
 * One whole stored run of the loaded dataset through the service (POST …/runs), executed as the
 * server executes runs: in a job worker thread with a store connection of its own. Reports the
 * run's own timings of its load stage and of the whole run.
 */
async function storedRun(label: string, storeConfig: StoreConfig, store: Store): Promise<string> {
  const app = await buildApp({ config: resolveConfig({ port: 0, workers: 1, logLevel: 'silent', maxEventLoopDelayMs: 0 }, {}), logger: false, store, storeConfig });
  try {
    const made = await app.inject({ method: 'POST', url: '/v1/datasets/load/runs', headers: { 'content-type': 'application/json' }, payload: '{}' });
    if (made.statusCode !== 202) throw new Error(`run not accepted: ${made.body}`);
    const runUrl = made.headers.location as string;
    for (;;) {
      await new Promise((resolve) => setTimeout(resolve, 200));
      const run = (await app.inject({ method: 'GET', url: runUrl })).json() as { status: string; timings_ms: Record<string, number> | null; error: string | null };
      if (run.status === 'failed' || run.status === 'cancelled') throw new Error(`run ${run.status}: ${run.error}`);
      if (run.status !== 'succeeded') continue;
      const t = run.timings_ms ?? {};
      const n = await store.countObservations('load');
      console.error(`${label} run timings (ms): ${JSON.stringify(t)}`);
      // the largest stored layer, pulled as a GIS would: by curl, a process of its own (a client
      // in this process would share the event loop with the server and measure itself)
      const url = await app.listen({ port: 0, host: '127.0.0.1' });
      const g0 = performance.now();
      const got = await promisify(execFile)('curl', ['-sS', '-o', '/dev/null', '-w', '%{http_code} %{size_download}', `${url}/v1/datasets/load/runs/latest/points`]);
      const getS = (performance.now() - g0) / 1000;
      const [status, size] = got.stdout.split(' ');
      if (status !== '200') throw new Error(`points layer: ${status}`);
      const mb = Number(size) / 1e6;
      return [
        `| ${label} | a whole stored run (eps 250 m, min_points 5), in a worker thread: its load stage ${((t.load ?? NaN) / 1000).toFixed(2)} s | ${n} | ${((t.total ?? NaN) / 1000).toFixed(2)} s | ${Math.round(n / ((t.load ?? NaN) / 1000))} obs/s loaded |`,
        `| ${label} | GET of that run's points layer by curl (${mb.toFixed(0)} MB) | ${n} | ${getS.toFixed(2)} s | ${(mb / getS).toFixed(0)} MB/s |`,
      ].join('\n');
    }
  } finally {
    await app.close();
  }
}

const out: string[] = ['| store | what | observations | time | rate |', '| --- | --- | --- | --- | --- |'];
const dir = mkdtempSync(join(tmpdir(), 'roost-bench-'));
interface Engine {
  label: string;
  ingest: StoreConfig;
  load: StoreConfig;
  /** after the fill, before the second load: what a quiet server does by itself (PostgreSQL's autovacuum) */
  settle?: (store: Store) => Promise<void>;
}
const engines: Engine[] = [];
if (ENGINES.includes('sqlite')) engines.push({ label: 'SQLite', ingest: { sqlitePath: join(dir, 'bench.db') }, load: { sqlitePath: join(dir, 'load.db') } });
const admin = new pg.Client({ connectionString: PG_URL, connectionTimeoutMillis: 3000 });
const schema = `roost_bench_${process.pid}`;
if (ENGINES.includes('postgres')) {
  try {
    await admin.connect();
    engines.push({
      label: 'PostgreSQL',
      ingest: { databaseUrl: PG_URL, pgSchema: schema },
      load: { databaseUrl: PG_URL, pgSchema: `${schema}_load` },
      settle: async () => void (await admin.query(`VACUUM (ANALYZE) ${schema}_load.observations`)),
    });
  } catch (e) {
    out.push(`| PostgreSQL | skipped: ${(e as Error).message} | | | |`);
  }
}
try {
  // every engine's HTTP ingest first, then the large loads, so that no ingest runs in a heap
  // left large by a load
  for (const e of engines) {
    const store = await openStore(e.ingest);
    out.push(await httpIngest(e.label, e.ingest, store));
    console.log(out.at(-1));
  }
  for (const e of engines) {
    const store = await openStore(e.load);
    for (const r of await loadAndRun(e.label, store, e.settle)) out.push(r), console.log(r);
    out.push(await storedRun(e.label, e.load, store));
    console.log(out.at(-1));
  }
} finally {
  rmSync(dir, { recursive: true, force: true });
  if (engines.some((e) => e.label === 'PostgreSQL')) {
    await admin.query(`DROP SCHEMA IF EXISTS ${schema} CASCADE`);
    await admin.query(`DROP SCHEMA IF EXISTS ${schema}_load CASCADE`);
  }
  await admin.end().catch(() => undefined);
}
console.log(`\nNode ${process.version}\n\n${out.join('\n')}`);
