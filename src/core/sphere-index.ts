/**
 * Fixed-radius neighbour index on the sphere.
 *
 * Every position becomes a unit vector; two positions are within `radiusMeters` of each other
 * exactly when the straight chord between their vectors is at most chord(radius), because chord
 * length grows monotonically with great-circle distance. Vectors are hashed into a 3-D grid whose
 * cell edge is that chord, so all neighbours of a point lie in its own cell or one of the 26
 * around it. Nothing special happens at the poles or at ±180°: the grid lives in 3-D space, where
 * neither exists. Distance tests are three subtractions and three multiplications, no trigonometry.
 *
 * Memory is linear in n: coordinates copied in cell order, one cell id per point, and for every
 * non-empty cell the list of its non-empty neighbour cells (at most 27, usually 9–15 because the
 * points lie on a 2-D surface). No per-point neighbour list is ever kept.
 */
import { chordForMeters, metersForChord2, unitVectors } from './haversine.js';
import type { PointSet } from './types.js';

/**
 * Slack added to the radius so that a point at exactly the radius still counts despite
 * floating-point rounding of the unit vectors (about 1e-9 m at Earth scale). One micrometre.
 */
export const RADIUS_TOLERANCE_M = 1e-6;

const EMPTY = -1;

/**
 * Smallest cell edge on the unit sphere (about 97 m on the ground). Smaller radii share this cell
 * size, which stays correct (a cell at least as large as the radius still holds every neighbour in
 * the 27 around it) and keeps the grid's extent below 2^17 cells per axis.
 */
const MIN_CELL = 2 / 2 ** 17;

/**
 * The grid layout built by `buildLayout`: positions in cell order and the cells as runs of them.
 */
interface Layout {
  sorted: Int32Array;
  sxyz: Float64Array;
  cellStart: Int32Array;
  cx: Int32Array;
  cy: Int32Array;
  cz: Int32Array;
  minX: number;
  maxX: number;
  minY: number;
  maxY: number;
  minZ: number;
  maxZ: number;
}

/**
 * Point ids in lexicographic cell order (x, then y, then z), ascending id inside a cell, with
 * the unit vectors copied in that order and the cells found as runs of equal coordinates.
 *
 * A stable counting sort by x scatters ids and vectors into x slabs (the writes go to one open
 * run per slab, so they stay in cache, and no vector is read at random). Each slab (a few
 * hundred points, small enough to stay in cache) is then sorted by (y, z, id) on its own: by two
 * stable counting sorts (z, then y) over the slab's own extent, or, when that extent is large for
 * the slab's size, by comparison; its vectors are permuted in place and its cells read off while
 * it is still in cache.
 */
function buildLayout(xyz: Float64Array, n: number, inv: number): Layout {
  // 1. the extent on each axis and the size of every x slab, in one pass. A grid coordinate
  //    lies within ⌊−inv⌋ .. ⌊inv⌋ (the vectors are unit vectors), so the slab counts are kept
  //    over that whole range, offset by ⌊−inv⌋, before the extent is known.
  const base = Math.floor(-inv);
  const slabCount = new Int32Array(Math.floor(inv) - base + 2);
  const extent = new Int32Array(6);
  countSlabs(xyz, n, inv, base, slabCount, extent);
  const [minX, maxX, minY, maxY, minZ, maxZ] = extent;

  // 2. stable counting sort by x: ids and vectors scattered into their slabs
  const rangeX = maxX - minX + 1;
  const slabStart = new Int32Array(rangeX + 1);
  for (let r = 0; r < rangeX; r++) slabStart[r + 1] = slabStart[r] + slabCount[r + minX - base];
  const sorted = new Int32Array(n);
  const sxyz = new Float64Array(n * 3);
  for (let r = 0; r < rangeX; r++) slabCount[r + minX - base] = slabStart[r];
  scatterSlabs(xyz, n, inv, base, slabCount, sorted, sxyz);

  // 3. each slab sorted by (y, z, id) and its cells read off. There are at most n cells; the
  //    cell arrays are views of n-sized buffers, of which only the cells' part is ever written.
  const cellStart = new Int32Array(n + 1);
  const cx = new Int32Array(n);
  const cy = new Int32Array(n);
  const cz = new Int32Array(n);
  const scratch = new SlabScratch(Math.max(maxY - minY, maxZ - minZ) + 2);
  let cells = 0;
  for (let r = 0; r < rangeX; r++) {
    const b0 = slabStart[r], b1 = slabStart[r + 1];
    if (b1 === b0) continue;
    scratch.sortSlab(sorted, sxyz, b0, b1, inv);
    cells = scratch.readCells(b0, b1, r + minX, cells, cellStart, cx, cy, cz);
  }
  cellStart[cells] = n;
  return {
    sorted,
    sxyz,
    cellStart: cellStart.subarray(0, cells + 1),
    cx: cx.subarray(0, cells),
    cy: cy.subarray(0, cells),
    cz: cz.subarray(0, cells),
    minX,
    maxX,
    minY,
    maxY,
    minZ,
    maxZ,
  };
}

/**
 * Step 1 of `buildLayout`: counts the points of every x slab into slabCount[⌊x·inv⌋ − base] and
 * writes the extent of the grid coordinates, min and max per axis, into extent.
 */
function countSlabs(xyz: Float64Array, n: number, inv: number, base: number, slabCount: Int32Array, extent: Int32Array): void {
  let minX = 0, maxX = 0, minY = 0, maxY = 0, minZ = 0, maxZ = 0;
  for (let i = 0; i < n; i++) {
    const ix = Math.floor(xyz[3 * i] * inv);
    const iy = Math.floor(xyz[3 * i + 1] * inv);
    const iz = Math.floor(xyz[3 * i + 2] * inv);
    slabCount[ix - base]++;
    if (i === 0 || ix < minX) minX = ix;
    if (i === 0 || ix > maxX) maxX = ix;
    if (i === 0 || iy < minY) minY = iy;
    if (i === 0 || iy > maxY) maxY = iy;
    if (i === 0 || iz < minZ) minZ = iz;
    if (i === 0 || iz > maxZ) maxZ = iz;
  }
  extent[0] = minX;
  extent[1] = maxX;
  extent[2] = minY;
  extent[3] = maxY;
  extent[4] = minZ;
  extent[5] = maxZ;
}

/**
 * Step 2 of `buildLayout`: a stable scatter of ids and vectors into their x slabs, next[⌊x·inv⌋ −
 * base] being the next free position of each slab (the grid x is found again, which costs less
 * than keeping it).
 */
function scatterSlabs(xyz: Float64Array, n: number, inv: number, base: number, next: Int32Array, sorted: Int32Array, sxyz: Float64Array): void {
  for (let i = 0; i < n; i++) {
    const x = xyz[3 * i];
    const s = next[Math.floor(x * inv) - base]++;
    sorted[s] = i;
    sxyz[3 * s] = x;
    sxyz[3 * s + 1] = xyz[3 * i + 1];
    sxyz[3 * s + 2] = xyz[3 * i + 2];
  }
}

/** Buffers reused by every slab of `buildLayout`, grown to the largest slab. */
class SlabScratch {
  private ids = new Int32Array(0);
  private ly = new Int32Array(0);
  private lz = new Int32Array(0);
  private tmp = new Int32Array(0);
  private perm = new Int32Array(0);
  private vec = new Float64Array(0);
  private readonly count: Int32Array;

  constructor(maxRange: number) {
    this.count = new Int32Array(maxRange + 1);
  }

  /**
   * Reads off the cells of the slab at positions b0..b1, last sorted by `sortSlab`: each run of
   * equal (y, z) is a cell, numbered from `cells` on, with grid x `ix`. Returns the cell count
   * after the slab.
   */
  readCells(b0: number, b1: number, ix: number, cells: number, cellStart: Int32Array, cx: Int32Array, cy: Int32Array, cz: Int32Array): number {
    const { perm, ly, lz } = this;
    let py = 0, pz = 0;
    for (let t = 0; t < b1 - b0; t++) {
      const j = perm[t];
      const iy = ly[j], iz = lz[j];
      if (t === 0 || iy !== py || iz !== pz) {
        cx[cells] = ix;
        cy[cells] = py = iy;
        cz[cells] = pz = iz;
        cellStart[cells] = b0 + t;
        cells++;
      }
    }
    return cells;
  }

  /**
   * Sorts one x slab, positions b0..b1 of `sorted` (ids ascending) and of `sxyz`, by (y, z, id)
   * in place, leaving the slab's local order in `perm` (perm[t] = the slab-local index now at
   * b0 + t) and the grid y and z of every slab-local index in `ly` and `lz`.
   */
  sortSlab(sorted: Int32Array, sxyz: Float64Array, b0: number, b1: number, inv: number): void {
    const m = b1 - b0;
    if (this.ids.length < m) {
      const size = Math.max(m, 2 * this.ids.length);
      this.ids = new Int32Array(size);
      this.ly = new Int32Array(size);
      this.lz = new Int32Array(size);
      this.tmp = new Int32Array(size);
      this.perm = new Int32Array(size);
      this.vec = new Float64Array(3 * size);
    }
    const { ids, ly, lz, tmp, perm, vec } = this;
    let y0 = Infinity, y1 = -Infinity, z0 = Infinity, z1 = -Infinity;
    for (let j = 0; j < m; j++) {
      const k = b0 + j;
      const y = Math.floor(sxyz[3 * k + 1] * inv);
      const z = Math.floor(sxyz[3 * k + 2] * inv);
      ids[j] = sorted[k];
      ly[j] = y;
      lz[j] = z;
      if (y < y0) y0 = y;
      if (y > y1) y1 = y;
      if (z < z0) z0 = z;
      if (z > z1) z1 = z;
    }
    const rangeY = y1 - y0 + 1, rangeZ = z1 - z0 + 1;
    if (m === 1) {
      perm[0] = 0;
      return;
    }
    if (rangeY + rangeZ > 4 * m + 64) {
      // a sparse slab: counting over its extent would cost more than comparing
      const local = perm.subarray(0, m);
      for (let j = 0; j < m; j++) local[j] = j;
      local.sort((a, b) => ly[a] - ly[b] || lz[a] - lz[b] || ids[a] - ids[b]);
    } else {
      // stable by z into tmp, then stable by y into perm (slab-local indices, ids ascending)
      const count = this.count;
      count.fill(0, 0, rangeZ + 1);
      for (let j = 0; j < m; j++) count[lz[j] - z0 + 1]++;
      for (let q = 0; q < rangeZ; q++) count[q + 1] += count[q];
      for (let j = 0; j < m; j++) tmp[count[lz[j] - z0]++] = j;
      count.fill(0, 0, rangeY + 1);
      for (let j = 0; j < m; j++) count[ly[j] - y0 + 1]++;
      for (let q = 0; q < rangeY; q++) count[q + 1] += count[q];
      for (let t = 0; t < m; t++) {
        const j = tmp[t];
        perm[count[ly[j] - y0]++] = j;
      }
    }
    vec.set(sxyz.subarray(3 * b0, 3 * b1));
    for (let t = 0; t < m; t++) {
      const j = perm[t];
      const k = b0 + t;
      sorted[k] = ids[j];
      sxyz[3 * k] = vec[3 * j];
      sxyz[3 * k + 1] = vec[3 * j + 1];
      sxyz[3 * k + 2] = vec[3 * j + 2];
    }
  }
}

/**
 * Each cell's non-empty neighbour cells (itself included), ascending, by a sweep. Each cell gets
 * one numeric key, ascending in cell order, with a spare slot on both sides of every axis so
 * that x±1, y±1, z±1 never alias into a neighbouring column; comparisons are then one number
 * each. Keys stay below 2^53 (at most 2^17 + 3 values per axis), so they are exact. For each dx
 * in −1..1 the neighbours of cell (x, y, z) lie in the one run of cells from key (x+dx, y−1, z−1)
 * to key (x+dx, y+1, z+1); the run is read from a cursor that only moves forward as the sweep
 * advances, keeping the cells whose z is within 1 (the points lie on a surface, so the run holds
 * few others). The list is a view of a buffer grown by doubling; only its written part is touched.
 */
function neighbourCells(layout: Layout, cells: number, nbrStart: Int32Array): Int32Array {
  const { minX, minY, maxY, minZ, maxZ, cx, cy, cz } = layout;
  const ry = maxY - minY + 3;
  const rz = maxZ - minZ + 3;
  const key = new Float64Array(cells);
  for (let c = 0; c < cells; c++) key[c] = ((cx[c] - minX + 1) * ry + (cy[c] - minY + 1)) * rz + (cz[c] - minZ + 1);
  let buf = new Int32Array(Math.max(32, cells * 9));
  let len = 0;
  const cursor = new Int32Array(3);
  for (let c = 0; c < cells; c++) {
    const kc = key[c];
    const z = cz[c];
    if (len + 27 > buf.length) {
      const grown = new Int32Array(buf.length * 2);
      grown.set(buf);
      buf = grown;
    }
    for (let dx = -1; dx <= 1; dx++) {
      const mid = kc + dx * ry * rz;
      const lo = mid - rz - 1, hi = mid + rz + 1;
      let p = cursor[dx + 1];
      while (p < cells && key[p] < lo) p++;
      cursor[dx + 1] = p;
      for (let q = p; q < cells && key[q] <= hi; q++) {
        const dz = cz[q] - z;
        if (dz >= -1 && dz <= 1) buf[len++] = q;
      }
    }
    nbrStart[c + 1] = len;
  }
  return buf.subarray(0, len);
}

/** Lexicographic comparison of integer cell coordinates. */
function compareCell(ax: number, ay: number, az: number, bx: number, by: number, bz: number): number {
  return ax !== bx ? ax - bx : ay !== by ? ay - by : az - bz;
}

export class SphereIndex {
  /** number of indexed points */
  readonly n: number;
  /** the radius the index was built for, metres */
  readonly radiusMeters: number;
  /** squared chord of radius + tolerance: the inclusive neighbour test */
  readonly chord2: number;
  /** unit vectors in input order, stride 3 */
  readonly xyz: Float64Array;

  /** edge of a grid cell on the unit sphere's scale: cell (ix, iy, iz) holds the vectors with ⌊x / cellSize⌋ = ix, and so on */
  readonly cellSize: number;
  /** point ids sorted by cell (cells in lexicographic order of their grid coordinates); ascending id within a cell */
  readonly sorted: Int32Array;
  /*
   * The grid itself, exposed read-only for the tight loops of the clustering passes (they work
   * in sorted-position space, where neighbouring points sit close together in memory). A
   * "position" k is an index into `sorted`; point sorted[k] has its unit vector at sxyz[3k..3k+2].
   */
  /** unit vectors in `sorted` order, stride 3, for cache-friendly scans */
  readonly sxyz: Float64Array;
  /** cell id of each point (input order), filled on first use (the clustering passes never need it) */
  get cellOf(): Int32Array {
    if (this.cellOfBuf === null) {
      const cellOf = new Int32Array(this.n);
      const { sorted, cellStart } = this;
      for (let c = 0; c < this.cellCount; c++) for (let k = cellStart[c]; k < cellStart[c + 1]; k++) cellOf[sorted[k]] = c;
      this.cellOfBuf = cellOf;
    }
    return this.cellOfBuf;
  }
  private cellOfBuf: Int32Array | null = null;
  /** cell c holds the positions cellStart[c] .. cellStart[c+1]-1 */
  readonly cellStart: Int32Array;
  /** cell c's non-empty neighbour cells (itself included), ascending, are nbr[nbrStart[c] .. nbrStart[c+1]) */
  readonly nbrStart: Int32Array;
  readonly nbr: Int32Array;
  /** integer grid coordinates per cell, cells in lexicographic order */
  readonly cx: Int32Array;
  readonly cy: Int32Array;
  readonly cz: Int32Array;
  /** number of non-empty cells */
  readonly cellCount: number;

  /**
   * @param points observations (degrees)
   * @param radiusMeters neighbourhood radius in metres (inclusive), > 0
   */
  constructor(points: PointSet, radiusMeters: number) {
    if (!(radiusMeters > 0) || !Number.isFinite(radiusMeters)) {
      throw new RangeError(`radius must be a positive number of metres, got ${radiusMeters}`);
    }
    const n = points.n;
    this.n = n;
    this.radiusMeters = radiusMeters;
    const chord = chordForMeters(radiusMeters + RADIUS_TOLERANCE_M);
    this.chord2 = chord * chord;
    this.cellSize = Math.max(chord, MIN_CELL);
    const xyz = unitVectors(points.lon, points.lat);
    this.xyz = xyz;

    // 1–3. points in cell order, their vectors copied in that order, and the cells
    const layout = buildLayout(xyz, n, 1 / this.cellSize);
    const { cx, cy, cz } = layout;
    const cells = layout.cx.length;
    this.cellCount = cells;
    this.cellStart = layout.cellStart;
    this.cx = cx;
    this.cy = cy;
    this.cz = cz;
    this.sorted = layout.sorted;
    this.sxyz = layout.sxyz;

    // 4. neighbour cells
    this.nbrStart = new Int32Array(cells + 1);
    this.nbr = neighbourCells(layout, cells, this.nbrStart);
  }

  /** Cell id of grid coordinates by binary search over the sorted cells, or EMPTY. */
  private lookup(ix: number, iy: number, iz: number): number {
    let lo = 0;
    let hi = this.cellCount - 1;
    while (lo <= hi) {
      const mid = (lo + hi) >>> 1;
      const cmp = compareCell(this.cx[mid], this.cy[mid], this.cz[mid], ix, iy, iz);
      if (cmp === 0) return mid;
      if (cmp < 0) lo = mid + 1;
      else hi = mid - 1;
    }
    return EMPTY;
  }

  /**
   * Calls `fn(j, chord2)` for every indexed point j within the radius of point i (i itself
   * included), in no particular but deterministic order. `chord2` is the squared chord on the
   * unit sphere; `metersForChord2` turns it into metres.
   */
  forEachWithin(i: number, fn: (j: number, chord2: number) => void): void {
    const x = this.xyz[3 * i];
    const y = this.xyz[3 * i + 1];
    const z = this.xyz[3 * i + 2];
    this.scan(this.cellOf[i], x, y, z, fn);
  }

  /**
   * Sums the weights (1 each when `weight` is null) of all points within the radius of point i,
   * itself included. The hot loop of DBSCAN's core test.
   */
  weightWithin(i: number, weight: Float64Array | null): number {
    const x = this.xyz[3 * i];
    const y = this.xyz[3 * i + 1];
    const z = this.xyz[3 * i + 2];
    const c = this.cellOf[i];
    const r2 = this.chord2;
    const sxyz = this.sxyz;
    const sorted = this.sorted;
    let sum = 0;
    for (let a = this.nbrStart[c], aEnd = this.nbrStart[c + 1]; a < aEnd; a++) {
      const d = this.nbr[a];
      for (let k = this.cellStart[d], kEnd = this.cellStart[d + 1]; k < kEnd; k++) {
        const dx = sxyz[3 * k] - x;
        const dy = sxyz[3 * k + 1] - y;
        const dz = sxyz[3 * k + 2] - z;
        if (dx * dx + dy * dy + dz * dz <= r2) sum += weight === null ? 1 : weight[sorted[k]];
      }
    }
    return sum;
  }

  /**
   * Calls `fn(j, chord2)` for every indexed point within the radius of an arbitrary position
   * (degrees), for example a new observation checked against stored hotspots.
   */
  forEachNear(lon: number, lat: number, fn: (j: number, chord2: number) => void): void {
    const v = unitVectors(Float64Array.of(lon), Float64Array.of(lat));
    const inv = 1 / this.cellSize;
    const ix = Math.floor(v[0] * inv);
    const iy = Math.floor(v[1] * inv);
    const iz = Math.floor(v[2] * inv);
    for (let dx = -1; dx <= 1; dx++) {
      for (let dy = -1; dy <= 1; dy++) {
        for (let dz = -1; dz <= 1; dz++) {
          const d = this.lookup(ix + dx, iy + dy, iz + dz);
          if (d !== EMPTY) this.scanCell(d, v[0], v[1], v[2], fn);
        }
      }
    }
  }

  private scan(c: number, x: number, y: number, z: number, fn: (j: number, chord2: number) => void): void {
    for (let a = this.nbrStart[c], aEnd = this.nbrStart[c + 1]; a < aEnd; a++) this.scanCell(this.nbr[a], x, y, z, fn);
  }

  private scanCell(d: number, x: number, y: number, z: number, fn: (j: number, chord2: number) => void): void {
    const r2 = this.chord2;
    const sxyz = this.sxyz;
    for (let k = this.cellStart[d], kEnd = this.cellStart[d + 1]; k < kEnd; k++) {
      const dx = sxyz[3 * k] - x;
      const dy = sxyz[3 * k + 1] - y;
      const dz = sxyz[3 * k + 2] - z;
      const d2 = dx * dx + dy * dy + dz * dz;
      if (d2 <= r2) fn(this.sorted[k], d2);
    }
  }

  /** Ground distance in metres between indexed points i and j. */
  metersBetween(i: number, j: number): number {
    const xyz = this.xyz;
    const dx = xyz[3 * i] - xyz[3 * j];
    const dy = xyz[3 * i + 1] - xyz[3 * j + 1];
    const dz = xyz[3 * i + 2] - xyz[3 * j + 2];
    return metersForChord2(dx * dx + dy * dy + dz * dz);
  }
}
