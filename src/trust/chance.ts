/**
 * The Monte Carlo test of each hotspot against a null model (Besag & Diggle 1977, "Simple Monte
 * Carlo tests for spatial pattern", Applied Statistics 26(3)).
 *
 * Each simulation makes a point set under the null model, clusters it with the very settings of
 * the real run (eps as resolved on the observations, min_points, method, weights), and records
 * the largest hotspot statistic found: the hotspot's count, or its summed weight when weights are
 * named (0 when the simulation finds no hotspot). A hotspot with statistic t gets
 *
 *     p = (1 + #{simulations whose largest statistic ≥ t}) / (1 + simulations).
 *
 * Comparing with the largest hotspot of each simulation, not with hotspots of the same rank, is
 * what keeps the chance of any false alarm at the stated level however many hotspots a run has:
 * under the null the real run's largest hotspot is exchangeable with the simulations' largest,
 * so P(any hotspot has p ≤ α) = P(largest has p ≤ α) ≤ α (for α a multiple of 1/(1+simulations)).
 *
 * Null models:
 * - `csr`, complete spatial randomness: the same number of points (carrying the observations'
 *   weights) placed uniformly on the sphere within the study area (src/trust/study-area.ts).
 * - `effort`, random labelling: cases and effort points together are the places that could have
 *   been reported; each simulation draws as many of them as there are cases, without
 *   replacement, to be the cases (case k's weight goes to the k-th drawn place).
 */
import type { ClusterSettings } from '../run/settings.js';
import { clusterPoints } from '../run/cluster.js';
import type { Clustering, PointSet } from '../core/types.js';
import { randomStream, STREAM_SIMULATION } from './random.js';
import { placeUniform, type StudyArea } from './study-area.js';

export type NullModel = 'csr' | 'effort';

/** Everything one simulation needs; plain data and typed arrays, so it can go to a worker thread. */
export interface ChanceSpec {
  /** the run's settings, eps resolved (epsAuto false) and OPTICS' smallest ξ hotspot fixed */
  settings: ClusterSettings;
  seed: number;
  model: NullModel;
  /** points per simulation: the number of observations clustered (the cases) */
  n: number;
  /** the observations' weights, or null when the statistic is the count */
  weight: Float64Array | null;
  /** `csr`: where points are placed */
  area: StudyArea | null;
  /** `effort`: the positions of the cases, then of the effort points */
  poolLon: Float64Array | null;
  poolLat: Float64Array | null;
}

/** The statistic of every hotspot of a clustering: its count, or its summed weight. */
export function hotspotStatistics(clustering: Clustering, weight: Float64Array | null): Float64Array {
  const out = new Float64Array(clustering.count);
  const { labels } = clustering;
  for (let i = 0; i < labels.length; i++) if (labels[i] >= 0) out[labels[i]] += weight === null ? 1 : weight[i];
  return out;
}

/** The point set of simulation number `j` (0-based) under the spec's null model. */
export function simulatedPoints(spec: ChanceSpec, j: number): PointSet {
  const random = randomStream(spec.seed, STREAM_SIMULATION, j);
  const lon = new Float64Array(spec.n);
  const lat = new Float64Array(spec.n);
  if (spec.model === 'csr') {
    placeUniform(spec.area!, spec.n, random, lon, lat);
  } else {
    const poolLon = spec.poolLon!;
    const poolLat = spec.poolLat!;
    const size = poolLon.length;
    const order = new Int32Array(size);
    for (let i = 0; i < size; i++) order[i] = i;
    // the first n places of a partial Fisher–Yates shuffle: a uniform draw without replacement
    for (let k = 0; k < spec.n; k++) {
      const r = k + random.below(size - k);
      const t = order[k];
      order[k] = order[r];
      order[r] = t;
      lon[k] = poolLon[order[k]];
      lat[k] = poolLat[order[k]];
    }
  }
  return { n: spec.n, lon, lat, weight: spec.weight };
}

/** The largest hotspot statistic of simulation `j` (0 when it finds no hotspot). */
export function simulatedMaximum(spec: ChanceSpec, j: number): number {
  const points = simulatedPoints(spec, j);
  const stats = hotspotStatistics(clusterPoints(points, spec.settings.epsMeters, spec.settings), spec.weight);
  let max = 0;
  for (const s of stats) if (s > max) max = s;
  return max;
}

/** Largest statistics of simulations from..to-1, in order. */
export function simulatedMaxima(spec: ChanceSpec, from: number, to: number, onEach?: () => void): Float64Array {
  const out = new Float64Array(to - from);
  for (let j = from; j < to; j++) {
    out[j - from] = simulatedMaximum(spec, j);
    onEach?.();
  }
  return out;
}

/**
 * Monte Carlo p-values: (1 + #{maxima ≥ t}) / (1 + maxima.length) for each observed statistic t.
 * Summed weights may differ in their last bits with the order of summing, so a maximum within
 * one part in 10^12 of t counts as reaching it (the cautious side).
 */
export function monteCarloPValues(observed: ArrayLike<number>, maxima: ArrayLike<number>): Float64Array {
  const out = new Float64Array(observed.length);
  for (let h = 0; h < observed.length; h++) {
    const t = observed[h] * (1 - 1e-12);
    let reached = 0;
    for (let j = 0; j < maxima.length; j++) if (maxima[j] >= t) reached++;
    out[h] = (1 + reached) / (1 + maxima.length);
  }
  return out;
}
