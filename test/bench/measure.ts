/**
 * One benchmark measurement in a fresh process, so that peak memory belongs to one
 * implementation and one size only. Prints one JSON line.
 *
 *   node --expose-gc --import tsx test/bench/measure.ts <roost|density-clustering|turf> <n> <runs>
 */
import { createRequire } from 'node:module';
import { clustersDbscan } from '@turf/clusters-dbscan';
import { featureCollection, point } from '@turf/helpers';
import { dbscan } from '../../src/core/dbscan.js';
import { haversineMeters } from '../../src/core/haversine.js';
import { SphereIndex } from '../../src/core/sphere-index.js';
import { BENCH_EPS_METERS, BENCH_MIN_POINTS, benchPoints } from './data.js';

export interface Measurement {
  impl: string;
  n: number;
  /** index build per run, ms (Roost only) */
  indexMs: number[];
  /** clustering per run, ms (for the others: the whole library call) */
  clusterMs: number[];
  /** CPU time (user + system) of index build plus clustering per run, ms: steadier than wall time on a busy machine */
  cpuMs: number[];
  hotspots: number;
  noise: number;
  /** RSS just before the first (warm-up or timed) run, MiB */
  rssBeforeMiB: number;
  /** peak RSS of the process, MiB */
  peakRssMiB: number;
}

const [impl, nText, runsText] = process.argv.slice(2);
const n = Number(nText);
const runs = Number(runsText ?? 3);
const gc = (globalThis as { gc?: () => void }).gc ?? ((): void => {});
const points = benchPoints(n);
const eps = BENCH_EPS_METERS;
const minPts = BENCH_MIN_POINTS;

interface DensityDbscan {
  run(data: number[][], eps: number, minPts: number, distance: (a: number[], b: number[]) => number): number[][];
  noise: number[];
}

const indexMs: number[] = [];
const clusterMs: number[] = [];
const cpuMs: number[] = [];
let hotspots = 0;
let noise = 0;
let work: () => void;

if (impl === 'roost') {
  work = () => {
    let t = performance.now();
    const index = new SphereIndex(points, eps);
    indexMs.push(performance.now() - t);
    t = performance.now();
    const c = dbscan(points, { epsMeters: eps, minPoints: minPts, index });
    clusterMs.push(performance.now() - t);
    hotspots = c.count;
    noise = c.labels.reduce((s, l) => s + (l < 0 ? 1 : 0), 0);
  };
} else if (impl === 'density-clustering') {
  const require = createRequire(import.meta.url);
  const { DBSCAN } = require('density-clustering') as { DBSCAN: new () => DensityDbscan };
  const data: number[][] = [];
  for (let i = 0; i < n; i++) data.push([points.lon[i], points.lat[i]]);
  const dist = (a: number[], b: number[]): number => haversineMeters(a[0], a[1], b[0], b[1]);
  work = () => {
    const t = performance.now();
    const d = new DBSCAN();
    const clusters = d.run(data, eps, minPts, dist);
    clusterMs.push(performance.now() - t);
    hotspots = clusters.length;
    noise = n - clusters.reduce((s, c) => s + c.length, 0);
  };
} else if (impl === 'turf') {
  const features = [];
  for (let i = 0; i < n; i++) features.push(point([points.lon[i], points.lat[i]]));
  const fc = featureCollection(features);
  work = () => {
    const t = performance.now();
    // mutate: true skips turf's defensive deep copy, which would be unfair to count
    const out = clustersDbscan(fc, eps / 1000, { units: 'kilometers', minPoints: minPts, mutate: true });
    clusterMs.push(performance.now() - t);
    const ids = new Set<number>();
    noise = 0;
    for (const f of out.features) {
      if (f.properties.cluster === undefined) noise++;
      else ids.add(f.properties.cluster);
      delete f.properties.cluster;
      delete f.properties.dbscan;
    }
    hotspots = ids.size;
  };
} else {
  throw new Error(`unknown implementation ${impl}; use roost, density-clustering or turf`);
}

// Roost's small runs take milliseconds, so three untimed runs first let the JIT compile the hot
// loops; the comparison libraries run for seconds and warm up within their single timed run.
gc();
const rssBefore = process.memoryUsage().rss;
if (impl === 'roost' && n <= 100_000) {
  for (let w = 0; w < 3; w++) work();
  indexMs.length = clusterMs.length = 0;
  gc();
}
for (let r = 0; r < runs; r++) {
  const c0 = process.cpuUsage();
  work();
  const c1 = process.cpuUsage(c0);
  cpuMs.push((c1.user + c1.system) / 1000);
  gc();
}
const m: Measurement = {
  impl,
  n,
  indexMs,
  clusterMs,
  cpuMs,
  hotspots,
  noise,
  rssBeforeMiB: rssBefore / 2 ** 20,
  peakRssMiB: process.resourceUsage().maxRSS / 1024,
};
process.stdout.write(`${JSON.stringify(m)}\n`);
