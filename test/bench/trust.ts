/**
 * Trust benchmark: what the Monte Carlo test (csr, 99 simulations) and the stability resampling
 * (20 resamples) cost against one run, on the seeded benchmark points (test/bench/data.ts,
 * 100,000 by default, eps 250 m, min_points 5). Also one simulation taken apart, on one thread:
 * placing its points in the study area (the buffered convex hull of the observations) with a test
 * of every hull edge per point and with the latitude band index (src/trust/study-area.ts), and
 * clustering them. Writes test/bench/trust-results.md.
 *
 *   node --import tsx test/bench/trust.ts [n] [simulations] [resamples]    (npm run bench:trust)
 */
import { writeFileSync } from 'node:fs';
import os from 'node:os';
import { hotspotHull } from '../../src/geometry/hull.js';
import { clusterInput, clusterPoints, defaultMinClusterSize } from '../../src/run/cluster.js';
import { resolveSettings, type ClusterSettings } from '../../src/run/settings.js';
import { assess } from '../../src/trust/assess.js';
import { resolveTrustSettings } from '../../src/trust/options.js';
import { randomStream, STREAM_SIMULATION } from '../../src/trust/random.js';
import { insideArea, insideAreaFast, placeUniform, studyArea } from '../../src/trust/study-area.js';
import { defaultThreads } from '../../src/trust/trials.js';
import { BENCH_EPS_METERS, BENCH_MIN_POINTS, benchPoints } from './data.js';

const [nText, simsText, resText] = process.argv.slice(2);
const n = Number(nText ?? 100_000);
const simulations = Number(simsText ?? 99);
const resamples = Number(resText ?? 20);
const threads = defaultThreads();
const RUNS = 3;

const median = (xs: number[]): number => [...xs].sort((a, b) => a - b)[Math.floor(xs.length / 2)];
const ms = (f: () => void): number => {
  const t = performance.now();
  f();
  return performance.now() - t;
};
const s = (x: number): string => (x / 1000).toFixed(2);

const points = benchPoints(n);
let text = '{"type":"FeatureCollection","features":[';
for (let i = 0; i < n; i++) text += `${i ? ',' : ''}{"type":"Feature","id":"b${i}","properties":{},"geometry":{"type":"Point","coordinates":[${points.lon[i].toFixed(7)},${points.lat[i].toFixed(7)}]}}`;
text += ']}';
const settings = resolveSettings({ eps: BENCH_EPS_METERS, min_points: BENCH_MIN_POINTS });

// one run: the whole of clusterInput (read, index, cluster, figures, layers written)
const runMs: number[] = [];
const clusterOnlyMs: number[] = [];
for (let r = 0; r < RUNS; r++) {
  let layers = 0;
  runMs.push(
    ms(() => {
      const result = clusterInput(text, 'geojson', settings);
      layers = result.layers.hotspots.bytes().length + result.layers.points.bytes().length;
    }),
  );
  if (layers === 0) throw new Error('no layers');
  clusterOnlyMs.push(ms(() => clusterPoints(points, BENCH_EPS_METERS, settings)));
}
const oneRun = median(runMs);
const oneClustering = median(clusterOnlyMs);

// one simulation taken apart, on this thread
const fixed: ClusterSettings = { ...settings, epsAuto: false, minClusterSize: defaultMinClusterSize(n, BENCH_MIN_POINTS) };
const hull = hotspotHull(points.lon, points.lat, { kind: 'convex', bufferMeters: BENCH_EPS_METERS / 2 });
const area = studyArea(hull, 'convex hull of all observations');
const lon = new Float64Array(n);
const lat = new Float64Array(n);
const placeEvery: number[] = [];
const placeBands: number[] = [];
const clusterSim: number[] = [];
for (let j = 0; j < RUNS; j++) {
  placeEvery.push(ms(() => placeUniform(area, n, randomStream(7, STREAM_SIMULATION, j), lon, lat, insideArea)));
  placeBands.push(ms(() => placeUniform(area, n, randomStream(7, STREAM_SIMULATION, j), lon, lat, insideAreaFast)));
  clusterSim.push(ms(() => clusterPoints({ n, lon, lat, weight: null }, BENCH_EPS_METERS, fixed)));
}

// the test and the resampling as the command line runs them, over the machine's cores
const base = clusterInput(text, 'geojson', settings);
let simulationsMs = 0;
{
  const t = performance.now();
  await assess(base, settings, { settings: resolveTrustSettings({ simulations, seed: 7, null_model: 'csr' }), threads });
  simulationsMs = performance.now() - t;
}
let resamplesMs = 0;
{
  const t = performance.now();
  await assess(base, settings, { settings: resolveTrustSettings({ resamples, seed: 7 }), threads });
  resamplesMs = performance.now() - t;
}
const chance = base.summary.chance as { significant_hotspots: number; simulated_largest: { median: number } };
const load = os.loadavg().map((x) => x.toFixed(1)).join(', ');
const cpu = os.cpus()[0]?.model ?? 'unknown CPU';

const lines = [
  '# Trust benchmark',
  '',
  `The Monte Carlo test (csr, ${simulations} simulations, seed 7) and stability (${resamples} resamples of 80 %) on ${n.toLocaleString('en')} seeded`,
  `benchmark points (eps ${BENCH_EPS_METERS} m, min_points ${BENCH_MIN_POINTS}), against one run. Node ${process.version}, ${cpu}, ${os.cpus().length} cores,`,
  `${threads} worker threads for the trials; load average at the end ${load}.`,
  'Command: `npm run bench:trust` (`node --import tsx test/bench/trust.ts`).',
  '',
  '| what | wall | against one run |',
  '| --- | ---: | ---: |',
  `| one run (clusterInput: read, index, cluster, figures, layers), median of ${RUNS} | ${s(oneRun)} s | 1× |`,
  `| its clustering alone (index + DBSCAN), median of ${RUNS} | ${s(oneClustering)} s | ${(oneClustering / oneRun).toFixed(2)}× |`,
  `| ${simulations} csr simulations, ${threads} threads | ${s(simulationsMs)} s | ${(simulationsMs / oneRun).toFixed(1)}× |`,
  `| ${resamples} resamples, ${threads} threads | ${s(resamplesMs)} s | ${(resamplesMs / oneRun).toFixed(1)}× |`,
  '',
  `One simulation on one thread, median of ${RUNS} (study area: the buffered convex hull, ${area.lon.length} vertices, ${area.areaKm2.toFixed(0)} km²):`,
  '',
  '| step | wall |',
  '| --- | ---: |',
  `| place ${n.toLocaleString('en')} points, every hull edge tested per point | ${median(placeEvery).toFixed(0)} ms |`,
  `| place them, edges of the point's latitude band only (same points) | ${median(placeBands).toFixed(0)} ms |`,
  `| cluster them | ${median(clusterSim).toFixed(0)} ms |`,
  '',
  `One simulation, placing and clustering: ${(median(placeEvery) + median(clusterSim)).toFixed(0)} ms with every edge tested`,
  `(${((median(placeEvery) + median(clusterSim)) / oneRun).toFixed(2)}× one run, ${((median(placeEvery) + median(clusterSim)) / oneClustering).toFixed(1)}× its clustering), ${(median(placeBands) + median(clusterSim)).toFixed(0)} ms with the band index`,
  `(${((median(placeBands) + median(clusterSim)) / oneRun).toFixed(2)}× one run, ${((median(placeBands) + median(clusterSim)) / oneClustering).toFixed(1)}× its clustering).`,
  '',
  `Significant hotspots: ${chance.significant_hotspots} of ${base.hotspots.length}; median simulated largest hotspot: ${chance.simulated_largest.median} points.`,
  '',
];
const out = new URL('./trust-results.md', import.meta.url);
writeFileSync(out, lines.join('\n'));
console.log(lines.join('\n'));
