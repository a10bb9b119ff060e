/**
 * One measurement of the figures stage in a fresh process: after an untimed index build and
 * DBSCAN on the seeded benchmark set, the hotspot hulls and their areas, the per-hotspot
 * figures, the study-area hull and the Clark–Evans nearest-neighbour pass, in the order the
 * clustering command runs them, with the nearest-neighbour pass on 1 or 2 threads. Prints one
 * JSON line with the wall and CPU time of every run and a digest of everything computed, so the
 * caller can check that 1 and 2 threads agree byte for byte. Runs the compiled code in dist/.
 *
 *   node --import tsx test/bench/figures-measure.ts <n> <threads 1|2> <runs>
 */
import { createHash } from 'node:crypto';
import type { HullGeometry } from '../../src/geometry/hull.js';
import { BENCH_EPS_METERS, BENCH_MIN_POINTS, benchPoints } from './data.js';

// The compiled modules, as the command runs them (a worker thread then starts from compiled code
// too, not through tsx); `npm run build` first.
const dist = (path: string): string => new URL(`../../dist/${path}`, import.meta.url).href;
const { dbscan } = (await import(dist('core/dbscan.js'))) as typeof import('../../src/core/dbscan.js');
const { SphereIndex } = (await import(dist('core/sphere-index.js'))) as typeof import('../../src/core/sphere-index.js');
const { geometryAreaKm2 } = (await import(dist('geometry/area.js'))) as typeof import('../../src/geometry/area.js');
const { hotspotFigures, resultFigures } = (await import(dist('geometry/figures.js'))) as typeof import('../../src/geometry/figures.js');
const { hotspotHull } = (await import(dist('geometry/hull.js'))) as typeof import('../../src/geometry/hull.js');
const { startNearestNeighbours } = (await import(dist('geometry/nearest-parallel.js'))) as typeof import('../../src/geometry/nearest-parallel.js');

export interface FiguresMeasurement {
  n: number;
  threads: number;
  /** wall time of the figures per run, ms */
  wallMs: number[];
  /** CPU time (user + system, all threads of the process) per run, ms */
  cpuMs: number[];
  /** sha1 of the hulls, areas, figures, Clark–Evans result and nearest-neighbour distances */
  digest: string;
  hotspots: number;
}

const [nText, threadsText, runsText] = process.argv.slice(2);
const n = Number(nText);
const threads = Number(threadsText) === 1 ? 1 : 2;
const runs = Number(runsText ?? 3);
const points = benchPoints(n);
const index = new SphereIndex(points, BENCH_EPS_METERS);
const clustering = dbscan(points, { epsMeters: BENCH_EPS_METERS, minPoints: BENCH_MIN_POINTS, index });

function figures(): string {
  const pending = startNearestNeighbours(points, index, { threads });
  const h = clustering.count;
  const start = new Int32Array(h + 1);
  for (let i = 0; i < n; i++) if (clustering.labels[i] >= 0) start[clustering.labels[i] + 1]++;
  for (let c = 0; c < h; c++) start[c + 1] += start[c];
  const fill = start.slice(0, h);
  const lon = new Float64Array(start[h]);
  const lat = new Float64Array(start[h]);
  for (let i = 0; i < n; i++) {
    const l = clustering.labels[i];
    if (l < 0) continue;
    lon[fill[l]] = points.lon[i];
    lat[fill[l]++] = points.lat[i];
  }
  const hulls: HullGeometry[] = [];
  const areaKm2 = new Float64Array(h);
  for (let c = 0; c < h; c++) {
    const hull = hotspotHull(lon.subarray(start[c], start[c + 1]), lat.subarray(start[c], start[c + 1]), { kind: 'convex', bufferMeters: BENCH_EPS_METERS / 2 });
    hulls.push(hull);
    areaKm2[c] = geometryAreaKm2(hull);
  }
  const perHotspot = hotspotFigures(points, clustering, { areaKm2 });
  const studyAreaKm2 = geometryAreaKm2(hotspotHull(points.lon, points.lat, { kind: 'convex', bufferMeters: BENCH_EPS_METERS / 2 }));
  const nearest = pending.collect();
  const whole = resultFigures(points, clustering, { studyAreaKm2, nearest });
  const digest = createHash('sha1');
  digest.update(JSON.stringify([hulls, perHotspot, whole]));
  digest.update(new Uint8Array(nearest.buffer, nearest.byteOffset, nearest.byteLength));
  return digest.digest('hex');
}

const wallMs: number[] = [];
const cpuMs: number[] = [];
let digest = '';
if (n <= 100_000) for (let w = 0; w < 3; w++) figures();
for (let r = 0; r < runs; r++) {
  const c0 = process.cpuUsage();
  const t = performance.now();
  digest = figures();
  wallMs.push(performance.now() - t);
  const c1 = process.cpuUsage(c0);
  cpuMs.push((c1.user + c1.system) / 1000);
}
const m: FiguresMeasurement = { n, threads, wallMs, cpuMs, digest, hotspots: clustering.count };
process.stdout.write(`${JSON.stringify(m)}\n`);
