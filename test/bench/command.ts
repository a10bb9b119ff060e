/**
 * Whole-command benchmark: `roost cluster` on a GeoJSON file (and the same points as
 * newline-delimited GeoJSON and as CSV) against what Node itself needs just to read and `JSON.parse` the same file (targets: at most 1.0× at
 * 1,000,000 points with peak RSS ≤ 400 MiB, at most 1.5× at 100,000). Seeded benchmark points (test/bench/data.ts) written with an id, an `observed_at`
 * and a count per feature, as survey apps send them. Each measurement is its own process, timed
 * with GNU time (wall seconds, CPU seconds of user and system time, peak RSS): on a shared machine
 * the CPU time is the steadier figure. Writes test/bench/command-results.md.
 *
 *   node --import tsx test/bench/command.ts [sizes…]     (default 100000 1000000)
 */
import { spawnSync } from 'node:child_process';
import { mkdtempSync, readFileSync, rmSync, statSync, writeFileSync } from 'node:fs';
import os from 'node:os';
import { join } from 'node:path';
import { fileURLToPath } from 'node:url';
import { BENCH_EPS_METERS, BENCH_MIN_POINTS, benchPoints, writeCSV, writeGeoJSON } from './data.js';

const root = fileURLToPath(new URL('../../', import.meta.url));
const BIN = join(root, 'dist/cli/bin.js');
const RUNS = 3;
const sizes = process.argv.slice(2).map(Number).filter((n) => n > 0);
if (sizes.length === 0) sizes.push(100_000, 1_000_000);

interface Timed {
  seconds: number;
  /** user + system CPU seconds */
  cpu: number;
  rssMiB: number;
}

/**
 * BENCH_SETTLE (one-minute load average, default 1.0; 0 to not wait): before each timed process
 * the benchmark waits, up to two minutes, until the load average has fallen to it. The processes
 * run back to back keep one core busy, and the load average, which trails by about a minute, then
 * reads as if another process were running: `roost cluster` would find no core free for its
 * point-layer worker (src/cli/layer-thread.ts) even on an otherwise idle machine.
 */
const SETTLE = Number(process.env.BENCH_SETTLE ?? 1.0);

function settle(): void {
  const until = Date.now() + 120_000;
  while (SETTLE > 0 && os.loadavg()[0] > SETTLE && Date.now() < until) spawnSync('sleep', ['2']);
}

/** Runs a command under GNU time; returns wall seconds, CPU seconds and peak RSS in MiB. */
function timed(args: string[]): Timed {
  settle();
  const r = spawnSync('/usr/bin/time', ['-f', '%e %U %S %M', process.execPath, ...args], { encoding: 'utf8', maxBuffer: 1 << 24 });
  if (r.status !== 0) throw new Error(`${args.join(' ')} failed: ${r.stderr}`);
  const [seconds, user, system, kb] = r.stderr.trim().split('\n').at(-1)!.split(' ').map(Number);
  return { seconds, cpu: user + system, rssMiB: kb / 1024 };
}

const median = (xs: number[]): number => [...xs].sort((a, b) => a - b)[Math.floor(xs.length / 2)];

/** Yardsticks: what Node alone needs to read and parse each kind of file. */
const YARDSTICK = {
  geojson: (f: string) => `JSON.parse(require('fs').readFileSync(${JSON.stringify(f)}, 'utf8'))`,
  'geojson-seq': (f: string) => `for (const l of require('fs').readFileSync(${JSON.stringify(f)}, 'utf8').split('\\n')) if (l.trim()) JSON.parse(l)`,
  // no quoting in the file: each line split at its commas and the numbers read, the least a CSV reader does
  csv: (f: string) => `const r = []; for (const l of require('fs').readFileSync(${JSON.stringify(f)}, 'utf8').split('\\n')) if (l !== '') { const c = l.split(','); r.push([c[0], Number(c[1]), Number(c[2]), c[3], c[4]]); }`,
};

/** The same points as newline-delimited GeoJSON (one feature a line), from the FeatureCollection file written one feature a line. */
function writeLines(from: string, to: string): void {
  const lines = readFileSync(from, 'utf8').split('\n');
  writeFileSync(to, lines.slice(1, -2).map((l) => (l.endsWith(',') ? l.slice(0, -1) : l)).join('\n') + '\n');
}

function measure(kind: keyof typeof YARDSTICK, input: string, n: number): string {
  const parse: Timed[] = [];
  const cluster: Timed[] = [];
  let stages: Record<string, number> = {};
  for (let r = 0; r < RUNS; r++) {
    parse.push(timed(['--max-old-space-size=8192', '-e', YARDSTICK[kind](input)]));
    const out = join(dir, `out-${n}`);
    cluster.push(timed(['--max-old-space-size=8192', BIN, 'cluster', input, '--eps', String(BENCH_EPS_METERS), '--min-points', String(BENCH_MIN_POINTS), '--out-dir', out]));
    stages = JSON.parse(readFileSync(join(out, 'summary.json'), 'utf8')).timings_ms as Record<string, number>;
    rmSync(out, { recursive: true, force: true });
  }
  const p = median(parse.map((m) => m.seconds));
  const c = median(cluster.map((m) => m.seconds));
  const pc = median(parse.map((m) => m.cpu));
  const cc = median(cluster.map((m) => m.cpu));
  const mb = statSync(input).size / 2 ** 20;
  const stageText = ['read', 'index', 'cluster', 'figures', 'write'].map((s) => `${s} ${(stages[s] / 1000).toFixed(2)}`).join(', ');
  return `| ${n.toLocaleString('en')} | ${kind} | ${mb.toFixed(0)} MiB | ${p.toFixed(2)} s | ${c.toFixed(2)} s | ${(c / p).toFixed(2)}× | ${pc.toFixed(2)} s | ${cc.toFixed(2)} s | ${(cc / pc).toFixed(2)}× | ${median(cluster.map((m) => m.rssMiB)).toFixed(0)} MiB | ${stageText} | ${os.loadavg()[0].toFixed(1)} |`;
}

const dir = mkdtempSync(join(os.tmpdir(), 'roost-bench-'));
const rows: string[] = [];
try {
  for (const n of sizes) {
    const input = join(dir, `points-${n}.geojson`);
    await writeGeoJSON(input, benchPoints(n), true);
    rows.push(measure('geojson', input, n));
    const lines = join(dir, `points-${n}.geojsonl`);
    writeLines(input, lines);
    rmSync(input);
    rows.push(measure('geojson-seq', lines, n));
    rmSync(lines);
    const csv = join(dir, `points-${n}.csv`);
    await writeCSV(csv, benchPoints(n));
    rows.push(measure('csv', csv, n));
    rmSync(csv);
  }
} finally {
  rmSync(dir, { recursive: true, force: true });
}

const cpu = os.cpus()[0]?.model.trim() ?? 'unknown cpu';
const text = `# Whole-command benchmark

\`roost cluster <file> --eps ${BENCH_EPS_METERS} --min-points ${BENCH_MIN_POINTS} --out-dir <dir>\` (compiled, \`dist/cli/bin.js\`) against
Node alone reading and parsing the same file: \`node -e "JSON.parse(fs.readFileSync(file, 'utf8'))"\` for a GeoJSON
FeatureCollection, the file split into lines and each line \`JSON.parse\`d for newline-delimited GeoJSON (geojson-seq,
the same features one a line), and for CSV (the same points and records, one a row) each line split at its commas
and the coordinates read with \`Number\`. Seeded benchmark points with an id, an \`observed_at\` and a count each. Median of ${RUNS} runs, wall clock including Node start-up, each in its own process, started once the one-minute load average was at most ${SETTLE} (BENCH_SETTLE); CPU is user + system time (GNU time), the steadier figure on a shared machine.
Node ${process.version}, ${cpu}, ${os.cpus().length} cores, ${(os.totalmem() / 2 ** 30).toFixed(0)} GiB; load average at the end ${os.loadavg()[0].toFixed(1)}.
Command: \`node --import tsx test/bench/command.ts\` (part of \`npm run bench\`).

| points | format | file | read + parse | roost cluster | ratio | CPU read + parse | CPU roost cluster | CPU ratio | peak RSS | stages (s, from summary.json) | load average (1 min) after the row |
| ---: | --- | ---: | ---: | ---: | ---: | ---: | ---: | ---: | ---: | --- | ---: |
${rows.join('\n')}
`;
writeFileSync(fileURLToPath(new URL('./command-results.md', import.meta.url)), text);
process.stdout.write(text);
