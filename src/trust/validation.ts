/**
 * Validation figures of a clustering: how well hotspots hold together and stand apart (internal:
 * silhouette, DBCV) and, when the observations carry known groups, how well hotspots recover them
 * (external: purity, Rand index, adjusted Rand index, NMI). Pure functions over typed arrays.
 *
 * Internal figures use ground (great-circle) distances in metres. Both are O(m²) in the number of
 * observations m they look at, so above VALIDATION_SAMPLE observations they are computed on a
 * seeded uniform sample of that many observations (noise included in the draw), the same sample
 * for both, as a sampled silhouette is usually computed (the distances among the sample only).
 *
 * Noise: the silhouette is taken over the observations in hotspots only (noise has no cluster to
 * sit in). DBCV counts noise as the paper does: noise takes part in no hotspot's figures, but the
 * hotspots' scores are weighted by their share of all observations, noise included, so a result
 * that leaves much as noise scores nearer 0.
 */
import { EARTH_RADIUS_M } from '../core/haversine.js';
import { sampleIds } from '../core/kdistance.js';
import type { PointSet } from '../core/types.js';

/** Observations above which silhouette and DBCV are computed on a seeded sample of this many. */
export const VALIDATION_SAMPLE = 2000;
/** Seed of that sample (fixed, so the same input gives the same figures). */
export const VALIDATION_SEED = 1987;

const RAD = Math.PI / 180;

/**
 * Ground distances in metres among the given observations, as a dense m × m matrix (row-major).
 * The same arithmetic as haversineMeters (src/core/haversine.ts), so each entry is bit for bit
 * its value, with the cosines computed once per observation because this loop runs m² / 2 times.
 */
export function groundDistances(points: PointSet, ids: ArrayLike<number>): Float64Array {
  const m = ids.length;
  const lat = new Float64Array(m);
  const lon = new Float64Array(m);
  const cos = new Float64Array(m);
  for (let k = 0; k < m; k++) {
    lat[k] = points.lat[ids[k]];
    lon[k] = points.lon[ids[k]];
    cos[k] = Math.cos(lat[k] * RAD);
  }
  const d = new Float64Array(m * m);
  for (let a = 0; a < m; a++) {
    for (let b = a + 1; b < m; b++) {
      const s1 = Math.sin(((lat[b] - lat[a]) * RAD) / 2);
      const s2 = Math.sin(((lon[b] - lon[a]) * RAD) / 2);
      const h = s1 * s1 + cos[a] * cos[b] * s2 * s2;
      const v = 2 * EARTH_RADIUS_M * Math.asin(Math.min(1, Math.sqrt(h)));
      d[a * m + b] = v;
      d[b * m + a] = v;
    }
  }
  return d;
}

/** Labels made dense: 0..k-1 in order of first appearance, noise (< 0) kept as −1. */
function dense(labels: ArrayLike<number>): { labels: Int32Array; count: number } {
  const map = new Map<number, number>();
  const out = new Int32Array(labels.length);
  for (let i = 0; i < labels.length; i++) {
    const l = labels[i];
    if (l < 0) {
      out[i] = -1;
      continue;
    }
    let v = map.get(l);
    if (v === undefined) map.set(l, (v = map.size));
    out[i] = v;
  }
  return { labels: out, count: map.size };
}

/**
 * Mean silhouette width (Rousseeuw 1987) from a distance matrix. Observations labelled < 0
 * (noise) are left out entirely. s(i) = (b − a) / max(a, b), where a is the mean distance to the
 * other members of i's own hotspot and b the smallest mean distance to the members of another
 * hotspot; s(i) = 0 for a member alone in its hotspot (Rousseeuw's convention) and where a = b = 0.
 *
 * @returns the mean over the observations in hotspots, or null with the reason when undefined
 *   (fewer than two hotspots, or every observation in a hotspot of its own)
 */
export function silhouetteFromDistances(d: Float64Array, labels: ArrayLike<number>): { value: number | null; reason?: string } {
  const m = labels.length;
  const { labels: lab, count } = dense(labels);
  const members: number[] = [];
  for (let i = 0; i < m; i++) if (lab[i] >= 0) members.push(i);
  if (count < 2) return { value: null, reason: 'fewer than two hotspots' };
  if (count >= members.length) return { value: null, reason: 'every observation is a hotspot of its own' };
  const size = new Float64Array(count);
  for (const i of members) size[lab[i]]++;
  const sums = new Float64Array(count);
  let total = 0;
  for (const i of members) {
    sums.fill(0);
    const row = i * m;
    for (const j of members) sums[lab[j]] += d[row + j];
    const own = lab[i];
    if (size[own] === 1) continue; // s(i) = 0
    const a = sums[own] / (size[own] - 1);
    let b = Infinity;
    for (let c = 0; c < count; c++) if (c !== own && sums[c] / size[c] < b) b = sums[c] / size[c];
    const top = Math.max(a, b);
    if (top > 0) total += (b - a) / top;
  }
  return { value: total / members.length };
}

/**
 * Density-Based Clustering Validation, DBCV (Moulavi, Jaskowiak, Campello, Zimek & Sander 2014),
 * from a distance matrix, with the dimension d of the all-points core distance.
 *
 * - all-points core distance of o in hotspot C (n_C members):
 *   (Σ over the other members x of (1 / dist(o, x))^d / (n_C − 1))^(−1/d); as in the hdbscan
 *   library's implementation, zero distances (exact duplicates) add nothing to the sum, and a
 *   member whose every other member sits at its position gets core distance 0;
 * - mutual reachability distance: max(core(a), core(b), dist(a, b));
 * - density sparseness DSC(C): the largest edge of the minimum spanning tree of C under mutual
 *   reachability among its internal edges (both ends of degree > 1); when the tree has no internal
 *   edge, the largest of all its edges (as the authors' own code and hdbscan do);
 * - density separation DSPC(Ci, Cj): the smallest mutual reachability distance between internal
 *   nodes of Ci and of Cj; a hotspot whose tree has no internal node (two members) uses all its
 *   members (our choice: the paper leaves it undefined);
 * - V(C) = (min_j DSPC(C, Cj) − DSC(C)) / max(min_j DSPC(C, Cj), DSC(C)), 0 when both are 0;
 *   a hotspot of one member has no density to judge and gets V = 0 (our choice);
 * - DBCV = Σ_C (n_C / n) V(C), where n counts every observation, noise included.
 *
 * @param d row-major distance matrix of all observations (noise included)
 * @param labels hotspot per observation, < 0 for noise
 * @param dim d in the core distance; 2 for positions on the Earth's surface
 * @returns the index in [−1, 1], the per-hotspot V (in order of first appearance), or null with a reason
 */
export function dbcvFromDistances(
  d: Float64Array,
  labels: ArrayLike<number>,
  dim = 2,
): { value: number | null; perHotspot: number[]; reason?: string } {
  const m = labels.length;
  const { labels: lab, count } = dense(labels);
  if (count < 2) return { value: null, perHotspot: [], reason: 'fewer than two hotspots' };
  const groups: number[][] = Array.from({ length: count }, () => []);
  for (let i = 0; i < m; i++) if (lab[i] >= 0) groups[lab[i]].push(i);

  const core = new Float64Array(m);
  for (const g of groups) {
    if (g.length < 2) continue;
    for (const o of g) {
      let s = 0;
      for (const x of g) {
        const v = d[o * m + x];
        if (x !== o && v > 0) s += Math.pow(1 / v, dim);
      }
      core[o] = s === 0 ? 0 : Math.pow(s / (g.length - 1), -1 / dim);
    }
  }
  const mreach = (a: number, b: number): number => Math.max(core[a], core[b], d[a * m + b]);

  const sparseness = new Float64Array(count);
  const internal: number[][] = [];
  for (let c = 0; c < count; c++) {
    const g = groups[c];
    if (g.length === 1) {
      internal.push(g);
      continue;
    }
    // Prim's algorithm on the complete graph of the hotspot under mutual reachability. Mutual
    // reachability ties often (every edge shorter than a core distance weighs that core distance),
    // and which of several minimum spanning trees is taken changes which nodes are internal. Edges
    // are therefore ordered strictly, by weight and then by their two ends' positions (lower end
    // first), which makes the tree unique: Kruskal's algorithm under the same order finds the same.
    const k = g.length;
    const inTree = new Uint8Array(k);
    const best = new Float64Array(k).fill(Infinity);
    const parent = new Int32Array(k).fill(-1);
    const degree = new Int32Array(k);
    const edges: [number, number, number][] = [];
    /** whether edge (p, v) comes before edge (q, v) in the strict order, both of weight w */
    const before = (p: number, q: number, v: number): boolean => {
      if (q < 0) return true;
      const lo1 = Math.min(p, v), hi1 = Math.max(p, v), lo2 = Math.min(q, v), hi2 = Math.max(q, v);
      return lo1 < lo2 || (lo1 === lo2 && hi1 < hi2);
    };
    const edgeBefore = (u: number, v: number): boolean => {
      if (best[u] !== best[v]) return best[u] < best[v];
      if (parent[u] < 0 || parent[v] < 0) return parent[u] < 0 && parent[v] >= 0;
      const lu = Math.min(parent[u], u), hu = Math.max(parent[u], u), lv = Math.min(parent[v], v), hv = Math.max(parent[v], v);
      return lu < lv || (lu === lv && hu < hv);
    };
    best[0] = 0;
    for (let step = 0; step < k; step++) {
      let u = -1;
      for (let v = 0; v < k; v++) if (!inTree[v] && (u < 0 || edgeBefore(v, u))) u = v;
      inTree[u] = 1;
      if (parent[u] >= 0) {
        edges.push([parent[u], u, best[u]]);
        degree[parent[u]]++;
        degree[u]++;
      }
      for (let v = 0; v < k; v++) {
        if (inTree[v]) continue;
        const w = mreach(g[u], g[v]);
        if (w < best[v] || (w === best[v] && before(u, parent[v], v))) {
          best[v] = w;
          parent[v] = u;
        }
      }
    }
    let dsc = -Infinity;
    for (const [a, b, w] of edges) if (degree[a] > 1 && degree[b] > 1 && w > dsc) dsc = w;
    if (dsc === -Infinity) for (const [, , w] of edges) if (w > dsc) dsc = w;
    sparseness[c] = dsc;
    const inner = g.filter((_, i) => degree[i] > 1);
    internal.push(inner.length > 0 ? inner : g);
  }

  const perHotspot: number[] = [];
  const n = m;
  let value = 0;
  for (let c = 0; c < count; c++) {
    if (groups[c].length === 1) {
      perHotspot.push(0);
      continue;
    }
    let sep = Infinity;
    for (let e = 0; e < count; e++) {
      if (e === c) continue;
      for (const a of internal[c]) for (const b of internal[e]) {
        const w = mreach(a, b);
        if (w < sep) sep = w;
      }
    }
    const top = Math.max(sep, sparseness[c]);
    const v = top > 0 ? (sep - sparseness[c]) / top : 0;
    perHotspot.push(v);
    value += (groups[c].length / n) * v;
  }
  return { value, perHotspot };
}

/** The internal figures of a result, as they are written in its summary. */
export interface InternalFigures {
  /** observations the figures were computed on (all of them, or the sample) */
  observations: number;
  /** true when a seeded sample was used */
  sampled: boolean;
  silhouette: number | null;
  dbcv: number | null;
  /** why a figure is null */
  notComputed: { silhouette?: string; dbcv?: string };
}

/**
 * Silhouette and DBCV of a clustering on the sphere: exact up to `sampleSize` observations,
 * else on a seeded uniform sample of that many (noise included in the draw).
 *
 * @param points all clustered observations (degrees)
 * @param labels hotspot per observation, −1 for noise
 * @param sampleSize largest number of observations used (default VALIDATION_SAMPLE)
 * @param seed seed of the sample (default VALIDATION_SEED)
 */
export function internalFigures(points: PointSet, labels: Int32Array, sampleSize = VALIDATION_SAMPLE, seed = VALIDATION_SEED): InternalFigures {
  const n = points.n;
  const sampled = n > sampleSize;
  let ids: Int32Array;
  if (sampled) ids = sampleIds(n, sampleSize, seed);
  else {
    ids = new Int32Array(n);
    for (let i = 0; i < n; i++) ids[i] = i;
  }
  const lab = new Int32Array(ids.length);
  for (let k = 0; k < ids.length; k++) lab[k] = labels[ids[k]];
  const d = groundDistances(points, ids);
  const s = silhouetteFromDistances(d, lab);
  const v = dbcvFromDistances(d, lab, 2);
  const notComputed: InternalFigures['notComputed'] = {};
  if (s.reason) notComputed.silhouette = s.reason + (sampled ? ' in the sample' : '');
  if (v.reason) notComputed.dbcv = v.reason + (sampled ? ' in the sample' : '');
  return { observations: ids.length, sampled, silhouette: s.value, dbcv: v.value, notComputed };
}

// ---------------------------------------------------------------------------------------------
// External figures: a clustering against known groups

/** Figures of one clustering against a reference grouping. */
export interface AgreementFigures {
  /** observations compared */
  observations: number;
  /** groups on the clustering side and on the reference side */
  clusters: number;
  classes: number;
  /** share of observations whose hotspot's majority reference value is their own (Manning et al. 2008, §16.3) */
  purity: number | null;
  /** share of pairs on which the two groupings agree (together in both or apart in both) */
  randIndex: number | null;
  /** Rand index corrected for chance (Hubert & Arabie 1985); 0 expected at random, 1 identical */
  adjustedRandIndex: number | null;
  /** mutual information over the arithmetic mean of the two entropies */
  nmi: number | null;
}

/**
 * Contingency counts of two label arrays (each label any integer), as a sparse table keyed by
 * numbers: both sides are first made dense (0..k-1), so a cell's key is row × columns + column.
 */
function contingency(a: ArrayLike<number>, b: ArrayLike<number>): { cells: Map<number, number>; rows: number[]; cols: number[] } {
  const n = a.length;
  const da = new Int32Array(n);
  const db = new Int32Array(n);
  const ia = new Map<number, number>();
  const ib = new Map<number, number>();
  for (let i = 0; i < n; i++) {
    let x = ia.get(a[i]);
    if (x === undefined) ia.set(a[i], (x = ia.size));
    da[i] = x;
    let y = ib.get(b[i]);
    if (y === undefined) ib.set(b[i], (y = ib.size));
    db[i] = y;
  }
  const rows = new Array<number>(ia.size).fill(0);
  const cols = new Array<number>(ib.size).fill(0);
  const cells = new Map<number, number>();
  const width = ib.size;
  for (let i = 0; i < n; i++) {
    rows[da[i]]++;
    cols[db[i]]++;
    const key = da[i] * width + db[i];
    cells.set(key, (cells.get(key) ?? 0) + 1);
  }
  return { cells, rows, cols };
}

const pairs = (x: number): number => (x * (x - 1)) / 2;

/**
 * Agreement of a clustering with a reference grouping over the same observations. Both are given
 * as integer labels; every distinct value is a group (so a noise label, if present, is a group).
 *
 * Conventions where a figure is otherwise 0/0, as scikit-learn has them: ARI and the Rand index
 * are 1 when the two groupings agree on every pair; NMI is 1 when both put everything in one group.
 */
export function agreement(clusters: ArrayLike<number>, classes: ArrayLike<number>): AgreementFigures {
  const n = clusters.length;
  if (classes.length !== n) throw new Error(`agreement: ${n} clusters for ${classes.length} classes`);
  const { cells, rows, cols } = contingency(clusters, classes);
  if (n === 0) return { observations: 0, clusters: 0, classes: 0, purity: null, randIndex: null, adjustedRandIndex: null, nmi: null };

  const width = cols.length;
  // purity: for each cluster the count of its most frequent class
  const majority = new Array<number>(rows.length).fill(0);
  for (const [key, c] of cells) {
    const k = Math.floor(key / width);
    if (c > majority[k]) majority[k] = c;
  }
  let pure = 0;
  for (const c of majority) pure += c;

  // pair counts
  let sumCells = 0;
  for (const c of cells.values()) sumCells += pairs(c);
  let sumRows = 0;
  for (const c of rows) sumRows += pairs(c);
  let sumCols = 0;
  for (const c of cols) sumCols += pairs(c);
  const total = pairs(n);
  // together in both, together in the clustering only, in the reference only, apart in both
  const tp = sumCells;
  const fp = sumRows - sumCells;
  const fn = sumCols - sumCells;
  const tn = total - tp - fp - fn;
  const randIndex = total === 0 ? 1 : (tp + tn) / total;
  // Hubert & Arabie's ARI in the pair-count form (the same value as (index − expected) / (max − expected))
  const adjustedRandIndex = fn === 0 && fp === 0 ? 1 : (2 * (tp * tn - fn * fp)) / ((tp + fn) * (fn + tn) + (tp + fp) * (fp + tn));

  // mutual information and entropies, natural logarithms (the base cancels in NMI)
  let nmi: number;
  if (rows.length === 1 && cols.length === 1) nmi = 1;
  else {
    let mi = 0;
    for (const [key, c] of cells) {
      const r = rows[Math.floor(key / width)];
      const s = cols[key % width];
      mi += (c / n) * Math.log((c * n) / (r * s));
    }
    const entropy = (m: number[]): number => {
      let h = 0;
      for (const c of m) h -= (c / n) * Math.log(c / n);
      return h;
    };
    const mean = (entropy(rows) + entropy(cols)) / 2;
    nmi = mi <= 0 || mean === 0 ? 0 : Math.min(1, mi / mean);
  }
  return { observations: n, clusters: rows.length, classes: cols.length, purity: pure / n, randIndex, adjustedRandIndex, nmi };
}

/** One hotspot's majority reference value and its share of the members that have a value. */
export interface HotspotReference {
  majority: string | null;
  share: number | null;
}

/** The reference figures of a result, as they are written in its summary. */
export interface ReferenceFigures {
  property: string;
  /** observations with a reference value, and without one (left out of every figure) */
  labelled: number;
  unlabelled: number;
  /** hotspots against the reference, observations in no hotspot left out */
  noiseExcluded: AgreementFigures;
  /** every labelled observation, noise counted as one more group */
  noiseAsGroup: AgreementFigures;
  /** per hotspot, by hotspot number (0-based) */
  hotspots: HotspotReference[];
}

/**
 * External figures of a clustering against the values of a reference property.
 *
 * @param labels hotspot per observation (0..count-1), −1 for noise
 * @param count number of hotspots
 * @param values the reference value per observation (as text), null where it has none
 */
export function referenceFigures(property: string, labels: Int32Array, count: number, values: readonly (string | null)[]): ReferenceFigures {
  const code = new Map<string, number>();
  const classOf = new Int32Array(values.length);
  let labelled = 0;
  for (let i = 0; i < values.length; i++) {
    const v = values[i];
    if (v === null) {
      classOf[i] = -1;
      continue;
    }
    labelled++;
    let c = code.get(v);
    if (c === undefined) code.set(v, (c = code.size));
    classOf[i] = c;
  }
  const names = [...code.keys()];
  let inHotspots = 0;
  for (let i = 0; i < labels.length; i++) if (labels[i] >= 0 && classOf[i] >= 0) inHotspots++;
  const exA = new Int32Array(inHotspots);
  const exB = new Int32Array(inHotspots);
  const allA = new Int32Array(labelled);
  const allB = new Int32Array(labelled);
  const counts: Map<number, number>[] = Array.from({ length: count }, () => new Map());
  for (let i = 0, e = 0, a = 0; i < labels.length; i++) {
    if (classOf[i] < 0) continue;
    allA[a] = labels[i] < 0 ? -1 : labels[i];
    allB[a++] = classOf[i];
    if (labels[i] >= 0) {
      exA[e] = labels[i];
      exB[e++] = classOf[i];
      const m = counts[labels[i]];
      m.set(classOf[i], (m.get(classOf[i]) ?? 0) + 1);
    }
  }
  const hotspots = counts.map((m): HotspotReference => {
    let best = -1;
    let bestCount = 0;
    let with_ = 0;
    for (const [c, k] of m) {
      with_ += k;
      // ties go to the value first in code-unit order, so the answer does not hang on input order
      if (k > bestCount || (k === bestCount && names[c] < names[best])) {
        best = c;
        bestCount = k;
      }
    }
    return best < 0 ? { majority: null, share: null } : { majority: names[best], share: bestCount / with_ };
  });
  return {
    property,
    labelled,
    unlabelled: values.length - labelled,
    noiseExcluded: agreement(exA, exB),
    noiseAsGroup: agreement(allA, allB),
    hotspots,
  };
}
