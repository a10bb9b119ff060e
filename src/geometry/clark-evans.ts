/**
 * Nearest-neighbour distances on the sphere and the Clark–Evans aggregation index.
 *
 * Clark, P. J. & Evans, F. C. (1954). Distance to nearest neighbor as a measure of spatial
 * relationships in populations. Ecology 35(4): 445–453.
 */
import KDBush from 'kdbush';
import { around } from 'geokdbush';
import { EARTH_RADIUS_M, metersForChord2, unitVectors } from '../core/haversine.js';
import { SphereIndex } from '../core/sphere-index.js';
import type { PointSet } from '../core/types.js';

/** Result of the Clark–Evans test. */
export interface ClarkEvans {
  /** aggregation index R = observed / expected mean nearest-neighbour distance; 1 random, < 1 clustered, > 1 dispersed (2.1491 at most) */
  R: number;
  /** standard normal deviate of the difference between observed and expected mean distance */
  z: number;
  /** mean distance from each observation to its nearest other observation, metres */
  observedMeanMeters: number;
  /** mean nearest-neighbour distance expected under complete spatial randomness at the same density, metres */
  expectedMeanMeters: number;
  /** number of observations */
  n: number;
  /** study area used for the density, km² */
  studyAreaKm2: number;
  /** plain reading of z at the 5 % level, two-sided (|z| > 1.96) */
  reading: 'clustered' | 'random-like' | 'dispersed';
}

/** Two-sided 5 % critical value of the standard normal distribution. */
const Z_CRITICAL = 1.96;

/**
 * Standard error constant of the mean nearest-neighbour distance under randomness,
 * sqrt((4 − π) / π) / 2 = 0.26136 (Clark & Evans 1954).
 */
const SE_CONSTANT = 0.26136;

/**
 * The grid index cannot make cells smaller than about 97 m on the ground (2 / 2^17 of the unit
 * sphere's diameter, see SphereIndex), so a smaller first radius costs the same and resolves less.
 */
const MIN_RADIUS_M = (2 / 2 ** 17) * EARTH_RADIUS_M;

/** Half the Earth's circumference: every point is within this of every other. */
const HALF_CIRCUMFERENCE_M = Math.PI * EARTH_RADIUS_M;

/** Observations sampled to guess the first search radius. */
const SAMPLE_SIZE = 1024;

/**
 * Once no more than n / LEFTOVER_DIVISOR observations are unresolved, a k-d tree query per
 * leftover is cheaper than rebuilding the grid over all n observations at a larger radius.
 */
const LEFTOVER_DIVISOR = 64;

/**
 * Great-circle distance in metres from every observation to its nearest other observation.
 * Identical positions give 0. With fewer than two observations every entry is Infinity (there is
 * no other observation).
 *
 * Exact everywhere, poles and ±180° included. The work is done in rounds over the 3-D grid index:
 * a round at radius r visits every observation within r of a point, so if any is found the
 * smallest of them is the true nearest neighbour. Points with none are carried to the next round
 * at twice the radius. When few are left (n / 64), each is answered by a geodesic k-d tree search
 * (geokdbush, which also handles the poles and the antimeridian) so that a handful of remote
 * outliers does not force rebuilding the grid again and again.
 *
 * @param points observations (degrees)
 * @param index optional SphereIndex already built over the same points (for example the DBSCAN
 *   index at eps); its radius is then the first round's radius and its build is saved
 * @returns distance per observation in input order, metres
 */
export function nearestNeighbourMeters(points: PointSet, index?: SphereIndex): Float64Array {
  const n = points.n;
  const out = new Float64Array(n).fill(Infinity);
  if (n < 2) return out;
  if (index && index.n !== n) {
    throw new RangeError(`the index covers ${index.n} points but the point set has ${n}; build it over the same points`);
  }
  let radius = index ? index.radiusMeters : firstRadiusMeters(points);
  let grid = index ?? new SphereIndex(points, radius);

  // One callback for all queries (no closure per point): it reads the query id and writes the
  // best squared chord through these two variables.
  let self = 0;
  let best = Infinity;
  const visit = (j: number, chord2: number): void => {
    if (j !== self && chord2 < best) best = chord2;
  };

  let pending: Int32Array = grid.sorted; // cell order: neighbouring queries touch the same memory
  for (;;) {
    const still = new Int32Array(pending.length);
    let left = 0;
    for (let k = 0; k < pending.length; k++) {
      const i = pending[k];
      self = i;
      best = Infinity;
      grid.forEachWithin(i, visit);
      if (best === Infinity) still[left++] = i;
      else out[i] = metersForChord2(best);
    }
    pending = still.subarray(0, left);
    if (left === 0) return out;
    if (left <= n / LEFTOVER_DIVISOR) break;
    radius = Math.min(radius * 2, HALF_CIRCUMFERENCE_M);
    grid = new SphereIndex(points, radius);
  }

  // The few leftovers: best-first k-d tree search on the sphere for the nearest other point.
  const kd = new KDBush(n);
  for (let i = 0; i < n; i++) kd.add(points.lon[i], points.lat[i]);
  kd.finish();
  const xyz = grid.xyz;
  for (let k = 0; k < pending.length; k++) {
    const i = pending[k];
    const found = around(kd, points.lon[i], points.lat[i], 1, Infinity, (j) => j !== i);
    const j = found[0];
    const dx = xyz[3 * i] - xyz[3 * j];
    const dy = xyz[3 * i + 1] - xyz[3 * j + 1];
    const dz = xyz[3 * i + 2] - xyz[3 * j + 2];
    // Same chord formula as the grid rounds, so every entry is measured the same way.
    out[i] = metersForChord2(dx * dx + dy * dy + dz * dz);
  }
  return out;
}

/**
 * Guess of a first radius that resolves most points cheaply: the median nearest-neighbour
 * distance within an evenly spaced sample, scaled to the full set (in a 2-D pattern distances
 * shrink with the square root of the number of points), doubled so that most points find a
 * neighbour within it (under randomness about 94 % do at twice the median).
 */
function firstRadiusMeters(points: PointSet): number {
  const n = points.n;
  const m = Math.min(n, SAMPLE_SIZE);
  const lon = new Float64Array(m);
  const lat = new Float64Array(m);
  for (let k = 0; k < m; k++) {
    const i = Math.floor((k * n) / m);
    lon[k] = points.lon[i];
    lat[k] = points.lat[i];
  }
  const xyz = unitVectors(lon, lat);
  const nearest2 = new Float64Array(m).fill(Infinity);
  for (let a = 0; a < m; a++) {
    for (let b = a + 1; b < m; b++) {
      const dx = xyz[3 * a] - xyz[3 * b];
      const dy = xyz[3 * a + 1] - xyz[3 * b + 1];
      const dz = xyz[3 * a + 2] - xyz[3 * b + 2];
      const d2 = dx * dx + dy * dy + dz * dz;
      if (d2 < nearest2[a]) nearest2[a] = d2;
      if (d2 < nearest2[b]) nearest2[b] = d2;
    }
  }
  nearest2.sort();
  const median = metersForChord2(nearest2[m >> 1]);
  const guess = 2 * median * Math.sqrt(m / n);
  return Math.min(Math.max(guess, MIN_RADIUS_M), HALF_CIRCUMFERENCE_M);
}

/**
 * Clark–Evans aggregation index R and its z score from nearest-neighbour distances
 * (Clark & Evans 1954): r̄_A = mean observed distance; density ρ = n / A; expected mean under
 * randomness r̄_E = 1 / (2√ρ); R = r̄_A / r̄_E; standard error σ = 0.26136 / √(nρ);
 * z = (r̄_A − r̄_E) / σ.
 *
 * Cautions: no edge correction is applied, so points near the study area's boundary, whose true
 * neighbours may lie outside it, push R up a little. The study area is a choice, and it changes R:
 * the same points in a larger area look more clustered (R falls as √A grows). Report the area with R.
 * Observation weights play no part; every observation is one point.
 *
 * @param nearestMeters distance from each observation to its nearest other one, metres (see `nearestNeighbourMeters`)
 * @param studyAreaKm2 area of the study region, km², > 0
 * @throws RangeError for fewer than 2 observations, a non-positive area, or a missing distance
 */
export function clarkEvans(nearestMeters: Float64Array, studyAreaKm2: number): ClarkEvans {
  const n = nearestMeters.length;
  if (n < 2) throw new RangeError(`the Clark–Evans index needs at least 2 observations, got ${n}`);
  if (!(studyAreaKm2 > 0) || !Number.isFinite(studyAreaKm2)) {
    throw new RangeError(`the study area must be a positive number of km², got ${studyAreaKm2}`);
  }
  let sum = 0;
  for (let i = 0; i < n; i++) {
    const d = nearestMeters[i];
    if (!(d >= 0) || !Number.isFinite(d)) {
      throw new RangeError(`nearest-neighbour distance ${i} is ${d}; pass finite distances in metres from nearestNeighbourMeters`);
    }
    sum += d;
  }
  const observedMeanMeters = sum / n;
  const density = n / (studyAreaKm2 * 1e6); // per m²
  const expectedMeanMeters = 1 / (2 * Math.sqrt(density));
  const standardError = SE_CONSTANT / Math.sqrt(n * density);
  const R = observedMeanMeters / expectedMeanMeters;
  const z = (observedMeanMeters - expectedMeanMeters) / standardError;
  const reading = z < -Z_CRITICAL ? 'clustered' : z > Z_CRITICAL ? 'dispersed' : 'random-like';
  return { R, z, observedMeanMeters, expectedMeanMeters, n, studyAreaKm2, reading };
}
