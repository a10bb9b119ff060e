/**
 * DBSCAN (Ester, Kriegel, Sander, Xu 1996) on the sphere, with distances in metres.
 *
 * Rules (deterministic; the result depends only on the positions, weights and their input order):
 *
 * 1. Neighbourhood. Point q is in the eps-neighbourhood of p when their great-circle distance is
 *    at most eps (inclusive; a micrometre of slack absorbs floating-point rounding). Every point
 *    is in its own neighbourhood.
 * 2. Core points. p is core when its neighbourhood holds at least min_points points, p itself
 *    included. With weights, p is core when the summed weight of its neighbourhood (its own
 *    weight included) reaches min_points.
 * 3. Hotspots are the connected components of core points, two core points being connected when
 *    they are within eps of each other.
 * 4. Numbering. Hotspots are numbered 0, 1, 2, … in the order of the lowest input index among
 *    each hotspot's core points.
 * 5. Border points. A non-core point within eps of at least one core point is a border point and
 *    joins the hotspot of its nearest core point (great-circle distance); on an exact tie it joins
 *    the lower-numbered hotspot. (Classic DBSCAN gives such a point to whichever hotspot reaches
 *    it first, which depends on processing order; the nearest-core rule does not.)
 * 6. Every other point is noise, label −1.
 *
 * Distances are compared as straight chords between unit vectors, which order pairs exactly as
 * great-circle distance does (the chord grows monotonically with the arc), so "nearest" and
 * "within eps" mean the same as with haversine; an exact tie is two equal chords, as between
 * identical positions.
 *
 * Memory is linear in n: no neighbour list is ever kept. The work runs in four passes over the
 * index's cell order, where points that are close on the ground are close in memory:
 * core flags (stopping each count as soon as min_points is reached), union–find over core pairs
 * (inside cells, then across cells, linking a fully joined cell through one pair), hotspot
 * numbering, border assignment.
 */
import { chordForMeters } from './haversine.js';
import { RADIUS_TOLERANCE_M, SphereIndex } from './sphere-index.js';
import { ROLE_BORDER, ROLE_CORE, ROLE_NOISE, type Clustering, type PointSet, type ProgressFn } from './types.js';

export interface DbscanOptions {
  /** neighbourhood radius in metres (inclusive), > 0 */
  epsMeters: number;
  /** points (or summed weight) a neighbourhood needs for its centre to be core, the point itself included; ≥ 1 */
  minPoints: number;
  /** a SphereIndex over the same points built for a radius ≥ epsMeters, to share one index between passes; built here when absent */
  index?: SphereIndex;
  /** called now and then with the share of work done, 0..1 */
  onProgress?: ProgressFn;
}

/** Points processed between two progress calls. */
const PROGRESS_STEP = 1 << 16;

/** Throws a RangeError saying what to fix when options or points cannot be clustered. */
function validate(points: PointSet, o: DbscanOptions): void {
  if (typeof o.epsMeters !== 'number' || !(o.epsMeters > 0) || !Number.isFinite(o.epsMeters)) {
    throw new RangeError(`epsMeters must be a positive finite number of metres, got ${o.epsMeters}`);
  }
  if (typeof o.minPoints !== 'number' || !(o.minPoints >= 1) || !Number.isFinite(o.minPoints)) {
    throw new RangeError(`minPoints must be a finite number ≥ 1 (it counts the point itself), got ${o.minPoints}`);
  }
  const { n, lon, lat, weight } = points;
  if (lon.length !== n || lat.length !== n || (weight !== null && weight.length !== n)) {
    throw new RangeError(`point set arrays must all hold n = ${n} values`);
  }
  for (let i = 0; i < n; i++) {
    const x = lon[i], y = lat[i];
    if (!(x >= -180 && x <= 180 && y >= -90 && y <= 90)) {
      throw new RangeError(`point ${i} has position [${x}, ${y}]; longitude must be within −180..180 and latitude within −90..90 degrees`);
    }
  }
  if (weight !== null) {
    for (let i = 0; i < n; i++) {
      const w = weight[i];
      if (!(w >= 0) || !Number.isFinite(w)) throw new RangeError(`point ${i} has weight ${w}; weights must be finite and ≥ 0`);
    }
  }
  if (o.index !== undefined) {
    if (o.index.n !== n) throw new RangeError(`the index holds ${o.index.n} points but the point set has ${n}; build the index over the same points`);
    if (!(o.index.radiusMeters >= o.epsMeters)) {
      throw new RangeError(`the index was built for ${o.index.radiusMeters} m, less than epsMeters ${o.epsMeters}; build it for at least eps`);
    }
  }
}

/** Root of k's set, halving the path on the way (every node visited then points to its grandparent). */
function find(parent: Int32Array, k: number): number {
  while (parent[k] !== k) {
    const g = parent[parent[k]];
    parent[k] = g;
    k = g;
  }
  return k;
}

/**
 * Clusters points with DBSCAN using great-circle distance (see the rules at the top of this file).
 *
 * @param points observations (WGS 84 degrees), with optional non-negative weights
 * @param options epsMeters: radius in metres (inclusive); minPoints: neighbourhood size (or summed
 *   weight) for a core point, the point itself included; index: optional shared SphereIndex
 *   (built for ≥ epsMeters); onProgress: optional progress callback (share 0..1)
 * @returns labels (hotspot number or −1), roles (core / border / noise) and the hotspot count
 * @throws RangeError on invalid eps, minPoints, positions, weights or a mismatched index
 */
export function dbscan(points: PointSet, options: DbscanOptions): Clustering {
  validate(points, options);
  const { epsMeters, minPoints, onProgress } = options;
  const n = points.n;
  const index = options.index ?? new SphereIndex(points, epsMeters);
  const { sorted, sxyz, cellStart, nbrStart, nbr, cellCount } = index;
  const chord = chordForMeters(epsMeters + RADIUS_TOLERANCE_M);
  const r2 = chord * chord;
  const progress = onProgress ?? null;

  // weights in position order, so the hot loop reads them sequentially
  let sw: Float64Array | null = null;
  if (points.weight !== null) {
    const w = points.weight;
    sw = new Float64Array(n);
    for (let k = 0; k < n; k++) sw[k] = w[sorted[k]];
  }

  // Pass 1: core flags. A count stops as soon as it reaches minPoints. Without weights the
  // point's own cell is read first (a = a0 − 1 stands for it, and it is skipped in the list):
  // its points lie nearest, so a dense cell's counts stop after a few reads. With weights the
  // cells are read in list order, so that the floating-point sums, and hence the flags, stay
  // exactly as they are summed in that order.
  const core = new Uint8Array(n);
  const first = sw === null ? -1 : 0;
  let nextReport = PROGRESS_STEP;
  for (let c = 0; c < cellCount; c++) {
    const a0 = nbrStart[c], a1 = nbrStart[c + 1];
    for (let k = cellStart[c], kEnd = cellStart[c + 1]; k < kEnd; k++) {
      const x = sxyz[3 * k], y = sxyz[3 * k + 1], z = sxyz[3 * k + 2];
      let sum = 0;
      scan: for (let a = a0 + first; a < a1; a++) {
        let d = c;
        if (a >= a0) {
          d = nbr[a];
          if (d === c && first < 0) continue;
        }
        for (let m = cellStart[d], mEnd = cellStart[d + 1]; m < mEnd; m++) {
          const dx = sxyz[3 * m] - x, dy = sxyz[3 * m + 1] - y, dz = sxyz[3 * m + 2] - z;
          if (dx * dx + dy * dy + dz * dz <= r2) {
            sum += sw === null ? 1 : sw[m];
            if (sum >= minPoints) break scan;
          }
        }
      }
      if (sum >= minPoints) core[k] = 1;
    }
    if (progress !== null && cellStart[c + 1] >= nextReport) {
      progress((0.5 * cellStart[c + 1]) / n);
      nextReport += PROGRESS_STEP;
    }
  }

  // Pass 2: union–find over pairs of core points within eps, in two steps.
  // 2a, inside each cell: once a scan from some core point finds every core point of its cell in
  // its own component, the cell is marked whole and the rest of the cell is skipped.
  // 2b, across cells (pairs taken from the lower cell only): a whole cell joins k's component
  // through any one link, so its scan stops at the first core point within eps; a cell already
  // in k's component is skipped in O(1). Components only ever merge, so both marks stay true.
  // Dense hotspots, where a cell holds thousands of points, thus cost about linear time, not
  // the square of the cell size.
  const parent = new Int32Array(n);
  for (let k = 0; k < n; k++) parent[k] = k;
  const whole = new Uint8Array(cellCount);
  const rep = new Int32Array(cellCount).fill(-1); // one core point per cell, −1 when it has none
  for (let c = 0; c < cellCount; c++) {
    const m0 = cellStart[c], m1 = cellStart[c + 1];
    for (let k = m0; k < m1; k++) {
      if (core[k] === 0) continue;
      // a whole cell has every core point, this one included, in one component already
      if (whole[c] === 1) break;
      if (rep[c] < 0) rep[c] = k;
      let rk = find(parent, k);
      const x = sxyz[3 * k], y = sxyz[3 * k + 1], z = sxyz[3 * k + 2];
      let allJoined = true;
      for (let m = m0; m < m1; m++) {
        if (core[m] === 0 || m === k) continue;
        const dx = sxyz[3 * m] - x, dy = sxyz[3 * m + 1] - y, dz = sxyz[3 * m + 2] - z;
        if (dx * dx + dy * dy + dz * dz <= r2) {
          const rm = find(parent, m);
          // link the larger root under the smaller one
          if (rk < rm) parent[rm] = rk;
          else if (rm < rk) {
            parent[rk] = rm;
            rk = rm;
          }
        } else if (allJoined && find(parent, m) !== rk) allJoined = false;
      }
      if (allJoined) whole[c] = 1;
    }
  }
  if (progress !== null) progress(0.6);
  nextReport = PROGRESS_STEP;
  for (let c = 0; c < cellCount; c++) {
    const a1 = nbrStart[c + 1];
    for (let k = cellStart[c], kEnd = cellStart[c + 1]; k < kEnd; k++) {
      if (core[k] === 0) continue;
      const x = sxyz[3 * k], y = sxyz[3 * k + 1], z = sxyz[3 * k + 2];
      let rk = find(parent, k);
      for (let a = nbrStart[c]; a < a1; a++) {
        const d = nbr[a];
        if (d <= c || rep[d] < 0) continue;
        const isWhole = whole[d] === 1;
        if (isWhole && find(parent, rep[d]) === rk) continue;
        for (let m = cellStart[d], mEnd = cellStart[d + 1]; m < mEnd; m++) {
          if (core[m] === 0) continue;
          const dx = sxyz[3 * m] - x, dy = sxyz[3 * m + 1] - y, dz = sxyz[3 * m + 2] - z;
          if (dx * dx + dy * dy + dz * dz > r2) continue;
          const rm = find(parent, m);
          if (rk < rm) parent[rm] = rk;
          else if (rm < rk) {
            parent[rk] = rm;
            rk = rm;
          }
          if (isWhole) break;
        }
      }
    }
    if (progress !== null && cellStart[c + 1] >= nextReport) {
      progress(0.6 + (0.2 * cellStart[c + 1]) / n);
      nextReport += PROGRESS_STEP;
    }
  }

  // Pass 3: number hotspots by the lowest input index among their core points. One pass in
  // position order finds each component's root and the lowest point id among its core points
  // (kept at the root's slot for now); the hotspots are then numbered by sorting those ids,
  // which are distinct, and each root's slot is given its number.
  const rootLabel = new Int32Array(n).fill(-1);
  let roots = new Int32Array(64);
  let count = 0;
  for (let k = 0; k < n; k++) {
    if (core[k] === 0) continue;
    const r = find(parent, k);
    const id = sorted[k];
    const seen = rootLabel[r];
    if (seen < 0) {
      if (count === roots.length) {
        const grown = new Int32Array(2 * count);
        grown.set(roots);
        roots = grown;
      }
      roots[count++] = r;
      rootLabel[r] = id;
    } else if (id < seen) rootLabel[r] = id;
  }
  const lowest = new Int32Array(count);
  for (let h = 0; h < count; h++) lowest[h] = rootLabel[roots[h]];
  lowest.sort();
  for (let h = 0; h < count; h++) {
    const r = roots[h];
    const id = rootLabel[r];
    let lo = 0, hi = count - 1;
    while (lo < hi) {
      const mid = (lo + hi) >>> 1;
      if (lowest[mid] < id) lo = mid + 1;
      else hi = mid;
    }
    rootLabel[r] = lo;
  }
  // label per position: every core point takes its root's label (a root keeps its own), the
  // rest stay −1 until pass 4
  const labelAt = rootLabel;
  for (let k = 0; k < n; k++) if (core[k] === 1) labelAt[k] = rootLabel[find(parent, k)];

  // Pass 4: border points join the hotspot of their nearest core point; exact ties go to the
  // lower hotspot number.
  nextReport = PROGRESS_STEP;
  for (let c = 0; c < cellCount; c++) {
    const a0 = nbrStart[c], a1 = nbrStart[c + 1];
    for (let k = cellStart[c], kEnd = cellStart[c + 1]; k < kEnd; k++) {
      if (core[k] === 1) continue;
      const x = sxyz[3 * k], y = sxyz[3 * k + 1], z = sxyz[3 * k + 2];
      let best = -1;
      let bestD2 = Infinity;
      for (let a = a0; a < a1; a++) {
        const d = nbr[a];
        for (let m = cellStart[d], mEnd = cellStart[d + 1]; m < mEnd; m++) {
          if (core[m] === 0) continue;
          const dx = sxyz[3 * m] - x, dy = sxyz[3 * m + 1] - y, dz = sxyz[3 * m + 2] - z;
          const d2 = dx * dx + dy * dy + dz * dz;
          if (d2 > r2) continue;
          const l = labelAt[m];
          if (d2 < bestD2 || (d2 === bestD2 && l < best)) {
            bestD2 = d2;
            best = l;
          }
        }
      }
      labelAt[k] = best;
    }
    if (progress !== null && cellStart[c + 1] >= nextReport) {
      progress(0.8 + (0.2 * cellStart[c + 1]) / n);
      nextReport += PROGRESS_STEP;
    }
  }

  const labels = new Int32Array(n);
  const roles = new Uint8Array(n);
  for (let k = 0; k < n; k++) {
    const i = sorted[k];
    const l = labelAt[k];
    labels[i] = l;
    roles[i] = core[k] === 1 ? ROLE_CORE : l >= 0 ? ROLE_BORDER : ROLE_NOISE;
  }
  if (progress !== null) progress(1);
  return { labels, roles, count };
}
