/**
 * DBSCAN benchmark: Roost against density-clustering and @turf/clusters-dbscan on the seeded
 * benchmark sets (test/bench/data.ts), eps 250 m, min_points 5. Every measurement runs in its
 * own process (test/bench/measure.ts) so peak memory is that of one implementation at one size.
 * Then the figures stage (hulls, per-hotspot figures, study area, Clark–Evans nearest
 * neighbours; test/bench/figures-measure.ts, compiled code) on one thread against two, the two
 * alternating, each in its own process. Then the engine alone at 1M (test/bench/engine-measure.ts,
 * compiled code): index + DBSCAN and OPTICS, each in its own process so that each one's working
 * memory is its own, alternating. Prints markdown tables and writes them to test/bench/results.md.
 *
 *   npm run build && npm run bench
 */
import { spawnSync } from 'node:child_process';
import { writeFileSync } from 'node:fs';
import os from 'node:os';
import { fileURLToPath } from 'node:url';
import { BENCH_EPS_METERS, BENCH_MIN_POINTS, BENCH_SEED } from './data.js';
import type { EngineMeasurement } from './engine-measure.js';
import type { FiguresMeasurement } from './figures-measure.js';
import type { Measurement } from './measure.js';

const here = fileURLToPath(new URL('.', import.meta.url));
const SIZES = [10_000, 100_000, 1_000_000];
/** A comparison library is tried at a size only if it finished the previous size within this, ms. */
const NEXT_SIZE_LIMIT_MS = 6_000;
/** Hard stop for one measurement process, ms. */
const KILL_AFTER_MS = 90_000;

interface Plan {
  impl: 'roost' | 'density-clustering' | 'turf';
  label: string;
  runs: (n: number) => number;
}
const plans: Plan[] = [
  { impl: 'roost', label: 'Roost', runs: (n) => (n >= 1_000_000 ? 3 : n >= 100_000 ? 9 : 21) },
  { impl: 'density-clustering', label: 'density-clustering 1.3.0', runs: () => 1 },
  { impl: 'turf', label: '@turf/clusters-dbscan 7.4.0', runs: () => 1 },
];

function median(xs: number[]): number {
  const s = [...xs].sort((a, b) => a - b);
  return s.length % 2 ? s[(s.length - 1) / 2] : (s[s.length / 2 - 1] + s[s.length / 2]) / 2;
}

function measure(impl: string, n: number, runs: number): Measurement | string {
  const r = spawnSync(
    process.execPath,
    ['--expose-gc', '--max-old-space-size=8192', '--import', 'tsx', `${here}measure.ts`, impl, String(n), String(runs)],
    { encoding: 'utf8', timeout: KILL_AFTER_MS, maxBuffer: 1 << 20 },
  );
  if (r.error || r.status !== 0) {
    const why = r.signal === 'SIGTERM' ? `stopped after ${KILL_AFTER_MS / 1000} s` : `failed (${r.stderr.trim().split('\n').at(-1) ?? r.status})`;
    return why;
  }
  return JSON.parse(r.stdout.trim().split('\n').at(-1)!) as Measurement;
}

const fmtMs = (ms: number): string => (ms >= 10_000 ? `${(ms / 1000).toFixed(1)} s` : ms >= 100 ? `${ms.toFixed(0)} ms` : `${ms.toFixed(1)} ms`);

const rows: string[] = [];
const roostAt = new Map<number, number>();
const skipFrom = new Map<string, string>();
for (const n of SIZES) {
  for (const plan of plans) {
    const skipped = skipFrom.get(plan.impl);
    if (skipped !== undefined) {
      rows.push(`| ${n.toLocaleString('en')} | ${plan.label} | – | – | – | – | – | – | ${skipped} |`);
      continue;
    }
    process.stderr.write(`${plan.label} at ${n} points…\n`);
    const m = measure(plan.impl, n, plan.runs(n));
    if (typeof m === 'string') {
      rows.push(`| ${n.toLocaleString('en')} | ${plan.label} | – | – | – | – | – | – | ${m} |`);
      skipFrom.set(plan.impl, 'skipped: did not finish the smaller size');
      continue;
    }
    const idx = m.indexMs.length ? median(m.indexMs) : 0;
    const clu = median(m.clusterMs);
    const total = idx + clu;
    const cpu = median(m.cpuMs);
    if (plan.impl === 'roost') roostAt.set(n, total);
    const ratio = plan.impl === 'roost' ? '1' : `${(total / roostAt.get(n)!).toFixed(0)}×`;
    rows.push(
      `| ${n.toLocaleString('en')} | ${plan.label} | ${m.indexMs.length ? fmtMs(idx) : '–'} | ${fmtMs(clu)} | ${fmtMs(total)} (cpu ${fmtMs(cpu)}) | ${ratio} | ${m.peakRssMiB.toFixed(0)} MiB | ${Math.max(0, m.peakRssMiB - m.rssBeforeMiB).toFixed(0)} MiB | ${m.hotspots} hotspots, ${m.noise} noise; median of ${m.clusterMs.length} |`,
    );
    if (plan.impl !== 'roost' && total > NEXT_SIZE_LIMIT_MS) skipFrom.set(plan.impl, `skipped: ${fmtMs(total)} at the smaller size, far slower at this one`);
  }
}

/** The figures stage at one size: processes alternate between 1 and 2 threads. */
const FIGURE_SIZES = [100_000, 1_000_000];
const FIGURE_ROUNDS = 2;
const FIGURE_RUNS = 3;
const figureRows: string[] = [];
for (const n of FIGURE_SIZES) {
  const by: Record<number, FiguresMeasurement[]> = { 1: [], 2: [] };
  const loads: number[] = [];
  for (let round = 0; round < FIGURE_ROUNDS; round++) {
    for (const threads of [1, 2]) {
      process.stderr.write(`figures at ${n} points on ${threads} thread(s)…\n`);
      loads.push(os.loadavg()[0]);
      const r = spawnSync(process.execPath, ['--import', 'tsx', `${here}figures-measure.ts`, String(n), String(threads), String(FIGURE_RUNS)], {
        encoding: 'utf8',
        timeout: KILL_AFTER_MS,
        maxBuffer: 1 << 20,
      });
      if (r.error || r.status !== 0) throw new Error(`figures at ${n} on ${threads} thread(s) failed: ${r.stderr}`);
      by[threads].push(JSON.parse(r.stdout.trim().split('\n').at(-1)!) as FiguresMeasurement);
    }
  }
  const digests = new Set([...by[1], ...by[2]].map((m) => m.digest));
  if (digests.size !== 1) throw new Error(`figures at ${n} points differ between runs or thread counts: ${[...digests].join(', ')}`);
  for (const threads of [1, 2]) {
    const wall = median(by[threads].flatMap((m) => m.wallMs));
    const cpu = median(by[threads].flatMap((m) => m.cpuMs));
    const one = median(by[1].flatMap((m) => m.wallMs));
    figureRows.push(
      `| ${n.toLocaleString('en')} | ${threads} | ${fmtMs(wall)} | ${fmtMs(cpu)} | ${threads === 1 ? '1' : (wall / one).toFixed(2)} | ${by[threads][0].hotspots} hotspots; median of ${FIGURE_ROUNDS * FIGURE_RUNS} runs; load ${loads.map((l) => l.toFixed(1)).join(', ')}; same digest ${[...digests][0].slice(0, 12)} |`,
    );
  }
}

/** The engine alone at 1M: index + DBSCAN and OPTICS in processes of their own, alternating. */
const ENGINE_N = 1_000_000;
const ENGINE_ROUNDS = 2;
const ENGINE_RUNS = 3;
const engine: Record<string, EngineMeasurement[]> = { dbscan: [], optics: [] };
const engineLoads: number[] = [];
for (let round = 0; round < ENGINE_ROUNDS; round++) {
  for (const stage of ['dbscan', 'optics']) {
    process.stderr.write(`engine: ${stage} at ${ENGINE_N} points…\n`);
    engineLoads.push(os.loadavg()[0]);
    const r = spawnSync(process.execPath, ['--expose-gc', '--import', 'tsx', `${here}engine-measure.ts`, stage, String(ENGINE_N), String(ENGINE_RUNS)], {
      encoding: 'utf8',
      timeout: KILL_AFTER_MS * 2,
      maxBuffer: 1 << 20,
    });
    if (r.error || r.status !== 0) throw new Error(`engine ${stage} at ${ENGINE_N} failed: ${r.stderr}`);
    engine[stage].push(JSON.parse(r.stdout.trim().split('\n').at(-1)!) as EngineMeasurement);
  }
}
const dbscanCpu = median(engine.dbscan.flatMap((m) => m.cpuMs));
const engineRows = ['dbscan', 'optics'].map((stage) => {
  const ms = engine[stage];
  const cpu = median(ms.flatMap((m) => m.cpuMs));
  const wall = median(ms.flatMap((m) => m.stageMs.map((t, i) => t + (m.indexMs[i] ?? 0))));
  const work = Math.max(...ms.map((m) => m.workMiB));
  const what = stage === 'dbscan' ? `index ${fmtMs(median(ms.flatMap((m) => m.indexMs)))} + DBSCAN ${fmtMs(median(ms.flatMap((m) => m.stageMs)))}` : 'OPTICS (its index included)';
  return `| ${ENGINE_N.toLocaleString('en')} | ${what} | ${fmtMs(wall)} | ${fmtMs(cpu)} | ${(cpu / dbscanCpu).toFixed(1)} | ${work.toFixed(0)} MiB | median of ${ms.length * ENGINE_RUNS} runs; digest ${ms[0].digest.slice(0, 12)} |`;
});

const cpus = os.cpus();
const lines = [
  `DBSCAN, eps ${BENCH_EPS_METERS} m, min_points ${BENCH_MIN_POINTS}, seeded benchmark sets (seed ${BENCH_SEED}: gaussian patches over ~400 km plus 15 % uniform background).`,
  `Node ${process.version}, ${cpus[0]?.model.trim() ?? 'unknown CPU'}, ${cpus.length} cores, ${(os.totalmem() / 2 ** 30).toFixed(0)} GiB RAM, ${os.platform()} ${os.arch()}; load average at start ${os.loadavg()[0].toFixed(1)}. Command: \`npm run bench\`.`,
  `Times are wall-clock medians (Roost below 1M points after three untimed warm-up runs); "cpu" is user + system CPU time of the same runs. Peak RSS is the whole measuring process; "stage" is peak RSS minus RSS just before the first run (data already loaded). Ratio: total time against Roost's.`,
  '',
  '| points | implementation | index build | clustering | total | ratio | peak RSS | stage RSS | notes |',
  '| ---: | --- | ---: | ---: | ---: | ---: | ---: | ---: | --- |',
  ...rows,
  '',
  `Figures stage (hotspot hulls and areas, per-hotspot figures, study-area hull, Clark–Evans nearest neighbours), same sets and clustering, compiled code (\`npm run build\` first). "threads 2" runs the nearest-neighbour pass in a worker thread beside the hulls from 200,000 points on; at 100,000 both rows run on one thread, so their difference is the noise of the machine. "cpu" counts every thread of the process, the worker's start included. Processes alternate 1, 2, 1, 2; load average (1 min) at the start of each process in the notes. Every run's output digest is the same on 1 and 2 threads (the table is not written otherwise).`,
  '',
  '| points | threads | wall | cpu (all threads) | ratio | notes |',
  '| ---: | ---: | ---: | ---: | ---: | --- |',
  ...figureRows,
  '',
  `The engine alone (compiled code): index build + DBSCAN, and OPTICS (max eps ${BENCH_EPS_METERS} m, min_points ${BENCH_MIN_POINTS}), each in a process of its own, alternating; load average (1 min) at the start of each process ${engineLoads.map((l) => l.toFixed(1)).join(', ')}. "work" is the largest peak RSS minus RSS with the points loaded, the stage's working memory. Ratio: CPU time against index + DBSCAN.`,
  '',
  '| points | stage | wall | cpu | ratio | work | notes |',
  '| ---: | --- | ---: | ---: | ---: | ---: | --- |',
  ...engineRows,
  '',
];
const table = lines.join('\n');
process.stdout.write(`${table}\n`);
writeFileSync(`${here}results.md`, `# Benchmark results\n\n${table}`);
