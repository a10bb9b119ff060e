/**
 * Nearest-neighbour distances on the sphere and the Clark–Evans aggregation index.
 *
 * Clark, P. J. & Evans, F. C. (1954). Distance to nearest neighbor as a measure of spatial
 * relationships in populations. Ecology 35(4): 445–453.
 */
import { metersForChord2, unitVectors } from '../core/haversine.js';
import type { SphereIndex } from '../core/sphere-index.js';
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

/** Points per leaf of the k-d tree: below this a plain scan is cheaper than more splitting. */
const LEAF_SIZE = 12;

/**
 * Great-circle distance in metres from every observation to its nearest other observation.
 * Identical positions give 0. With fewer than two observations every entry is Infinity (there is
 * no other observation).
 *
 * Exact everywhere, poles and ±180° included: the search runs on the positions' unit vectors in
 * 3-D, where neither exists, and the straight chord between two unit vectors grows monotonically
 * with their great-circle distance, so the nearest by chord is the nearest on the ground. The
 * vectors go into a static 3-D k-d tree (each node split at the median of its widest axis); every
 * point then searches it branch-and-bound, nearer side first, skipping itself.
 *
 * A fixed-radius grid (SphereIndex) is not used for the search: in a dense patch one grid cell
 * holds thousands of points and every query would scan them all, while the tree's cost per query
 * follows the local density (about 1.5 s of CPU for 1,000,000 clustered points on one core).
 *
 * @param points observations (degrees)
 * @param index optional SphereIndex built over the same points; only its unit vectors are reused
 *   (saves computing them again)
 * @returns distance per observation in input order, metres
 */
export function nearestNeighbourMeters(points: PointSet, index?: SphereIndex): Float64Array {
  const n = points.n;
  const out = new Float64Array(n).fill(Infinity);
  if (n < 2) return out;
  if (index && index.n !== n) {
    throw new RangeError(`the index covers ${index.n} points but the point set has ${n}; build it over the same points`);
  }
  const tree = new ChordTree(index ? index.xyz : unitVectors(points.lon, points.lat));
  const best2 = tree.nearestOther2();
  for (let i = 0; i < n; i++) out[i] = metersForChord2(best2[i]);
  return out;
}

/**
 * Static k-d tree over unit vectors, stored kdbush-style as one permutation: the node over
 * positions left..right has its median at m = (left + right) >> 1, the left child over
 * left..m−1 and the right child over m+1..right. The split axis of that node is kept at `axis[m]`
 * (each internal node owns a distinct median position).
 */
class ChordTree {
  private readonly n: number;
  /** point id at each tree position */
  private readonly ids: Int32Array;
  /** unit vectors in tree order, stride 3 */
  private readonly coords: Float64Array;
  /** split axis (0 x, 1 y, 2 z) of the node whose median sits at this position */
  private readonly axis: Uint8Array;

  // search state, kept in fields so the recursion passes only the range
  private qx = 0;
  private qy = 0;
  private qz = 0;
  private self = 0;
  private best = Infinity;

  constructor(xyz: Float64Array) {
    const n = xyz.length / 3;
    this.n = n;
    this.ids = new Int32Array(n);
    for (let i = 0; i < n; i++) this.ids[i] = i;
    this.coords = Float64Array.from(xyz);
    this.axis = new Uint8Array(n);
    this.build(0, n - 1);
  }

  private build(left: number, right: number): void {
    if (right - left < LEAF_SIZE) return;
    const c = this.coords;
    let minX = Infinity, maxX = -Infinity, minY = Infinity, maxY = -Infinity, minZ = Infinity, maxZ = -Infinity;
    for (let k = left; k <= right; k++) {
      const x = c[3 * k], y = c[3 * k + 1], z = c[3 * k + 2];
      if (x < minX) minX = x;
      if (x > maxX) maxX = x;
      if (y < minY) minY = y;
      if (y > maxY) maxY = y;
      if (z < minZ) minZ = z;
      if (z > maxZ) maxZ = z;
    }
    // Split the widest axis: points on a small patch of the sphere lie almost in a plane, and a
    // fixed x, y, z rotation would waste a third of the splits across that plane's thin direction.
    const sx = maxX - minX, sy = maxY - minY, sz = maxZ - minZ;
    const a = sx >= sy && sx >= sz ? 0 : sy >= sz ? 1 : 2;
    const m = (left + right) >> 1;
    this.select(m, left, right, a);
    this.axis[m] = a;
    this.build(left, m - 1);
    this.build(m + 1, right);
  }

  /**
   * Floyd–Rivest selection (Floyd & Rivest 1975, "Algorithm 489: SELECT", CACM 18(3)): reorders
   * left..right so that position k holds the value it would have if sorted on `a`, smaller or
   * equal ones before it and larger or equal ones after.
   */
  private select(k: number, left: number, right: number, a: number): void {
    const c = this.coords;
    while (right > left) {
      if (right - left > 600) {
        const n = right - left + 1;
        const i = k - left + 1;
        const z = Math.log(n);
        const s = 0.5 * Math.exp((2 * z) / 3);
        const sd = 0.5 * Math.sqrt((z * s * (n - s)) / n) * (i - n / 2 < 0 ? -1 : 1);
        this.select(k, Math.max(left, Math.floor(k - (i * s) / n + sd)), Math.min(right, Math.floor(k + ((n - i) * s) / n + sd)), a);
      }
      const t = c[3 * k + a];
      let i = left;
      let j = right;
      this.swap(left, k);
      if (c[3 * right + a] > t) this.swap(left, right);
      while (i < j) {
        this.swap(i, j);
        i++;
        j--;
        while (c[3 * i + a] < t) i++;
        while (c[3 * j + a] > t) j--;
      }
      if (c[3 * left + a] === t) this.swap(left, j);
      else {
        j++;
        this.swap(j, right);
      }
      if (j <= k) left = j + 1;
      if (k <= j) right = j - 1;
    }
  }

  private swap(i: number, j: number): void {
    const ids = this.ids;
    const c = this.coords;
    const t = ids[i];
    ids[i] = ids[j];
    ids[j] = t;
    for (let o = 0; o < 3; o++) {
      const v = c[3 * i + o];
      c[3 * i + o] = c[3 * j + o];
      c[3 * j + o] = v;
    }
  }

  /** Squared chord from every point (input order) to its nearest other point. */
  nearestOther2(): Float64Array {
    const n = this.n;
    const out = new Float64Array(n);
    const c = this.coords;
    // Queries in tree order: consecutive queries are neighbours and walk the same nodes.
    for (let k = 0; k < n; k++) {
      this.qx = c[3 * k];
      this.qy = c[3 * k + 1];
      this.qz = c[3 * k + 2];
      this.self = this.ids[k];
      this.best = Infinity;
      this.search(0, n - 1);
      out[this.self] = this.best;
    }
    return out;
  }

  private search(left: number, right: number): void {
    if (this.best === 0) return; // an identical position: nothing can be nearer
    const c = this.coords;
    const ids = this.ids;
    if (right - left < LEAF_SIZE) {
      for (let k = left; k <= right; k++) {
        const dx = c[3 * k] - this.qx;
        const dy = c[3 * k + 1] - this.qy;
        const dz = c[3 * k + 2] - this.qz;
        const d2 = dx * dx + dy * dy + dz * dz;
        if (d2 < this.best && ids[k] !== this.self) this.best = d2;
      }
      return;
    }
    const m = (left + right) >> 1;
    const dx = c[3 * m] - this.qx;
    const dy = c[3 * m + 1] - this.qy;
    const dz = c[3 * m + 2] - this.qz;
    const d2 = dx * dx + dy * dy + dz * dz;
    if (d2 < this.best && ids[m] !== this.self) this.best = d2;
    const a = this.axis[m];
    // signed distance from the query to the splitting plane along axis a
    const side = (a === 0 ? this.qx : a === 1 ? this.qy : this.qz) - c[3 * m + a];
    if (side <= 0) {
      this.search(left, m - 1);
      if (side * side < this.best) this.search(m + 1, right);
    } else {
      this.search(m + 1, right);
      if (side * side < this.best) this.search(left, m - 1);
    }
  }
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
