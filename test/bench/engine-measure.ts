/**
 * One measurement of the engine alone in a fresh process: index build + DBSCAN, or OPTICS, on the
 * seeded benchmark set, from a compiled tree (default this checkout's dist/; another tree, for
 * example a copy of an earlier build, can be given so that old and new alternate in the same
 * conditions). Prints one JSON line: wall and CPU time per run, the working memory of the stage
 * (peak RSS minus RSS with the points loaded, so one stage per process), and a digest of the
 * result, so old and new can be checked to agree.
 *
 *   node --expose-gc --import tsx test/bench/engine-measure.ts <dbscan|optics> <n> <runs> [dist dir]
 *
 * A copied tree must sit beside a package.json saying "type": "module" (as this checkout's
 * dist/ does): without one its files are ES modules Node cannot place, and tsx then compiles
 * them itself, with helpers around every function that make the copy measurably slower.
 */
import { createHash } from 'node:crypto';
import { existsSync, readFileSync } from 'node:fs';
import { dirname, resolve } from 'node:path';
import { pathToFileURL } from 'node:url';
import { BENCH_EPS_METERS, BENCH_MIN_POINTS, benchPoints } from './data.js';

export interface EngineMeasurement {
  stage: string;
  n: number;
  /** index build per run, ms (dbscan only; OPTICS builds its own inside) */
  indexMs: number[];
  /** DBSCAN or OPTICS per run, ms */
  stageMs: number[];
  /** user + system CPU of the whole stage per run, ms */
  cpuMs: number[];
  /** peak RSS minus RSS with the points loaded and collected, MiB: the stage's working memory */
  workMiB: number;
  digest: string;
}

const [stage, nText, runsText, distDir] = process.argv.slice(2);
const n = Number(nText);
const runs = Number(runsText ?? 3);
if (distDir) {
  const manifest = resolve(dirname(resolve(distDir)), 'package.json');
  const type = existsSync(manifest) ? (JSON.parse(readFileSync(manifest, 'utf8')) as { type?: string }).type : undefined;
  if (type !== 'module') {
    process.stderr.write(`${manifest} must exist and say "type": "module", or the copied build is compiled again on loading and runs slower\n`);
    process.exit(2);
  }
}
const root = distDir ? pathToFileURL(`${distDir.replace(/\/$/, '')}/`).href : new URL('../../dist/', import.meta.url).href;
const { dbscan } = (await import(`${root}core/dbscan.js`)) as typeof import('../../src/core/dbscan.js');
const { optics } = (await import(`${root}core/optics.js`)) as typeof import('../../src/core/optics.js');
const { SphereIndex } = (await import(`${root}core/sphere-index.js`)) as typeof import('../../src/core/sphere-index.js');
const gc = (globalThis as { gc?: () => void }).gc ?? ((): void => {});

const points = benchPoints(n);
const indexMs: number[] = [];
const stageMs: number[] = [];
const cpuMs: number[] = [];
let digest = '';

function hash(...arrays: ArrayBufferView[]): string {
  const h = createHash('sha1');
  for (const a of arrays) h.update(new Uint8Array(a.buffer, a.byteOffset, a.byteLength));
  return h.digest('hex');
}

function once(): void {
  const c0 = process.cpuUsage();
  if (stage === 'dbscan') {
    let t = performance.now();
    const index = new SphereIndex(points, BENCH_EPS_METERS);
    indexMs.push(performance.now() - t);
    t = performance.now();
    const c = dbscan(points, { epsMeters: BENCH_EPS_METERS, minPoints: BENCH_MIN_POINTS, index });
    stageMs.push(performance.now() - t);
    digest = hash(c.labels, c.roles);
  } else if (stage === 'optics') {
    const t = performance.now();
    const o = optics(points, { maxEpsMeters: BENCH_EPS_METERS, minPoints: BENCH_MIN_POINTS });
    stageMs.push(performance.now() - t);
    digest = hash(o.order, o.reachability, o.coreDistance, o.predecessor);
  } else {
    throw new Error(`unknown stage ${stage}; use dbscan or optics`);
  }
  const c1 = process.cpuUsage(c0);
  cpuMs.push((c1.user + c1.system) / 1000);
}

gc();
const rssBefore = process.memoryUsage().rss;
for (let r = 0; r < runs; r++) {
  once();
  gc();
}
const m: EngineMeasurement = {
  stage,
  n,
  indexMs,
  stageMs,
  cpuMs,
  workMiB: process.resourceUsage().maxRSS / 1024 - rssBefore / 2 ** 20,
  digest,
};
process.stdout.write(`${JSON.stringify(m)}\n`);
