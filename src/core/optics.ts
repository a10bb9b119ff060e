/**
 * OPTICS: an ordering of the observations that holds the density structure for every eps up to
 * a maximum at once (Ankerst, Breunig, Kriegel, Sander 1999, "OPTICS: ordering points to identify
 * the clustering structure", SIGMOD '99), and two ways to cut hotspots out of it:
 *
 * - `extractDbscan`: the paper's ExtractDBSCAN-Clustering at one eps′ ≤ maxEps. Its core points
 *   and their partition equal DBSCAN's at eps′; border points may differ (a border point joins
 *   the hotspot that reached it first in the ordering, and one reached only after it was
 *   processed stays noise), as the paper states.
 * - `extractXi`: the paper's ξ method (steep down / steep up areas of the reachability plot),
 *   with the predecessor correction of Schubert & Gertz 2018 ("Improving the Cluster Structure
 *   Extracted from OPTICS Plots", LWDA 2018, Algorithm 2) and the corrected inequalities of
 *   Definitions 9 and 11 as in scikit-learn's `_xi_cluster` (BSD licence). ξ clusters are nested
 *   intervals of the ordering. The flat labelling keeps the leaves only: shortest first, a ξ
 *   cluster becomes a hotspot when none of its points already belongs to a shorter one, as
 *   scikit-learn's `_extract_xi_labels` does. A parent that holds a hotspot is not one itself,
 *   and its points in none of its children are noise: were they given the parent's number, the
 *   parent's hull would enclose its children's hulls and hotspots would overlap.
 *
 * Distances are great-circle metres; "undefined" distances of the paper are Infinity. Ties are
 * broken by point id throughout, so the same input in the same order gives the same result.
 * Memory is linear in n: neighbourhoods come from the sphere grid on demand and only one point's
 * neighbourhood is held at a time.
 */
import { metersForChord2 } from './haversine.js';
import { RADIUS_TOLERANCE_M, SphereIndex } from './sphere-index.js';
import { ROLE_BORDER, ROLE_CORE, ROLE_NOISE } from './types.js';
import type { Clustering, PointSet, ProgressFn } from './types.js';

export interface OpticsOptions {
  /** largest neighbourhood radius considered, metres (the paper's generating distance ε) */
  maxEpsMeters: number;
  /** the paper's MinPts: neighbourhood weight (the point itself included) that makes a point core */
  minPoints: number;
  /** called now and then with the share of points processed, 0..1 */
  onProgress?: ProgressFn;
}

export interface OpticsResult {
  /** point ids in the OPTICS cluster order */
  order: Int32Array;
  /** reachability distance per point id, metres; Infinity when undefined (first point of each ordering run) */
  reachability: Float64Array;
  /** core distance per point id, metres; Infinity when the point is not core at maxEps */
  coreDistance: Float64Array;
  /** the point id from which each point was reached, −1 when none */
  predecessor: Int32Array;
  maxEpsMeters: number;
  minPoints: number;
}

/** A ξ cluster: the inclusive range start..end of positions in `order`, and the hotspot its points were labelled with. */
export interface XiCluster {
  start: number;
  end: number;
  /** hotspot number of this ξ cluster's points; −1 when it holds a shorter ξ cluster (a parent: its other points are noise) */
  label: number;
}

/**
 * Seed list of OPTICS: a binary min-heap of point ids keyed by reachability, with decrease-key.
 * Order: smaller reachability first, then smaller point id, so the ordering is deterministic.
 */
class SeedHeap {
  private readonly heap: Int32Array;
  /** position of each point id in `heap`, −1 when absent */
  private readonly pos: Int32Array;
  size = 0;

  constructor(
    n: number,
    private readonly key: Float64Array,
  ) {
    this.heap = new Int32Array(n);
    this.pos = new Int32Array(n).fill(-1);
  }

  has(id: number): boolean {
    return this.pos[id] !== -1;
  }

  private less(a: number, b: number): boolean {
    const ka = this.key[a];
    const kb = this.key[b];
    return ka < kb || (ka === kb && a < b);
  }

  push(id: number): void {
    this.heap[this.size] = id;
    this.pos[id] = this.size;
    this.size++;
    this.up(this.size - 1);
  }

  /** Restores heap order after the key of `id` went down. */
  decreased(id: number): void {
    this.up(this.pos[id]);
  }

  pop(): number {
    const heap = this.heap;
    const top = heap[0];
    this.pos[top] = -1;
    this.size--;
    if (this.size > 0) {
      const last = heap[this.size];
      heap[0] = last;
      this.pos[last] = 0;
      this.down(0);
    }
    return top;
  }

  private up(k: number): void {
    const heap = this.heap;
    const id = heap[k];
    while (k > 0) {
      const parent = (k - 1) >> 1;
      const p = heap[parent];
      if (!this.less(id, p)) break;
      heap[k] = p;
      this.pos[p] = k;
      k = parent;
    }
    heap[k] = id;
    this.pos[id] = k;
  }

  private down(k: number): void {
    const heap = this.heap;
    const size = this.size;
    const id = heap[k];
    for (;;) {
      let child = 2 * k + 1;
      if (child >= size) break;
      if (child + 1 < size && this.less(heap[child + 1], heap[child])) child++;
      const c = heap[child];
      if (!this.less(c, id)) break;
      heap[k] = c;
      this.pos[c] = k;
      k = child;
    }
    heap[k] = id;
    this.pos[id] = k;
  }
}

/** k-th smallest (0-based) of a[0..m) by quickselect; reorders a. */
function selectKth(a: Float64Array, m: number, k: number): number {
  let lo = 0;
  let hi = m - 1;
  while (lo < hi) {
    const pivot = a[(lo + hi) >>> 1];
    let i = lo;
    let j = hi;
    while (i <= j) {
      while (a[i] < pivot) i++;
      while (a[j] > pivot) j--;
      if (i <= j) {
        const t = a[i];
        a[i] = a[j];
        a[j] = t;
        i++;
        j--;
      }
    }
    if (k <= j) hi = j;
    else if (k >= i) lo = i;
    else return a[k];
  }
  return a[k];
}

function checkMinPoints(minPoints: number): void {
  if (!Number.isFinite(minPoints) || minPoints < 1) {
    throw new RangeError(`minPoints must be a number ≥ 1 (the point itself counts), got ${minPoints}`);
  }
}

/**
 * Computes the OPTICS ordering with reachability and core distances.
 *
 * Core distance of p: the smallest distance at which the summed weight of p's neighbourhood (p
 * itself included, weight 1 each without weights) reaches `minPoints`, if that is within
 * `maxEpsMeters`; otherwise Infinity. Reachability of o from p: max(coreDistance(p), d(p, o)).
 * The next start point after the seed list empties is the lowest unprocessed point id.
 *
 * @param points observations (degrees, optional weights)
 * @param options maxEpsMeters: generating radius in metres (> 0); minPoints: core threshold (≥ 1,
 *   the point itself counts); onProgress: optional progress callback
 * @returns ordering, reachability and core distances in metres, predecessors
 */
export function optics(points: PointSet, options: OpticsOptions): OpticsResult {
  const { maxEpsMeters, minPoints, onProgress } = options;
  if (!(maxEpsMeters > 0) || !Number.isFinite(maxEpsMeters)) {
    throw new RangeError(`maxEpsMeters must be a positive number of metres, got ${maxEpsMeters}`);
  }
  checkMinPoints(minPoints);
  const n = points.n;
  const weight = points.weight;
  // reach and coreDist hold squared chords on the unit sphere until the end of the run: chord
  // length orders pairs exactly as ground distance does, and max() commutes with the conversion
  const reach = new Float64Array(n).fill(Infinity);
  const coreDist = new Float64Array(n).fill(Infinity);
  const pred = new Int32Array(n).fill(-1);
  const order = new Int32Array(n);
  const result: OpticsResult = { order, reachability: reach, coreDistance: coreDist, predecessor: pred, maxEpsMeters, minPoints };
  if (n === 0) return result;

  const index = new SphereIndex(points, maxEpsMeters);
  const processed = new Uint8Array(n);
  const seeds = new SeedHeap(n, reach);

  // one neighbourhood at a time, in reusable buffers that grow to the largest neighbourhood seen
  let cap = 64;
  let nbId = new Int32Array(cap);
  let nbC2 = new Float64Array(cap);
  let scratch = new Float64Array(cap);
  let perm = new Int32Array(cap);
  let m = 0;
  const collect = (j: number, chord2: number): void => {
    if (m === cap) {
      cap *= 2;
      const id2 = new Int32Array(cap);
      id2.set(nbId);
      nbId = id2;
      const c2 = new Float64Array(cap);
      c2.set(nbC2);
      nbC2 = c2;
      scratch = new Float64Array(cap);
      perm = new Int32Array(cap);
    }
    nbId[m] = j;
    nbC2[m] = chord2;
    m++;
  };

  /** Core distance, as a squared chord, of the neighbourhood held in the buffers. */
  const coreOf = (): number => {
    if (weight === null) {
      const k = Math.ceil(minPoints);
      if (m < k) return Infinity;
      scratch.set(nbC2.subarray(0, m));
      return selectKth(scratch, m, k - 1);
    }
    let total = 0;
    for (let a = 0; a < m; a++) total += weight[nbId[a]];
    if (total < minPoints) return Infinity;
    const p = perm.subarray(0, m);
    for (let a = 0; a < m; a++) p[a] = a;
    p.sort((a, b) => nbC2[a] - nbC2[b] || nbId[a] - nbId[b]);
    let sum = 0;
    for (let a = 0; a < m; a++) {
      sum += weight[nbId[p[a]]];
      if (sum >= minPoints) return nbC2[p[a]];
    }
    return Infinity;
  };

  let done = 0;
  const step = Math.max(1, Math.floor(n / 100));

  /** Appends p to the ordering and, when p is core, offers its neighbours to the seed list. */
  const processPoint = (p: number): void => {
    processed[p] = 1;
    order[done++] = p;
    if (onProgress && done % step === 0) onProgress(done / n);
    m = 0;
    index.forEachWithin(p, collect);
    const cd = coreOf();
    coreDist[p] = cd;
    if (cd === Infinity) return;
    for (let a = 0; a < m; a++) {
      const o = nbId[a];
      if (processed[o]) continue;
      const d = nbC2[a];
      const r = d > cd ? d : cd;
      if (!seeds.has(o)) {
        reach[o] = r;
        pred[o] = p;
        seeds.push(o);
      } else if (r < reach[o]) {
        // strictly smaller only: on equal reachability the earlier predecessor stays
        reach[o] = r;
        pred[o] = p;
        seeds.decreased(o);
      }
    }
  };

  for (let start = 0; start < n; start++) {
    if (processed[start]) continue;
    processPoint(start);
    while (seeds.size > 0) processPoint(seeds.pop());
  }
  // distances were squared chords so far (same order, no trigonometry per neighbour): to metres
  for (let i = 0; i < n; i++) {
    if (reach[i] !== Infinity) reach[i] = metersForChord2(reach[i]);
    if (coreDist[i] !== Infinity) coreDist[i] = metersForChord2(coreDist[i]);
  }
  if (onProgress && done % step !== 0) onProgress(1);
  return result;
}

/**
 * The ExtractDBSCAN-Clustering of Ankerst et al. 1999 at eps′ ≤ maxEps: a DBSCAN-equivalent
 * clustering read off the ordering in one pass. Roles: core when coreDistance ≤ eps′, border when
 * the point joined a hotspot without being core, noise otherwise. Hotspots are numbered 0.. by the
 * lowest point id among their core points, the same rule as `dbscan`, so core points and their
 * hotspot numbers match `dbscan` at the same eps and minPoints.
 *
 * @param result an OPTICS result
 * @param epsMeters eps′ in metres, 0 < eps′ ≤ result.maxEpsMeters (inclusive, as in DBSCAN)
 */
export function extractDbscan(result: OpticsResult, epsMeters: number): Clustering {
  if (!(epsMeters > 0) || !(epsMeters <= result.maxEpsMeters)) {
    throw new RangeError(
      `eps must be in (0, ${result.maxEpsMeters}] metres (the OPTICS maxEpsMeters), got ${epsMeters}; run OPTICS with a larger maxEpsMeters`,
    );
  }
  // the same slack as the sphere grid, so "exactly eps" counts here as it does in dbscan
  const limit = epsMeters + RADIUS_TOLERANCE_M;
  const { order, reachability, coreDistance } = result;
  const n = order.length;
  const labels = new Int32Array(n).fill(-1);
  const roles = new Uint8Array(n);
  let current = -1;
  let raw = 0;
  for (let k = 0; k < n; k++) {
    const p = order[k];
    const isCore = coreDistance[p] <= limit;
    if (reachability[p] > limit) {
      if (isCore) {
        current = raw++;
        labels[p] = current;
        roles[p] = ROLE_CORE;
      } else {
        // noise; the current hotspot stays open, as later points reached within eps′ still belong to it
        roles[p] = ROLE_NOISE;
      }
    } else {
      labels[p] = current;
      roles[p] = isCore ? ROLE_CORE : ROLE_BORDER;
    }
  }
  // numbering by the lowest core id: renumber over core points first, then carry to borders
  const map = new Int32Array(raw).fill(-1);
  let next = 0;
  for (let i = 0; i < n; i++) {
    if (roles[i] === ROLE_CORE && map[labels[i]] === -1) map[labels[i]] = next++;
  }
  for (let i = 0; i < n; i++) if (labels[i] >= 0) labels[i] = map[labels[i]];
  return { labels, roles, count: next };
}

/** Options of the ξ extraction. */
export interface XiOptions {
  /** steepness, 0 < ξ < 1: a steep point changes reachability by at least the factor 1 − ξ */
  xi: number;
  /** smallest number of points in a ξ cluster (≥ 2); default the OPTICS minPoints (at least 2) */
  minClusterSize?: number;
}

/** A steep down area under construction: start/end positions and the maximum in between since it. */
interface SteepDown {
  start: number;
  end: number;
  mib: number;
}

/**
 * Extends a steep area from `start`: the end is the last steep point before either a point of the
 * opposite direction or more than `minPoints` consecutive non-steep points (Definition 9).
 */
function extendRegion(steep: Uint8Array, opposite: Uint8Array, start: number, minPoints: number): number {
  const n = steep.length;
  let flatRun = 0;
  let end = start;
  for (let k = start; k < n; k++) {
    if (steep[k]) {
      flatRun = 0;
      end = k;
    } else if (!opposite[k]) {
      flatRun++;
      if (flatRun > minPoints) break;
    } else {
      break;
    }
  }
  return end;
}

/**
 * Schubert & Gertz 2018, Algorithm 2: shrink the cluster's end while its last point was reached
 * from outside the cluster. Returns the corrected end, or −1 when nothing is left.
 */
function correctPredecessor(r: Float64Array, predPos: Int32Array, s: number, e: number): number {
  while (s < e) {
    if (r[s] > r[e]) return e;
    const p = predPos[e];
    if (p >= s && p < e) return e;
    e--;
  }
  return -1;
}

/**
 * ξ cluster extraction (Ankerst et al. 1999, section 4.3, with the predecessor correction of
 * Schubert & Gertz 2018). Returns the nested ξ clusters as inclusive position ranges of the
 * ordering, inner clusters before the clusters that contain them, and a flat labelling in which
 * each point takes the innermost ξ cluster containing it (hotspots numbered 0.. by lowest point
 * id). Roles: core when the point is in a hotspot and its core distance is finite, border when in
 * a hotspot but not core, noise when in no ξ cluster.
 *
 * @param result an OPTICS result
 * @param options xi: steepness in (0, 1), for example 0.05; minClusterSize: smallest cluster in
 *   points, default max(2, minPoints)
 */
export function extractXi(result: OpticsResult, options: XiOptions): { clustering: Clustering; clusters: XiCluster[] } {
  const { xi } = options;
  if (!(xi > 0 && xi < 1)) throw new RangeError(`xi must be between 0 and 1 (exclusive), for example 0.05; got ${xi}`);
  const minPoints = Math.max(2, Math.ceil(result.minPoints));
  const minClusterSize = options.minClusterSize ?? minPoints;
  if (!Number.isInteger(minClusterSize) || minClusterSize < 2) {
    throw new RangeError(`minClusterSize must be a whole number ≥ 2, got ${minClusterSize}`);
  }
  const { order, reachability, coreDistance, predecessor } = result;
  const n = order.length;

  // the reachability plot, with an Infinity after the end so a cluster running to the end still closes
  const r = new Float64Array(n + 1);
  for (let k = 0; k < n; k++) r[k] = reachability[order[k]];
  r[n] = Infinity;
  const posOf = new Int32Array(n);
  for (let k = 0; k < n; k++) posOf[order[k]] = k;
  const predPos = new Int32Array(n);
  for (let k = 0; k < n; k++) {
    const p = predecessor[order[k]];
    predPos[k] = p < 0 ? -1 : posOf[p];
  }

  // steepness per position k compares r[k] with r[k+1]; Infinity/Infinity is NaN and counts as neither
  const keep = 1 - xi;
  const steepUp = new Uint8Array(n);
  const steepDown = new Uint8Array(n);
  const up = new Uint8Array(n);
  const down = new Uint8Array(n);
  for (let k = 0; k < n; k++) {
    const ratio = r[k] / r[k + 1];
    if (ratio <= keep) steepUp[k] = 1;
    if (ratio >= 1 / keep) steepDown[k] = 1;
    if (ratio > 1) down[k] = 1;
    if (ratio < 1) up[k] = 1;
  }

  let sdas: SteepDown[] = [];
  const found: { start: number; end: number }[] = [];
  let index = 0;
  let mib = 0;
  const filterSdas = (): void => {
    if (mib === Infinity) {
      sdas = [];
      return;
    }
    sdas = sdas.filter((d) => mib <= r[d.start] * keep);
    for (const d of sdas) if (mib > d.mib) d.mib = mib;
  };

  for (let k = 0; k < n; k++) {
    if (!steepUp[k] && !steepDown[k]) continue;
    if (k < index) continue;
    for (let j = index; j <= k; j++) if (r[j] > mib) mib = r[j];
    if (steepDown[k]) {
      filterSdas();
      const end = extendRegion(steepDown, up, k, minPoints);
      sdas.push({ start: k, end, mib: 0 });
      index = end + 1;
      mib = r[index];
    } else {
      filterSdas();
      const uStart = k;
      const uEnd = extendRegion(steepUp, down, k, minPoints);
      index = uEnd + 1;
      mib = r[index];
      const here: { start: number; end: number }[] = [];
      for (const d of sdas) {
        let cStart = d.start;
        let cEnd = uEnd;
        // the area between must stay below the end's level (the paper's sc2*)
        if (r[cEnd + 1] * keep < d.mib) continue;
        // Definition 11, criterion 4: align the boundary on the lower of the two sides
        const dMax = r[d.start];
        if (dMax * keep >= r[cEnd + 1]) {
          while (r[cStart + 1] > r[cEnd + 1] && cStart < d.end) cStart++;
        } else if (r[cEnd + 1] * keep >= dMax) {
          while (r[cEnd - 1] > dMax && cEnd > uStart) cEnd--;
        }
        cEnd = correctPredecessor(r, predPos, cStart, cEnd);
        if (cEnd < 0) continue;
        if (cEnd - cStart + 1 < minClusterSize) continue; // criterion 3a
        if (cStart > d.end) continue; // criterion 1
        if (cEnd < uStart) continue; // criterion 2
        here.push({ start: cStart, end: cEnd });
      }
      // steep down areas are kept oldest (outermost) first: report inner clusters first
      for (let h = here.length - 1; h >= 0; h--) found.push(here[h]);
    }
  }

  // flat labelling: shortest interval first; an interval is labelled only when none of its
  // positions is labelled yet, so only leaves become hotspots and parents' leftovers stay noise
  // (source: scikit-learn `_extract_xi_labels`, BSD licence)
  const byLength = found.map((_, c) => c);
  byLength.sort((a, b) => found[a].end - found[a].start - (found[b].end - found[b].start) || found[a].start - found[b].start);
  const posLabel = new Int32Array(n).fill(-1);
  for (const c of byLength) {
    let free = true;
    for (let k = found[c].start; k <= found[c].end && free; k++) if (posLabel[k] !== -1) free = false;
    if (free) for (let k = found[c].start; k <= found[c].end; k++) posLabel[k] = c;
  }
  const labels = new Int32Array(n).fill(-1);
  for (let k = 0; k < n; k++) labels[order[k]] = posLabel[k];
  const rawToFinal = new Int32Array(found.length).fill(-1);
  let count = 0;
  for (let i = 0; i < n; i++) {
    const l = labels[i];
    if (l < 0) continue;
    if (rawToFinal[l] === -1) rawToFinal[l] = count++;
    labels[i] = rawToFinal[l];
  }
  const roles = new Uint8Array(n);
  for (let i = 0; i < n; i++) {
    if (labels[i] >= 0) roles[i] = coreDistance[i] < Infinity ? ROLE_CORE : ROLE_BORDER;
  }
  const clusters: XiCluster[] = found.map((c, idx) => ({ start: c.start, end: c.end, label: rawToFinal[idx] }));
  return { clustering: { labels, roles, count }, clusters };
}
