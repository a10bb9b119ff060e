/**
 * OPTICS in its plain indexed form, the reference the engine's tuned walk (src/core/optics.ts)
 * must equal exactly: point ids throughout, a seed heap keyed by point id, each neighbourhood
 * collected through `SphereIndex.forEachWithin` and its core distance by quickselect on a copy.
 * source: Ankerst et al. 1999, Figures 5–7 (OPTICS, ExpandClusterOrder, OrderSeeds::update),
 * with the tie rule of this product: smaller reachability first, then smaller point id.
 */
import { metersForChord2 } from '../../src/core/haversine.js';
import type { OpticsOptions, OpticsResult } from '../../src/core/optics.js';
import { SphereIndex } from '../../src/core/sphere-index.js';
import type { PointSet } from '../../src/core/types.js';

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
export function plainOptics(points: PointSet, options: OpticsOptions): OpticsResult {
  const { maxEpsMeters, minPoints, onProgress } = options;
  if (!(maxEpsMeters > 0) || !Number.isFinite(maxEpsMeters)) {
    throw new RangeError(`maxEpsMeters must be a positive number of metres, got ${maxEpsMeters}`);
  }
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
