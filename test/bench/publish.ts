/**
 * Publishing benchmark: `roost cluster` writing exact layers against the same command writing
 * published layers (`--generalise-m 250 --min-count 10 --withhold-noise`), on seeded benchmark
 * points, each run in its own process and timed with GNU time. Writes test/bench/publish-results.md.
 *
 *   node --import tsx test/bench/publish.ts [sizes…]     (default 100000 1000000)
 */
import { spawnSync } from 'node:child_process';
import { mkdtempSync, readFileSync, rmSync, writeFileSync } from 'node:fs';
import os from 'node:os';
import { join } from 'node:path';
import { fileURLToPath } from 'node:url';
import { BENCH_EPS_METERS, BENCH_MIN_POINTS, benchPoints, writeGeoJSON } from './data.js';

const root = fileURLToPath(new URL('../../', import.meta.url));
const BIN = join(root, 'dist/cli/bin.js');
const RUNS = 3;
const PUBLISH = ['--generalise-m', '250', '--min-count', '10', '--withhold-noise'];
const sizes = process.argv.slice(2).map(Number).filter((n) => n > 0);
if (sizes.length === 0) sizes.push(100_000, 1_000_000);

function timed(args: string[]): { seconds: number; rssMiB: number } {
  const r = spawnSync('/usr/bin/time', ['-f', '%e %M', process.execPath, ...args], { encoding: 'utf8', maxBuffer: 1 << 24 });
  if (r.status !== 0) throw new Error(`${args.join(' ')} failed: ${r.stderr}`);
  const [seconds, kb] = r.stderr.trim().split('\n').at(-1)!.split(' ').map(Number);
  return { seconds: seconds!, rssMiB: kb! / 1024 };
}
const median = (xs: number[]): number => [...xs].sort((a, b) => a - b)[Math.floor(xs.length / 2)]!;

const dir = mkdtempSync(join(os.tmpdir(), 'roost-bench-'));
const rows: string[] = [];
try {
  for (const n of sizes) {
    const input = join(dir, `points-${n}.geojson`);
    await writeGeoJSON(input, benchPoints(n), true);
    const exact: { seconds: number; rssMiB: number }[] = [];
    const published: { seconds: number; rssMiB: number }[] = [];
    let info: Record<string, any> = {};
    for (let r = 0; r < RUNS; r++) {
      const base = ['--max-old-space-size=8192', BIN, 'cluster', input, '--eps', String(BENCH_EPS_METERS), '--min-points', String(BENCH_MIN_POINTS)];
      exact.push(timed([...base, '--out-dir', join(dir, 'exact')]));
      published.push(timed([...base, ...PUBLISH, '--out-dir', join(dir, 'published')]));
      info = JSON.parse(readFileSync(join(dir, 'published', 'summary.json'), 'utf8')).published;
      rmSync(join(dir, 'exact'), { recursive: true, force: true });
      rmSync(join(dir, 'published'), { recursive: true, force: true });
    }
    const e = median(exact.map((m) => m.seconds));
    const p = median(published.map((m) => m.seconds));
    rows.push(
      `| ${n.toLocaleString('en')} | ${e.toFixed(2)} s | ${p.toFixed(2)} s | +${(p - e).toFixed(2)} s | ${median(exact.map((m) => m.rssMiB)).toFixed(0)} / ${median(published.map((m) => m.rssMiB)).toFixed(0)} MiB | ${info.hotspots.published} of ${info.hotspots.total} hotspots, ${info.observations.published} of ${info.observations.total} points |`,
    );
  }
} finally {
  rmSync(dir, { recursive: true, force: true });
}

const cpu = os.cpus()[0]?.model.trim() ?? 'unknown cpu';
const text = `# Publishing benchmark

\`roost cluster <file> --eps ${BENCH_EPS_METERS} --min-points ${BENCH_MIN_POINTS} --out-dir <dir>\` against the same with
\`${PUBLISH.join(' ')}\` (compiled, \`dist/cli/bin.js\`). Seeded benchmark points. Median of ${RUNS} runs, wall clock
including Node start-up, each in its own process. Node ${process.version}, ${cpu}, ${os.cpus().length} cores,
${(os.totalmem() / 2 ** 30).toFixed(0)} GiB; load average at the end ${os.loadavg()[0].toFixed(1)}.
Command: \`node --import tsx test/bench/publish.ts\`.

| points | exact layers | published layers | publishing costs | peak RSS exact / published | published |
| ---: | ---: | ---: | ---: | ---: | --- |
${rows.join('\n')}

Published layers are built from the exact points and hotspots layers as text (parsed again), which
is where the added time and memory go.
`;
writeFileSync(fileURLToPath(new URL('./publish-results.md', import.meta.url)), text);
process.stdout.write(text);
