/**
 * Cluster-wise stability by resampling (Hennig 2007, "Cluster-wise assessment of cluster
 * stability", Computational Statistics & Data Analysis 52(1), scheme "subsetting").
 *
 * Each resample keeps a share of the observations drawn without replacement (80 % unless told),
 * in their input order, and clusters them with the run's settings (eps as resolved on all
 * observations). For a hotspot C of the real run and a resample S, C ∩ S is compared with every
 * hotspot D of the resample by the Jaccard similarity |C∩S ∩ D| / |C∩S ∪ D|, and the best value
 * is kept; the hotspot's stability is the mean of those best values over the resamples. Noise is
 * in no hotspot and takes no part. A hotspot none of whose members were drawn scores 0 in that
 * resample (our rule; at 80 % it needs a hotspot of very few observations).
 */
import { clusterPoints } from '../run/cluster.js';
import type { ClusterSettings } from '../run/settings.js';
import { randomStream, STREAM_RESAMPLE } from './random.js';

/** Everything one resample needs; plain data and typed arrays, so it can go to a worker thread. */
export interface StabilitySpec {
  /** the run's settings, eps resolved (epsAuto false) and OPTICS' smallest ξ hotspot fixed */
  settings: ClusterSettings;
  seed: number;
  lon: Float64Array;
  lat: Float64Array;
  weight: Float64Array | null;
  /** the real run's hotspot per observation (−1 noise) */
  labels: Int32Array;
  /** the real run's number of hotspots */
  hotspots: number;
  /** share of observations each resample keeps, 0 < share < 1 */
  share: number;
}

/** The observations resample `j` keeps, ascending. */
export function resampleIndices(spec: StabilitySpec, j: number): Int32Array {
  const n = spec.lon.length;
  const m = Math.max(1, Math.round(spec.share * n));
  const random = randomStream(spec.seed, STREAM_RESAMPLE, j);
  const order = new Int32Array(n);
  for (let i = 0; i < n; i++) order[i] = i;
  for (let k = 0; k < m; k++) {
    const r = k + random.below(n - k);
    const t = order[k];
    order[k] = order[r];
    order[r] = t;
  }
  return order.subarray(0, m).sort();
}

/** Best Jaccard of each real hotspot in resample `j` (spec.hotspots values). */
export function resampleJaccard(spec: StabilitySpec, j: number): Float64Array {
  const keep = resampleIndices(spec, j);
  const m = keep.length;
  const lon = new Float64Array(m);
  const lat = new Float64Array(m);
  const weight = spec.weight === null ? null : new Float64Array(m);
  for (let k = 0; k < m; k++) {
    lon[k] = spec.lon[keep[k]];
    lat[k] = spec.lat[keep[k]];
    if (weight !== null) weight[k] = spec.weight![keep[k]];
  }
  const sub = clusterPoints({ n: m, lon, lat, weight }, spec.settings.epsMeters, spec.settings);
  const H = spec.hotspots;
  const D = sub.count;
  const drawn = new Float64Array(H); // |C ∩ S|
  const size = new Float64Array(D); // |D|
  const both = new Map<number, number>(); // |C ∩ S ∩ D| by h·D + d
  for (let k = 0; k < m; k++) {
    const h = spec.labels[keep[k]];
    const d = sub.labels[k];
    if (h >= 0) drawn[h]++;
    if (d >= 0) size[d]++;
    if (h >= 0 && d >= 0) both.set(h * D + d, (both.get(h * D + d) ?? 0) + 1);
  }
  const best = new Float64Array(H);
  for (const [key, inter] of both) {
    const h = Math.floor(key / D);
    const d = key - h * D;
    const jac = inter / (drawn[h] + size[d] - inter);
    if (jac > best[h]) best[h] = jac;
  }
  return best;
}

/** Best Jaccards of resamples from..to-1, resample after resample (spec.hotspots values each). */
export function resampleJaccards(spec: StabilitySpec, from: number, to: number, onEach?: () => void): Float64Array {
  const out = new Float64Array((to - from) * spec.hotspots);
  for (let j = from; j < to; j++) {
    out.set(resampleJaccard(spec, j), (j - from) * spec.hotspots);
    onEach?.();
  }
  return out;
}

/** Mean over resamples of each hotspot's best Jaccard, from resampleJaccards' layout. */
export function meanJaccards(values: Float64Array, hotspots: number): Float64Array {
  const out = new Float64Array(hotspots);
  if (hotspots === 0) return out;
  const resamples = values.length / hotspots;
  for (let r = 0; r < resamples; r++) for (let h = 0; h < hotspots; h++) out[h] += values[r * hotspots + h];
  for (let h = 0; h < hotspots; h++) out[h] /= resamples;
  return out;
}
