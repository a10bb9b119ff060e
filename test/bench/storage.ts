/**
 * Storage benchmark: ingestion rate in batches of 1 000 and loading 1 000 000 stored observations
 * into a run, on SQLite and on PostgreSQL. Seeded data, so runs are comparable.
 *
 *   node --import tsx test/bench/storage.ts            # both engines, 1 000 000 observations
 *   BENCH_N=200000 node --import tsx test/bench/storage.ts
 *   BENCH_ENGINES=postgres node --import tsx test/bench/storage.ts   # one engine only (sqlite | postgres)
 *
 * PostgreSQL: DATABASE_URL (default postgres://postgres@127.0.0.1:5432/test), schema roost_bench
 * (dropped afterwards); skipped with a note when unreachable. Writes test/bench/storage-results.md.
 */
import { createHash } from 'node:crypto';
import { existsSync, mkdtempSync, readFileSync, rmSync, writeFileSync } from 'node:fs';
import { spawnSync } from 'node:child_process';
import { cpus, loadavg, tmpdir } from 'node:os';
import { dirname, join } from 'node:path';
import { fileURLToPath } from 'node:url';
import pg from 'pg';
import { openPostgresStore } from '../../src/storage/postgres.js';
import { openSqliteStore } from '../../src/storage/sqlite.js';
import type { ObservationRecord, Store } from '../../src/storage/store.js';
import { rng } from '../reference/seeded.js';

const N = Number(process.env.BENCH_N ?? 1_000_000);
const BATCH = 1000;
/** observations ingested in batches of 1 000 for the rate; the rest is filled in batches of 10 000 */
const RATE_N = Math.min(N, 200_000);
const ENGINES = (process.env.BENCH_ENGINES ?? 'sqlite,postgres').split(',');
const PG_URL = process.env.DATABASE_URL?.startsWith('postgres') ? process.env.DATABASE_URL : 'postgres://postgres@127.0.0.1:5432/test';
const SPECIES = ['heron', 'egret', 'ibis', 'stork', 'crane'];
const T0 = Date.UTC(2024, 4, 1);

/** Batch `k` of `size` records: clustered positions around a few centres, times over 30 days, a weight on every 4th. */
function batch(k: number, size: number): ObservationRecord[] {
  const r = rng(1000 + k);
  const out: ObservationRecord[] = new Array(size);
  for (let i = 0; i < size; i++) {
    const n = k * size + i;
    const c = r.int(50);
    const lon = Math.round((-120 + c * 4.7 + r.normal() * 0.05) * 1e6) / 1e6;
    const lat = Math.round((-40 + c * 1.6 + r.normal() * 0.05) * 1e6) / 1e6;
    const t = T0 + Math.floor(r.next() * 30 * 86_400_000);
    const w = n % 4 === 0 ? 1 + r.int(5) : null;
    const id = `obs-${n}`;
    const props: Record<string, unknown> = { species: SPECIES[r.int(SPECIES.length)], observer: `v${r.int(300)}`, observed_at: new Date(t).toISOString() };
    if (w !== null) props['count'] = w;
    const feature = JSON.stringify({ type: 'Feature', id, geometry: { type: 'Point', coordinates: [lon, lat] }, properties: props });
    out[i] = { id, lon, lat, observedAt: t, weight: w, feature, contentHash: createHash('sha256').update(feature).digest('hex') };
  }
  return out;
}

interface Figures {
  engine: string;
  ingestPerS: number;
  ingestBatchMsP50: number;
  repostPerS: number;
  fillPerS: number;
  loadMs: number[];
  freshLoadMs: number;
  loadedN: number;
  featureBytes: number;
}

function median(xs: number[]): number {
  const s = [...xs].sort((a, b) => a - b);
  return s[Math.floor(s.length / 2)] as number;
}

/**
 * `settle` runs between the fill and the measured loads: for PostgreSQL the VACUUM (ANALYZE)
 * that autovacuum starts by itself after a bulk insert, so that it does not run during the loads.
 * One load straight after the fill, before it, is reported apart.
 */
async function measure(engine: string, store: Store, settle: () => Promise<void> = async () => undefined): Promise<Figures> {
  await store.createDataset({ id: 'bench', name: 'bench', settings: {}, idProperty: null, window: null, schedule: null, webhook: null });
  const opts = { replace: false, partial: false };
  // rate: batches of 1 000 (record generation happens outside the timed section)
  const times: number[] = [];
  let ingestMs = 0;
  for (let k = 0; k < RATE_N / BATCH; k++) {
    const b = batch(k, BATCH);
    const t = performance.now();
    const res = await store.ingest('bench', b, opts);
    const dt = performance.now() - t;
    if (res.accepted.length !== BATCH) throw new Error('benchmark batch not fully accepted');
    times.push(dt);
    ingestMs += dt;
  }
  // idempotent re-post of 20 batches (a phone retrying): all duplicates
  let repostMs = 0;
  for (let k = 0; k < 20; k++) {
    const b = batch(k, BATCH);
    const t = performance.now();
    const res = await store.ingest('bench', b, opts);
    repostMs += performance.now() - t;
    if (res.duplicates.length !== BATCH) throw new Error('re-post not reported as duplicates');
  }
  // fill to N in batches of 10 000
  let fillMs = 0;
  const FILL = 10_000;
  for (let start = RATE_N; start < N; start += FILL) {
    const b = batch(start / FILL, FILL).map((r, i) => ({ ...r, id: `fill-${start + i}` }));
    const t = performance.now();
    await store.ingest('bench', b, opts);
    fillMs += performance.now() - t;
    if ((start - RATE_N) % 200_000 === 0) process.stderr.write(`${engine}: ${start} stored\n`);
  }
  const count = await store.countObservations('bench');
  if (count !== N) throw new Error(`expected ${N} stored, found ${count}`);
  const t0 = performance.now();
  await store.loadForRun('bench');
  const freshLoadMs = performance.now() - t0;
  await settle();
  const loadMs: number[] = [];
  let loadedN = 0;
  let featureBytes = 0;
  for (let i = 0; i < 3; i++) {
    const t = performance.now();
    const cols = await store.loadForRun('bench');
    loadMs.push(performance.now() - t);
    loadedN = cols.ids.length;
    if (i === 0) for (const f of cols.features) featureBytes += f.length;
  }
  return {
    engine,
    ingestPerS: RATE_N / (ingestMs / 1000),
    ingestBatchMsP50: median(times),
    repostPerS: (20 * BATCH) / (repostMs / 1000),
    fillPerS: N > RATE_N ? (N - RATE_N) / (fillMs / 1000) : NaN,
    loadMs,
    freshLoadMs,
    loadedN,
    featureBytes,
  };
}

/** Ingest rate with synchronous=FULL (one fsync per commit) for the durability comparison. */
async function sqliteFullRate(path: string): Promise<number> {
  const store = openSqliteStore({ path, synchronous: 'FULL' });
  await store.migrate();
  await store.createDataset({ id: 'bench', name: 'bench', settings: {}, idProperty: null, window: null, schedule: null, webhook: null });
  let ms = 0;
  const n = 50;
  for (let k = 0; k < n; k++) {
    const b = batch(k, BATCH);
    const t = performance.now();
    await store.ingest('bench', b, { replace: false, partial: false });
    ms += performance.now() - t;
  }
  await store.close();
  return (n * BATCH) / (ms / 1000);
}

/** Thrown to leave out an engine that BENCH_ENGINES does not name. */
class SkipEngine extends Error {}

interface EngineOutcome {
  rows: Figures[];
  notes: string[];
  /** SQLite with synchronous=FULL, obs/s; NaN when not measured */
  fullRate: number;
}

/** The figures of the engines named, measured in this process. */
async function measureHere(engines: string[]): Promise<EngineOutcome> {
  const rows: Figures[] = [];
  const notes: string[] = [];
  const dir = mkdtempSync(join(tmpdir(), 'roost-bench-'));
  let fullRate = NaN;
  try {
    if (!engines.includes('sqlite')) throw new SkipEngine();
    const sqlite = openSqliteStore({ path: join(dir, 'bench.db') });
    await sqlite.migrate();
    rows.push(await measure('SQLite (WAL, synchronous=NORMAL)', sqlite));
    await sqlite.close();
    fullRate = await sqliteFullRate(join(dir, 'full.db'));
  } catch (e) {
    if (!(e instanceof SkipEngine)) throw e;
  } finally {
    rmSync(dir, { recursive: true, force: true });
  }

  const admin = new pg.Client({ connectionString: PG_URL, connectionTimeoutMillis: 3000 });
  let pgUp = engines.includes('postgres');
  if (pgUp) {
    try {
      await admin.connect();
      await admin.query('DROP SCHEMA IF EXISTS roost_bench CASCADE');
    } catch (e) {
      pgUp = false;
      notes.push(`PostgreSQL not measured: ${(e as Error).message}`);
    }
  }
  if (pgUp) {
    const store = openPostgresStore({ connectionString: PG_URL, schema: 'roost_bench' });
    try {
      await store.migrate();
      rows.push(await measure('PostgreSQL', store, async () => void (await store.pool.query('VACUUM (ANALYZE) observations'))));
      const v = await admin.query('SHOW server_version');
      notes.push(`PostgreSQL ${(v.rows[0] as { server_version: string }).server_version} on the same machine (127.0.0.1).`);
    } finally {
      await store.close();
      await admin.query('DROP SCHEMA IF EXISTS roost_bench CASCADE');
    }
  }
  await admin.end().catch(() => undefined);
  return { rows, notes, fullRate };
}

/**
 * Each engine in a process of its own: measured one after the other in one process, the second
 * engine ran in a heap the first had left large, which moved its figures by a quarter.
 */
function measureApart(engines: string[]): EngineOutcome {
  const out: EngineOutcome = { rows: [], notes: [], fullRate: NaN };
  for (const engine of engines) {
    const child = spawnSync(process.execPath, [...process.execArgv, fileURLToPath(import.meta.url)], {
      env: { ...process.env, BENCH_ENGINES: engine, BENCH_CHILD: '1' },
      stdio: ['ignore', 'pipe', 'inherit'],
      encoding: 'utf8',
      maxBuffer: 1 << 20,
    });
    if (child.status !== 0) throw new Error(`the ${engine} benchmark process failed (exit ${child.status})`);
    const got = JSON.parse(child.stdout.trim().split('\n').at(-1) as string) as EngineOutcome;
    out.rows.push(...got.rows);
    out.notes.push(...got.notes);
    if (Number.isFinite(got.fullRate)) out.fullRate = got.fullRate;
  }
  return out;
}

async function main(): Promise<void> {
  if (process.env.BENCH_CHILD) {
    const got = await measureHere(ENGINES);
    process.stdout.write(`${JSON.stringify(got, (_, v: unknown) => (typeof v === 'number' && !Number.isFinite(v) ? null : v))}\n`);
    return;
  }
  const load0 = loadavg()[0] as number;
  const known = ['sqlite', 'postgres'].filter((e) => ENGINES.includes(e));
  const { rows, notes, fullRate: rate } = measureApart(known);
  const fullRate = rate ?? NaN;
  for (const e of ['sqlite', 'postgres']) if (!known.includes(e)) notes.push(`${e === 'sqlite' ? 'SQLite' : 'PostgreSQL'} not measured in this run (BENCH_ENGINES).`);
  notes.push('Each engine was measured in a process of its own.');

  const f0 = (x: number): string => (Number.isFinite(x) ? Math.round(x).toLocaleString('en-US') : '–');
  const lines = [
    '# Storage benchmark',
    '',
    `Command: \`node --import tsx test/bench/storage.ts\` (N = ${N.toLocaleString('en-US')}). Node ${process.version}, ${cpus().length} × ${cpus()[0]?.model ?? 'CPU'}, load average ${load0.toFixed(1)} at start (the machine is shared, so figures vary between runs). Seeded data: ~${rows[0] ? Math.round(rows[0].featureBytes / rows[0].loadedN) : '?'} bytes of feature text per observation. Record generation (JSON text, SHA-256) is outside the timed sections.`,
    '',
    '| engine | ingest, batches of 1 000 (obs/s) | median batch (ms) | re-post of stored batches (obs/s) | fill, batches of 10 000 (obs/s) | loadForRun of ' + N.toLocaleString('en-US') + ' (ms, 3 runs) | loadForRun straight after the fill (ms) |',
    '| --- | ---: | ---: | ---: | ---: | --- | ---: |',
    ...rows.map((r) => `| ${r.engine} | ${f0(r.ingestPerS)} | ${r.ingestBatchMsP50.toFixed(1)} | ${f0(r.repostPerS)} | ${f0(r.fillPerS)} | ${r.loadMs.map((x) => f0(x)).join(', ')} | ${f0(r.freshLoadMs)} |`),
    '',
    `Targets: ingest ≥ 20 000 obs/s in batches of 1 000; load 1 000 000 stored observations in < 2 000 ms.`,
    '',
    `Ingest rate is measured over the first ${RATE_N.toLocaleString('en-US')} observations; the remainder is filled in larger batches only to reach N quickly.`,
    `SQLite with synchronous=FULL (an fsync per commit, durable against power loss): ${f0(fullRate)} obs/s in batches of 1 000 (50 batches). NORMAL, the default, is durable across process crashes (SIGKILL) and may lose the last commits on power loss.`,
    ...notes,
    '',
  ];
  const out = join(dirname(fileURLToPath(import.meta.url)), 'storage-results.md');
  // the hand-written analysis from the first "## " heading on is kept
  const previous = existsSync(out) ? readFileSync(out, 'utf8') : '';
  const kept = previous.indexOf('\n## ');
  writeFileSync(out, lines.join('\n') + (kept >= 0 ? previous.slice(kept) : ''));
  console.log(lines.join('\n'));
}

await main();
