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
 * Memory is linear in n: neighbourhoods come from the sphere grid on demand and at most one
 * point's neighbourhood is held at a time (only with weights or a minPoints above 32).
 */
import type { Worker } from 'node:worker_threads';
import { coreFree, startWorkerBeside } from '../workers/location.js';
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
  /**
   * 2: the core distances (unweighted, minPoints ≤ 32) are shared with a worker thread; 1: all on
   * the calling thread. Default: 2 from OPTICS_PARALLEL_MIN_POINTS points when a core is free.
   * The result is the same either way.
   */
  threads?: 1 | 2;
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
 * Seed list of OPTICS: a binary min-heap of index positions (see `SphereIndex.sorted`) keyed by
 * their reachability, with decrease-key through the heap slot of each position. Each heap slot
 * holds its position's key and point id beside it, so sifting compares neighbouring slots only.
 * Order: smaller reachability first, then smaller point id, so the ordering is deterministic.
 */
class SeedHeap {
  /** position, key and point id per heap slot; grown as needed */
  private pos = new Int32Array(1024);
  private key = new Float64Array(1024);
  private id = new Int32Array(1024);
  /** heap slot of each position, −1 when absent */
  private readonly slot: Int32Array;
  size = 0;

  constructor(n: number) {
    this.slot = new Int32Array(n).fill(-1);
  }

  /** Adds position k with key r and point id i. */
  push(k: number, r: number, i: number): void {
    if (this.size === this.pos.length) {
      const grow = 2 * this.size;
      const pos = new Int32Array(grow), key = new Float64Array(grow), id = new Int32Array(grow);
      pos.set(this.pos);
      key.set(this.key);
      id.set(this.id);
      this.pos = pos;
      this.key = key;
      this.id = id;
    }
    this.up(this.size++, k, r, i);
  }

  /** Lowers the key of position k (in the heap) to r. */
  decrease(k: number, r: number): void {
    const s = this.slot[k];
    this.up(s, k, r, this.id[s]);
  }

  /**
   * Position `from` now lives at position `to` (whose old holder is not in the heap): its heap
   * entry follows it; nothing moves in the heap order.
   */
  moved(from: number, to: number): void {
    const s = this.slot[from];
    if (s < 0) return;
    this.pos[s] = to;
    this.slot[to] = s;
    this.slot[from] = -1;
  }

  pop(): number {
    const { pos, key, id } = this;
    const top = pos[0];
    this.slot[top] = -1;
    this.size--;
    if (this.size > 0) {
      const last = this.size;
      this.down(pos[last], key[last], id[last]);
    }
    return top;
  }

  /** Places position k with key r and id i at slot s or above it. */
  private up(s: number, k: number, r: number, i: number): void {
    const { pos, key, id, slot } = this;
    while (s > 0) {
      const parent = (s - 1) >> 1;
      const kp = key[parent];
      if (!(r < kp || (r === kp && i < id[parent]))) break;
      const p = pos[parent];
      pos[s] = p;
      key[s] = kp;
      id[s] = id[parent];
      slot[p] = s;
      s = parent;
    }
    pos[s] = k;
    key[s] = r;
    id[s] = i;
    slot[k] = s;
  }

  /** Places position k with key r and id i at the root or below it. */
  private down(k: number, r: number, i: number): void {
    const { pos, key, id, slot } = this;
    const size = this.size;
    let s = 0;
    for (;;) {
      let child = 2 * s + 1;
      if (child >= size) break;
      let kc = key[child];
      if (child + 1 < size) {
        const k2 = key[child + 1];
        if (k2 < kc || (k2 === kc && id[child + 1] < id[child])) {
          child++;
          kc = k2;
        }
      }
      if (!(kc < r || (kc === r && id[child] < i))) break;
      const c = pos[child];
      pos[s] = c;
      key[s] = kc;
      id[s] = id[child];
      slot[c] = s;
      s = child;
    }
    pos[s] = k;
    key[s] = r;
    id[s] = i;
    slot[k] = s;
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

/**
 * Largest count of points (minPoints, unweighted) for which the core distance is found by keeping
 * the smallest distances in a sorted run and skipping the cells that cannot hold a smaller one;
 * above it, and with weights, the whole neighbourhood is gathered and searched.
 */
const SMALL_K = 32;

/**
 * Slack on the unit sphere's scale (about 6 µm on the ground) by which a cell's box is widened
 * before it is ruled out: a vector sits in its cell up to the rounding of ⌊x / cellSize⌋, far
 * less than this.
 */
const BOX_SLACK = 1e-12;

/** The smallest double above a positive finite v. */
function nextUp(v: number): number {
  const f = new Float64Array([v]);
  const bits = new BigInt64Array(f.buffer);
  bits[0] += 1n;
  return f[0];
}

function checkMinPoints(minPoints: number): void {
  if (!Number.isFinite(minPoints) || minPoints < 1) {
    throw new RangeError(`minPoints must be a number ≥ 1 (the point itself counts), got ${minPoints}`);
  }
}

/** The k smallest values offered, kept sorted by insertion. */
class SmallestK {
  private readonly best: Float64Array;
  filled = 0;

  constructor(private readonly k: number) {
    this.best = new Float64Array(k);
  }

  /** Offers d; returns the k-th smallest so far, Infinity while fewer than k were offered. */
  add(d: number): number {
    const best = this.best;
    const k = this.k;
    let s = this.filled < k ? this.filled++ : k - 1;
    while (s > 0 && best[s - 1] > d) {
      best[s] = best[s - 1];
      s--;
    }
    best[s] = d;
    return this.filled === k ? best[k - 1] : Infinity;
  }
}

/** Squared distance from (x, y, z) to the box of cell d, the box widened by BOX_SLACK. */
function boxDistance2(index: CoreGrid, d: number, x: number, y: number, z: number): number {
  const s = index.cellSize;
  const gap = (v: number, cell: number): number => {
    const lo = cell * s - BOX_SLACK;
    const hi = (cell + 1) * s + BOX_SLACK;
    return v < lo ? lo - v : v > hi ? v - hi : 0;
  };
  const ex = gap(x, index.cx[d]), ey = gap(y, index.cy[d]), ez = gap(z, index.cz[d]);
  return ex * ex + ey * ey + ez * ez;
}

/**
 * Orders each cell's positions by x, in place: the index's `sorted` and `sxyz` are permuted
 * inside every cell (cells keep their runs), so that a search for near points can run outward
 * from a given x and stop where the x gap alone exceeds what it looks for. Only for an index
 * private to one OPTICS run: "ascending id within a cell" no longer holds afterwards, and
 * nothing in the run depends on it (ties are broken by point id, not by position).
 */
export function orderCellsByX(index: SphereIndex): void {
  const { sxyz, sorted, cellStart, cellCount } = index;
  let local = new Int32Array(64);
  let kx = new Float64Array(64);
  let ids = new Int32Array(64);
  let vec = new Float64Array(3 * 64);
  let count = new Int32Array(65);
  for (let c = 0; c < cellCount; c++) {
    const q0 = cellStart[c], m = cellStart[c + 1] - q0;
    if (m < 2) continue;
    if (m > local.length) {
      local = new Int32Array(m);
      kx = new Float64Array(m);
      ids = new Int32Array(m);
      vec = new Float64Array(3 * m);
      count = new Int32Array(m + 1);
    }
    if (!byX(sxyz, q0, m, local, kx, count)) continue;
    for (let j = 0; j < m; j++) ids[j] = sorted[q0 + j];
    vec.set(sxyz.subarray(3 * q0, 3 * (q0 + m)));
    for (let j = 0; j < m; j++) {
      const q = q0 + j, from = local[j];
      sorted[q] = ids[from];
      sxyz[3 * q] = vec[3 * from];
      sxyz[3 * q + 1] = vec[3 * from + 1];
      sxyz[3 * q + 2] = vec[3 * from + 2];
    }
  }
}

/**
 * The order by x of the m ≥ 2 vectors at positions q0.. of sxyz: local[t] = the cell-local index
 * of the t-th smallest. Returns false when they are in that order already (local is then not
 * filled). Few points: insertion sort. More: distributed by x into m equal buckets (a stable
 * counting pass), then an insertion sort that only fixes the order inside each bucket; when one
 * bucket holds many points (x bunched together), a comparison sort instead.
 */
function byX(sxyz: Float64Array, q0: number, m: number, local: Int32Array, kx: Float64Array, count: Int32Array): boolean {
  let ordered = true;
  let lo = sxyz[3 * q0], hi = lo;
  for (let j = 1; j < m; j++) {
    const v = sxyz[3 * (q0 + j)];
    if (v < sxyz[3 * (q0 + j - 1)]) ordered = false;
    if (v < lo) lo = v;
    if (v > hi) hi = v;
  }
  if (ordered) return false;
  if (m > 32) {
    const scale = m / (hi - lo);
    count.fill(0, 0, m + 1);
    let crowded = false;
    for (let j = 0; j < m; j++) {
      const b = Math.min(m - 1, Math.floor((sxyz[3 * (q0 + j)] - lo) * scale));
      if (++count[b + 1] > 32) crowded = true;
    }
    if (crowded) {
      for (let j = 0; j < m; j++) local[j] = j;
      local.subarray(0, m).sort((i, j) => sxyz[3 * (q0 + i)] - sxyz[3 * (q0 + j)]);
      return true;
    }
    for (let b = 0; b < m; b++) count[b + 1] += count[b];
    for (let j = 0; j < m; j++) {
      const v = sxyz[3 * (q0 + j)];
      const t = count[Math.min(m - 1, Math.floor((v - lo) * scale))]++;
      local[t] = j;
      kx[t] = v;
    }
  } else {
    for (let j = 0; j < m; j++) {
      local[j] = j;
      kx[j] = sxyz[3 * (q0 + j)];
    }
  }
  for (let j = 1; j < m; j++) {
    const v = kx[j], l = local[j];
    let s = j;
    while (s > 0 && kx[s - 1] > v) {
      kx[s] = kx[s - 1];
      local[s] = local[s - 1];
      s--;
    }
    kx[s] = v;
    local[s] = l;
  }
  return true;
}

/**
 * Core distances per index position, unweighted, k = ⌈minPoints⌉ ≤ SMALL_K: the k-th smallest
 * squared chord within the radius. The point's own cell is read first; a neighbour cell whose box
 * lies farther than the k-th smallest found so far cannot change it and is skipped; inside a cell
 * the points are read outward from the point's x and the reading stops on each side where the
 * squared x gap alone exceeds the k-th smallest so far (or the radius while fewer than k are
 * found): the squared chord of every point beyond is at least that gap. The value is the k-th
 * smallest of the whole neighbourhood, as a full search finds it. Writes the positions of the
 * cells cellFrom .. cellTo − 1 into out; the other entries are left as they are.
 */
export function smallCoreCells(index: CoreGrid, k: number, out: Float64Array, cellFrom: number, cellTo: number): void {
  const { sxyz, cellStart, nbrStart, nbr, chord2: r2 } = index;
  const top = new SmallestK(k);
  // per neighbour cell of the current cell: its first position whose x is not below the current
  // point's; the points of a cell come in ascending x, so each only moves forward
  const cursor = new Int32Array(27);
  for (let c = cellFrom; c < cellTo; c++) {
    const a0 = nbrStart[c], a1 = nbrStart[c + 1];
    for (let a = a0; a < a1; a++) cursor[a - a0] = cellStart[nbr[a]];
    for (let p = cellStart[c], pEnd = cellStart[c + 1]; p < pEnd; p++) {
      const x = sxyz[3 * p], y = sxyz[3 * p + 1], z = sxyz[3 * p + 2];
      top.filled = 0;
      let kth = Infinity;
      for (let a = a0 - 1; a < a1; a++) {
        // a = a0 − 1 stands for the own cell, read first, where p itself splits the x order; it
        // is skipped in the list
        let d = c, lo = p, hi = p, mid = p;
        if (a >= a0) {
          d = nbr[a];
          if (d === c || (kth < Infinity && boxDistance2(index, d, x, y, z) > kth)) continue;
          lo = cellStart[d];
          hi = cellStart[d + 1];
          mid = cursor[a - a0];
          while (mid < hi && sxyz[3 * mid] < x) mid++;
          cursor[a - a0] = mid;
        } else {
          lo = cellStart[c];
          hi = cellStart[c + 1];
        }
        for (let q = mid; q < hi; q++) {
          const dx = sxyz[3 * q] - x;
          if (dx * dx > (kth < r2 ? kth : r2)) break;
          const dy = sxyz[3 * q + 1] - y, dz = sxyz[3 * q + 2] - z;
          const d2 = dx * dx + dy * dy + dz * dz;
          if (d2 <= r2 && d2 < kth) kth = top.add(d2);
        }
        for (let q = mid - 1; q >= lo; q--) {
          const dx = sxyz[3 * q] - x;
          if (dx * dx > (kth < r2 ? kth : r2)) break;
          const dy = sxyz[3 * q + 1] - y, dz = sxyz[3 * q + 2] - z;
          const d2 = dx * dx + dy * dy + dz * dz;
          if (d2 <= r2 && d2 < kth) kth = top.add(d2);
        }
      }
      out[p] = kth;
    }
  }
}

/**
 * Core distances per index position in general (weights, or a large minPoints): each
 * neighbourhood gathered whole into reused buffers, then quickselect, or with weights the
 * neighbours sorted by distance (ties by point id) until their summed weight reaches minPoints.
 */
function gatheredCoreDistances(index: SphereIndex, weight: Float64Array | null, minPoints: number): Float64Array {
  const { sxyz, cellStart, nbrStart, nbr, chord2: r2, cellCount, sorted } = index;
  const out = new Float64Array(index.n).fill(Infinity);
  let pos = new Int32Array(64);
  let c2 = new Float64Array(64);
  let perm = new Int32Array(64);
  for (let c = 0; c < cellCount; c++) {
    let around = 0;
    for (let a = nbrStart[c]; a < nbrStart[c + 1]; a++) around += cellStart[nbr[a] + 1] - cellStart[nbr[a]];
    if (around > pos.length) {
      pos = new Int32Array(around);
      c2 = new Float64Array(around);
      perm = new Int32Array(around);
    }
    for (let p = cellStart[c], pEnd = cellStart[c + 1]; p < pEnd; p++) {
      const x = sxyz[3 * p], y = sxyz[3 * p + 1], z = sxyz[3 * p + 2];
      let m = 0;
      for (let a = nbrStart[c], aEnd = nbrStart[c + 1]; a < aEnd; a++) {
        for (let q = cellStart[nbr[a]], qEnd = cellStart[nbr[a] + 1]; q < qEnd; q++) {
          const dx = sxyz[3 * q] - x, dy = sxyz[3 * q + 1] - y, dz = sxyz[3 * q + 2] - z;
          const d2 = dx * dx + dy * dy + dz * dz;
          if (d2 <= r2) {
            pos[m] = q;
            c2[m++] = d2;
          }
        }
      }
      out[p] = weight === null ? countedCore(c2, m, Math.ceil(minPoints)) : weightedCore(pos, c2, perm, m, weight, sorted, minPoints);
    }
  }
  return out;
}

/** k-th smallest of c2[0..m), Infinity when m < k; reorders c2. */
function countedCore(c2: Float64Array, m: number, k: number): number {
  return m < k ? Infinity : selectKth(c2, m, k - 1);
}

/** Smallest squared chord at which the summed weight, nearest first (ties by point id), reaches minPoints. */
function weightedCore(pos: Int32Array, c2: Float64Array, perm: Int32Array, m: number, weight: Float64Array, id: Int32Array, minPoints: number): number {
  let total = 0;
  for (let a = 0; a < m; a++) total += weight[pos[a]];
  if (total < minPoints) return Infinity;
  const p = perm.subarray(0, m);
  for (let a = 0; a < m; a++) p[a] = a;
  p.sort((a, b) => c2[a] - c2[b] || id[pos[a]] - id[pos[b]]);
  let sum = 0;
  for (let a = 0; a < m; a++) {
    sum += weight[pos[p[a]]];
    if (sum >= minPoints) return c2[p[a]];
  }
  return Infinity;
}

/**
 * The scan of the OPTICS walk from the core point p at position k of cell c: every unordered
 * point o in the cells around whose reachability from p, max(core distance of p, d(p, o)), is
 * within the radius and strictly below its reachability so far gets it, with p as its
 * predecessor (on equal reachability the earlier predecessor stays). Writes the positions so
 * lowered into `lowered`, as ~o (negative) when o had none before (it is new to the seed list),
 * and returns how many. Calls nothing, so the loop keeps its arrays in registers.
 */
function lowerNeighbours(
  k: number,
  c: number,
  p: number,
  sxyz: Float64Array,
  core: Float64Array,
  reach: Float64Array,
  pred: Int32Array,
  cellStart: Int32Array,
  left: Int32Array,
  nbrStart: Int32Array,
  nbr: Int32Array,
  reachLimit: number,
  lowered: Int32Array,
): number {
  const cd = core[k];
  const x = sxyz[3 * k], y = sxyz[3 * k + 1], z = sxyz[3 * k + 2];
  let m = 0;
  for (let a = nbrStart[c], aEnd = nbrStart[c + 1]; a < aEnd; a++) {
    const d = nbr[a];
    for (let o = cellStart[d], oEnd = o + left[d]; o < oEnd; o++) {
      const dx = sxyz[3 * o] - x, dy = sxyz[3 * o + 1] - y, dz = sxyz[3 * o + 2] - z;
      const d2 = dx * dx + dy * dy + dz * dz;
      // within the radius exactly when r < reachLimit, as cd ≤ r2 here
      const r = d2 > cd ? d2 : cd;
      const before = reach[o];
      // an unordered point is in the seed list exactly when its reachability is finite
      if (r < (before < reachLimit ? before : reachLimit)) {
        reach[o] = r;
        pred[o] = p;
        lowered[m++] = before === Infinity ? ~o : o;
      }
    }
  }
  return m;
}

/** The grid the core distances read: a SphereIndex, or copies of its arrays shared with a worker thread. */
export interface CoreGrid {
  sxyz: Float64Array;
  cellStart: Int32Array;
  nbrStart: Int32Array;
  nbr: Int32Array;
  cx: Int32Array;
  cy: Int32Array;
  cz: Int32Array;
  cellSize: number;
  chord2: number;
  cellCount: number;
}

/**
 * Core distances shared by two threads: the grid in shared memory, the output, and the control
 * words. Both threads take chunks of CORE_CHUNK_CELLS cells in turn from one counter
 * (`ctl[CORE_NEXT]`), so neither waits for the other to start and a slow or absent worker only
 * leaves more chunks to the calling thread. The worker marks each chunk it finishes in `chunkDone`.
 */
export interface CoreTask {
  grid: CoreGrid;
  k: number;
  out: Float64Array;
  ctl: Int32Array;
  chunkDone: Int32Array;
  chunkCells: number;
}

/** Control word: the next chunk to take. */
const CORE_NEXT = 0;
/** Control word: the worker's state, one of the CORE_* values below. */
const CORE_STATE = 1;
/** Worker states: not started; taking chunks; finished; failed; not wanted any more (the calling thread took every chunk first). */
const CORE_WAITING = 0;
const CORE_STARTED = 1;
const CORE_DONE = 2;
const CORE_FAILED = 3;
const CORE_CLOSED = 4;

/** Cells per chunk taken by either thread (about 6,000 points at the benchmark density). */
const CORE_CHUNK_CELLS = 2048;

/**
 * From this many points OPTICS computes the core distances on two threads when a core is free:
 * a worker's start costs some 30–50 ms of CPU, and below this the core distances take little more.
 */
export const OPTICS_PARALLEL_MIN_POINTS = 200_000;

/** How long the calling thread waits for the worker's last chunk before computing it itself, ms (a stall, not a slow chunk). */
const CORE_FINISH_PATIENCE_MS = 30_000;

/** Takes chunks from the task's counter until none is left, marking each finished chunk in `done`. */
function takeCoreChunks(task: CoreTask, grid: CoreGrid, done: Int32Array): void {
  const { k, out, ctl, chunkCells } = task;
  const chunks = done.length;
  for (;;) {
    const j = Atomics.add(ctl, CORE_NEXT, 1);
    if (j >= chunks) return;
    smallCoreCells(grid, k, out, j * chunkCells, Math.min(grid.cellCount, (j + 1) * chunkCells));
    Atomics.store(done, j, 1);
  }
}

/** The worker's side of a CoreTask: takes chunks unless the calling thread has closed the task, then reports. */
export function runCoreTask(task: CoreTask): void {
  const { ctl } = task;
  if (Atomics.compareExchange(ctl, CORE_STATE, CORE_WAITING, CORE_STARTED) !== CORE_WAITING) return;
  let state = CORE_DONE;
  try {
    takeCoreChunks(task, task.grid, task.chunkDone);
  } catch {
    // the calling thread computes the chunks left unmarked
    state = CORE_FAILED;
  }
  Atomics.store(ctl, CORE_STATE, state);
  Atomics.notify(ctl, CORE_STATE);
}

/** Options of `sharedCoreDistances`, for tests: smaller chunks, and a wait for the worker to start before taking any. */
export interface SharedCoreOptions {
  /** cells per chunk, default CORE_CHUNK_CELLS */
  chunkCells?: number;
  /** how long to wait for the worker to start before this thread takes chunks, ms; default not at all */
  startWaitMs?: number;
}

/** An Int32Array copied into shared memory. */
function sharedInts(a: Int32Array): Int32Array {
  const s = new Int32Array(new SharedArrayBuffer(a.byteLength));
  s.set(a);
  return s;
}

/** The worker thread (see startWorkerBeside). */
function startCoreWorker(task: CoreTask): Worker {
  return startWorkerBeside(import.meta.url, 'optics-worker', { workerData: task });
}

/**
 * Core distances (unweighted, small k) computed by this thread and a worker thread together, over
 * copies of the grid's arrays in shared memory. Each position's value comes from the same
 * `smallCoreCells` over the same arrays whichever thread computes it, so the result is the
 * one-thread result bit for bit; any chunk the worker took and did not finish (it failed or
 * stalled) is computed here. The index's cells must be ordered by x (`orderCellsByX`).
 * Returns the core distances per position and how many chunks the worker computed.
 */
export function sharedCoreDistances(index: SphereIndex, k: number, options: SharedCoreOptions = {}): { out: Float64Array; workerChunks: number } {
  const n = index.n;
  const chunkCells = options.chunkCells ?? CORE_CHUNK_CELLS;
  const sxyz = new Float64Array(new SharedArrayBuffer(index.sxyz.byteLength));
  sxyz.set(index.sxyz);
  const grid: CoreGrid = {
    sxyz,
    cellStart: sharedInts(index.cellStart),
    nbrStart: sharedInts(index.nbrStart),
    nbr: sharedInts(index.nbr),
    cx: sharedInts(index.cx),
    cy: sharedInts(index.cy),
    cz: sharedInts(index.cz),
    cellSize: index.cellSize,
    chord2: index.chord2,
    cellCount: index.cellCount,
  };
  const out = new Float64Array(new SharedArrayBuffer(n * 8)).fill(Infinity);
  const chunks = Math.ceil(index.cellCount / chunkCells);
  const ctl = new Int32Array(new SharedArrayBuffer(8));
  const task: CoreTask = { grid, k, out, ctl, chunkDone: new Int32Array(new SharedArrayBuffer(4 * chunks)), chunkCells };
  let worker: Worker | null = null;
  try {
    worker = startCoreWorker(task);
    // a worker that fails to start reports here; its chunks are then all taken by this thread
    worker.on('error', () => {});
    worker.unref();
  } catch {
    worker = null;
  }
  if (worker !== null && options.startWaitMs !== undefined) Atomics.wait(ctl, CORE_STATE, CORE_WAITING, options.startWaitMs);
  // this thread reads its own index (the same values) and marks what it computed
  const mine = new Int32Array(chunks);
  takeCoreChunks(task, index, mine);
  if (Atomics.compareExchange(ctl, CORE_STATE, CORE_WAITING, CORE_CLOSED) !== CORE_WAITING) {
    const deadline = Date.now() + CORE_FINISH_PATIENCE_MS;
    let state = Atomics.load(ctl, CORE_STATE);
    while (state === CORE_STARTED && Date.now() < deadline) {
      Atomics.wait(ctl, CORE_STATE, CORE_STARTED, deadline - Date.now());
      state = Atomics.load(ctl, CORE_STATE);
    }
  }
  if (worker !== null) void worker.terminate();
  let workerChunks = 0;
  for (let j = 0; j < chunks; j++) {
    if (Atomics.load(task.chunkDone, j) === 1) workerChunks++;
    else if (mine[j] === 0) smallCoreCells(index, k, out, j * chunkCells, Math.min(index.cellCount, (j + 1) * chunkCells));
  }
  return { out, workerChunks };
}

/**
 * Whether OPTICS at n points computes its core distances on two threads by default: from
 * OPTICS_PARALLEL_MIN_POINTS points, on a machine with two cores or more, when a core is likely
 * free (the cores less the last minute's load average, ours included, at least one half). On a
 * machine whose cores are all busy a worker gains no time and costs its start.
 */
function coreThreads(n: number): 1 | 2 {
  return n >= OPTICS_PARALLEL_MIN_POINTS && coreFree(0.5) ? 2 : 1;
}

/** Core distances (squared chords) per index position. */
function coreDistances(index: SphereIndex, points: PointSet, minPoints: number, threads: 1 | 2): Float64Array {
  const k = Math.ceil(minPoints);
  if (points.weight === null && k <= SMALL_K) {
    if (threads === 2) return sharedCoreDistances(index, k).out;
    const out = new Float64Array(index.n).fill(Infinity);
    smallCoreCells(index, k, out, 0, index.cellCount);
    return out;
  }
  let weight: Float64Array | null = null;
  if (points.weight !== null) {
    weight = new Float64Array(index.n);
    for (let p = 0; p < index.n; p++) weight[p] = points.weight[index.sorted[p]];
  }
  return gatheredCoreDistances(index, weight, minPoints);
}

/**
 * Computes the OPTICS ordering with reachability and core distances.
 *
 * Core distance of p: the smallest distance at which the summed weight of p's neighbourhood (p
 * itself included, weight 1 each without weights) reaches `minPoints`, if that is within
 * `maxEpsMeters`; otherwise Infinity. Reachability of o from p: max(coreDistance(p), d(p, o)).
 * The next start point after the seed list empties is the lowest unprocessed point id.
 *
 * Core distances do not depend on the ordering, so they are found first, in one pass in the
 * index's cell order (each cell's points ordered by x). The walk then runs in index positions
 * (points sorted by grid cell, where a neighbourhood sits close together in memory) and reads
 * only the neighbourhoods of core points; each cell keeps its unordered points at its front, so
 * the points already ordered are never read again. The results are put back in point-id order at
 * the end. None of this changes the result: which points a core point reaches, and how near, does
 * not depend on the order they are read in, and the seed list's order is by (reachability, id).
 *
 * @param points observations (degrees, optional weights)
 * @param options maxEpsMeters: generating radius in metres (> 0); minPoints: core threshold (≥ 1,
 *   the point itself counts); onProgress: optional progress callback
 * @returns ordering, reachability and core distances in metres, predecessors
 */
export function optics(points: PointSet, options: OpticsOptions): OpticsResult {
  const { maxEpsMeters, minPoints, onProgress } = options;
  const threads = options.threads ?? coreThreads(points.n);
  if (!(maxEpsMeters > 0) || !Number.isFinite(maxEpsMeters)) {
    throw new RangeError(`maxEpsMeters must be a positive number of metres, got ${maxEpsMeters}`);
  }
  checkMinPoints(minPoints);
  const n = points.n;
  const order = new Int32Array(n);
  const result: OpticsResult = {
    order,
    reachability: new Float64Array(n).fill(Infinity),
    coreDistance: new Float64Array(n).fill(Infinity),
    predecessor: new Int32Array(n).fill(-1),
    maxEpsMeters,
    minPoints,
  };
  if (n === 0) return result;

  const index = new SphereIndex(points, maxEpsMeters);
  orderCellsByX(index);
  const { sorted, sxyz, cellStart, nbrStart, nbr, chord2: r2, cellCount } = index;
  // per position: reach and core hold squared chords on the unit sphere until the end of the
  // run (chord length orders pairs exactly as ground distance does, and max() commutes with the
  // conversion); pred holds the point id reached from
  const core = coreDistances(index, points, minPoints, threads);
  const reach = new Float64Array(n).fill(Infinity);
  const pred = new Int32Array(n).fill(-1);
  // the unordered points of cell c are the positions cellStart[c] .. cellStart[c] + left[c] − 1:
  // a point, once ordered, swaps places with the cell's last unordered one, so scans read only
  // unordered points (and a cell at 0 is skipped whole). The cells' x order is used up by then:
  // only the core distances need it.
  const left = new Int32Array(cellCount);
  for (let c = 0; c < cellCount; c++) left[c] = cellStart[c + 1] - cellStart[c];
  // cell of each position (swaps stay inside a cell), read where the point sits rather than by its id
  const cellAt = new Int32Array(n);
  for (let c = 0; c < cellCount; c++) cellAt.fill(c, cellStart[c], cellStart[c + 1]);
  // r ≤ r2 exactly when r < reachLimit, the next double above r2
  const reachLimit = nextUp(r2);
  // current position of each unordered point id, −1 once ordered
  const posOf = new Int32Array(n);
  for (let k = 0; k < n; k++) posOf[sorted[k]] = k;
  const seeds = new SeedHeap(n);
  // the unordered neighbours of one core point whose reachability it lowered, and whether each
  // was new to the seed list; the seed list is told after the scan, so the scan calls nothing.
  // The order of the seed list's updates does not matter: it pops by (reachability, id), a total order.
  let most = 0;
  for (let c = 0; c < cellCount; c++) {
    let around = 0;
    for (let a = nbrStart[c]; a < nbrStart[c + 1]; a++) around += cellStart[nbr[a] + 1] - cellStart[nbr[a]];
    if (around > most) most = around;
  }
  const lowered = new Int32Array(most);

  let done = 0;
  const step = Math.max(1, Math.floor(n / 100));

  /** Appends the unordered point at position k0 to the ordering and, when it is core, offers its unordered neighbours to the seed list. */
  const processPosition = (k0: number): void => {
    const p = sorted[k0];
    const c = cellAt[k0];
    // k: the point's place from now on, the last of its cell's unordered run, which then shrinks
    const k = cellStart[c] + --left[c];
    if (k0 !== k) {
      const q = sorted[k];
      sorted[k0] = q;
      sorted[k] = p;
      posOf[q] = k0;
      let t = sxyz[3 * k0];
      sxyz[3 * k0] = sxyz[3 * k];
      sxyz[3 * k] = t;
      t = sxyz[3 * k0 + 1];
      sxyz[3 * k0 + 1] = sxyz[3 * k + 1];
      sxyz[3 * k + 1] = t;
      t = sxyz[3 * k0 + 2];
      sxyz[3 * k0 + 2] = sxyz[3 * k + 2];
      sxyz[3 * k + 2] = t;
      t = core[k0];
      core[k0] = core[k];
      core[k] = t;
      t = reach[k0];
      reach[k0] = reach[k];
      reach[k] = t;
      const u = pred[k0];
      pred[k0] = pred[k];
      pred[k] = u;
      // k0 is out of the heap (popped, or a start point); the point from k may be in it
      seeds.moved(k, k0);
    }
    posOf[p] = -1;
    order[done++] = p;
    if (onProgress && done % step === 0) onProgress(done / n);
    if (core[k] === Infinity) return;
    const m = lowerNeighbours(k, c, p, sxyz, core, reach, pred, cellStart, left, nbrStart, nbr, reachLimit, lowered);
    for (let j = 0; j < m; j++) {
      const o = lowered[j];
      if (o < 0) seeds.push(~o, reach[~o], sorted[~o]);
      else seeds.decrease(o, reach[o]);
    }
  };

  for (let start = 0; start < n; start++) {
    const k = posOf[start];
    if (k < 0) continue;
    processPosition(k);
    while (seeds.size > 0) processPosition(seeds.pop());
  }
  // back to point ids, and from squared chords (same order, no trigonometry per neighbour) to metres
  for (let k = 0; k < n; k++) {
    const i = sorted[k];
    if (reach[k] !== Infinity) result.reachability[i] = metersForChord2(reach[k]);
    if (core[k] !== Infinity) result.coreDistance[i] = metersForChord2(core[k]);
    result.predecessor[i] = pred[k];
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
