/**
 * A static k-d tree over unit vectors, for k-nearest-neighbour questions on the sphere (the
 * k-distance curve, nearest-neighbour distances for Clark–Evans).
 *
 * Working on 3-D unit vectors makes the poles and ±180° ordinary places, and it is exact: the
 * chord between two unit vectors grows monotonically with their great-circle distance, so the
 * nearest by chord is the nearest on the ground. The tree is stored kdbush-style as one
 * permutation: the node over positions left..right has its median at m = (left + right) >> 1,
 * children over left..m−1 and m+1..right, and its split axis at `axis[m]`. Each node splits its
 * widest axis: points on a small patch of the sphere lie almost in a plane, and a fixed x, y, z
 * rotation would waste a third of the splits across that plane's thin direction.
 */

/** Ranges this short are scanned instead of split. */
const LEAF_SIZE = 12;

export class ChordTree {
  readonly n: number;
  /** point id at each tree position */
  private readonly ids: Int32Array;
  /** unit vectors in tree order, stride 3 */
  private readonly coords: Float64Array;
  /** split axis (0 x, 1 y, 2 z) of the node whose median sits at this position */
  private readonly axis: Uint8Array;
  /** unit vectors in input order */
  private readonly src: Float64Array;

  // search state, kept in fields so the recursion passes only the range
  private qx = 0;
  private qy = 0;
  private qz = 0;
  private self = -1;
  private k = 1;
  private filled = 0;
  /** the k smallest squared chords found so far, ascending */
  private best = new Float64Array(16);
  /** point id of best[0] */
  private bestId = -1;

  /** @param xyz unit vectors, stride 3 (see `unitVectors`) */
  constructor(xyz: Float64Array) {
    const n = xyz.length / 3;
    this.n = n;
    this.src = xyz;
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
   * left..right so that position k holds the value it would have if sorted on axis `a`, smaller or
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
    const a = 3 * i, b = 3 * j;
    const x = c[a], y = c[a + 1], z = c[a + 2];
    c[a] = c[b];
    c[a + 1] = c[b + 1];
    c[a + 2] = c[b + 2];
    c[b] = x;
    c[b + 1] = y;
    c[b + 2] = z;
  }

  /**
   * Squared chord from point i (input order) to its k-th nearest other point; exact duplicates
   * count as other points at 0. Infinity when fewer than k other points exist.
   */
  kthChord2(i: number, k: number): number {
    this.query(this.src[3 * i], this.src[3 * i + 1], this.src[3 * i + 2], i, k);
    return this.filled < k ? Infinity : this.best[k - 1];
  }

  /**
   * Squared chord from every point to its k-th nearest other point, in input order. Queries run
   * in tree order, so consecutive queries are neighbours and walk the same nodes.
   */
  kthChord2All(k: number): Float64Array {
    const out = new Float64Array(this.n);
    const c = this.coords;
    for (let t = 0; t < this.n; t++) {
      this.query(c[3 * t], c[3 * t + 1], c[3 * t + 2], this.ids[t], k);
      out[this.ids[t]] = this.filled < k ? Infinity : this.best[k - 1];
    }
    return out;
  }

  /**
   * Squared chord from every point to its nearest other point, in input order; the same values
   * as `kthChord2All(1)` (exact duplicates give 0, a lone point Infinity). The search is the same
   * branch-and-bound, written for k = 1 without recursion: the far side of a split goes on an
   * explicit stack with its squared distance to the splitting plane and is skipped when popped
   * if the best distance found by then is no larger. Each pop descends nearer side first, so the
   * stack holds at most one entry per tree level.
   */
  nearestChord2All(): Float64Array {
    const n = this.n;
    const out = new Float64Array(n);
    const c = this.coords;
    const ids = this.ids;
    const axis = this.axis;
    const stackLeft = new Int32Array(64);
    const stackRight = new Int32Array(64);
    const stackPlane2 = new Float64Array(64);
    for (let t = 0; t < n; t++) {
      const qx = c[3 * t], qy = c[3 * t + 1], qz = c[3 * t + 2];
      let best = Infinity;
      let sp = 0;
      stackLeft[0] = 0;
      stackRight[0] = n - 1;
      stackPlane2[0] = 0;
      sp = 1;
      while (sp > 0 && best !== 0) {
        sp--;
        if (stackPlane2[sp] >= best) continue;
        let left = stackLeft[sp];
        let right = stackRight[sp];
        while (left <= right) {
          if (right - left < LEAF_SIZE) {
            for (let a = left; a <= right; a++) {
              if (a === t) continue;
              const dx = c[3 * a] - qx, dy = c[3 * a + 1] - qy, dz = c[3 * a + 2] - qz;
              const d2 = dx * dx + dy * dy + dz * dz;
              if (d2 < best) best = d2;
            }
            break;
          }
          const m = (left + right) >> 1;
          if (m !== t) {
            const dx = c[3 * m] - qx, dy = c[3 * m + 1] - qy, dz = c[3 * m + 2] - qz;
            const d2 = dx * dx + dy * dy + dz * dz;
            if (d2 < best) best = d2;
          }
          const a = axis[m];
          const side = (a === 0 ? qx : a === 1 ? qy : qz) - c[3 * m + a];
          if (side <= 0) {
            if (m + 1 <= right) {
              stackLeft[sp] = m + 1;
              stackRight[sp] = right;
              stackPlane2[sp++] = side * side;
            }
            right = m - 1;
          } else {
            if (left <= m - 1) {
              stackLeft[sp] = left;
              stackRight[sp] = m - 1;
              stackPlane2[sp++] = side * side;
            }
            left = m + 1;
          }
        }
      }
      out[ids[t]] = best;
    }
    return out;
  }

  private query(x: number, y: number, z: number, self: number, k: number): void {
    this.qx = x;
    this.qy = y;
    this.qz = z;
    this.self = self;
    this.k = k;
    if (this.best.length < k) this.best = new Float64Array(k);
    this.filled = 0;
    this.bestId = -1;
    if (this.n > 0) this.search(0, this.n - 1);
  }

  /**
   * The point nearest to an arbitrary unit vector (for example a new observation's), with its
   * squared chord; index −1 and Infinity when the tree is empty. Of equally near points, the one
   * the search meets first.
   */
  nearestTo(x: number, y: number, z: number): { index: number; chord2: number } {
    this.query(x, y, z, -1, 1);
    return this.filled === 0 ? { index: -1, chord2: Infinity } : { index: this.bestId, chord2: this.best[0] };
  }

  /** Worst of the kept distances, Infinity while fewer than k are kept. */
  private bound(): number {
    return this.filled < this.k ? Infinity : this.best[this.k - 1];
  }

  private offer(a: number): void {
    if (this.ids[a] === this.self) return;
    const dx = this.coords[3 * a] - this.qx;
    const dy = this.coords[3 * a + 1] - this.qy;
    const dz = this.coords[3 * a + 2] - this.qz;
    const d2 = dx * dx + dy * dy + dz * dz;
    if (d2 >= this.bound()) return;
    // insertion into the short sorted list of the k best
    const best = this.best;
    let p = this.filled < this.k ? this.filled++ : this.k - 1;
    while (p > 0 && best[p - 1] > d2) {
      best[p] = best[p - 1];
      p--;
    }
    best[p] = d2;
    if (p === 0) this.bestId = this.ids[a];
  }

  private search(left: number, right: number): void {
    if (this.bound() === 0) return; // k identical positions found: nothing can be nearer
    if (right - left < LEAF_SIZE) {
      for (let a = left; a <= right; a++) this.offer(a);
      return;
    }
    const m = (left + right) >> 1;
    this.offer(m);
    const a = this.axis[m];
    // signed distance from the query to the splitting plane along axis a; the far side is
    // searched only when that plane is nearer than the k-th best
    const side = (a === 0 ? this.qx : a === 1 ? this.qy : this.qz) - this.coords[3 * m + a];
    if (side <= 0) {
      if (left <= m - 1) this.search(left, m - 1);
      if (side * side < this.bound() && m + 1 <= right) this.search(m + 1, right);
    } else {
      if (m + 1 <= right) this.search(m + 1, right);
      if (side * side < this.bound() && left <= m - 1) this.search(left, m - 1);
    }
  }
}
