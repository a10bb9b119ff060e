import { describe, expect, it } from 'vitest';
import { dbscan } from '../../src/core/dbscan.js';
import { haversineMeters } from '../../src/core/haversine.js';
import { extractDbscan, extractXi, optics, type OpticsResult } from '../../src/core/optics.js';
import { RADIUS_TOLERANCE_M } from '../../src/core/sphere-index.js';
import { pointSet, ROLE_BORDER, ROLE_CORE, ROLE_NOISE, type PointSet } from '../../src/core/types.js';
import {
  antimeridianSet,
  duplicatesSet,
  midLatitudeSet,
  PointBuilder,
  poleSet,
  rng,
  weightedSet,
} from '../reference/seeded.js';

const dist = (p: PointSet, i: number, j: number): number => haversineMeters(p.lon[i], p.lat[i], p.lon[j], p.lat[j]);

/** Brute-force core distance: the distance at which the sorted neighbourhood's weight reaches minPoints. */
function bruteCore(p: PointSet, i: number, minPoints: number, maxEps: number): number {
  const ds: [number, number][] = [];
  for (let j = 0; j < p.n; j++) ds.push([dist(p, i, j), p.weight ? p.weight[j] : 1]);
  ds.sort((a, b) => a[0] - b[0]);
  let sum = 0;
  for (const [d, w] of ds) {
    sum += w;
    if (sum >= minPoints) return d <= maxEps + RADIUS_TOLERANCE_M ? d : Infinity;
  }
  return Infinity;
}

/**
 * Textbook OPTICS with a linear scan for the next seed (no index, no heap), haversine distances.
 * source: Ankerst et al. 1999, Figures 5–7 (OPTICS, ExpandClusterOrder, OrderSeeds::update),
 * with the tie rule of this product: smaller reachability first, then smaller point id.
 */
function naiveOptics(p: PointSet, maxEps: number, minPoints: number): { order: number[]; reach: number[] } {
  const n = p.n;
  const reach = new Array<number>(n).fill(Infinity);
  const done = new Array<boolean>(n).fill(false);
  const inSeeds = new Array<boolean>(n).fill(false);
  const order: number[] = [];
  const expand = (q: number): void => {
    done[q] = true;
    inSeeds[q] = false;
    order.push(q);
    const cd = bruteCore(p, q, minPoints, maxEps);
    if (cd === Infinity) return;
    for (let o = 0; o < n; o++) {
      if (done[o]) continue;
      const d = dist(p, q, o);
      if (d > maxEps + RADIUS_TOLERANCE_M) continue;
      const r = Math.max(cd, d);
      if (!inSeeds[o] || r < reach[o]) {
        reach[o] = r;
        inSeeds[o] = true;
      }
    }
  };
  for (let s = 0; s < n; s++) {
    if (done[s]) continue;
    expand(s);
    for (;;) {
      let best = -1;
      for (let o = 0; o < n; o++) if (inSeeds[o] && (best < 0 || reach[o] < reach[best])) best = o;
      if (best < 0) break;
      expand(best);
    }
  }
  return { order, reach };
}

/** Brute-force DBSCAN core flags and the partition of core points (union of cores within eps). */
function bruteCorePartition(p: PointSet, eps: number, minPoints: number): { core: boolean[]; root: number[] } {
  const n = p.n;
  const core: boolean[] = [];
  for (let i = 0; i < n; i++) {
    let w = 0;
    for (let j = 0; j < n; j++) if (dist(p, i, j) <= eps + RADIUS_TOLERANCE_M) w += p.weight ? p.weight[j] : 1;
    core.push(w >= minPoints);
  }
  const parent = Array.from({ length: n }, (_, i) => i);
  const find = (i: number): number => (parent[i] === i ? i : (parent[i] = find(parent[i])));
  for (let i = 0; i < n; i++) {
    if (!core[i]) continue;
    for (let j = i + 1; j < n; j++) {
      if (core[j] && dist(p, i, j) <= eps + RADIUS_TOLERANCE_M) {
        const a = find(i), b = find(j);
        parent[Math.max(a, b)] = Math.min(a, b);
      }
    }
  }
  return { core, root: Array.from({ length: n }, (_, i) => (core[i] ? find(i) : -1)) };
}

function checkOrderingProperties(p: PointSet, res: OpticsResult): void {
  const seen = new Uint8Array(p.n);
  const pos = new Int32Array(p.n);
  res.order.forEach((id, k) => {
    seen[id]++;
    pos[id] = k;
  });
  expect(Array.from(seen).every((s) => s === 1)).toBe(true);
  for (let i = 0; i < p.n; i++) {
    const q = res.predecessor[i];
    if (q < 0) {
      expect(res.reachability[i]).toBe(Infinity);
      continue;
    }
    expect(pos[q]).toBeLessThan(pos[i]);
    // source: Ankerst et al. 1999, Definition 5 (reachability-distance)
    const expected = Math.max(res.coreDistance[q], dist(p, q, i));
    expect(res.reachability[i]).toBeCloseTo(expected, 5);
    expect(res.reachability[i]).toBeLessThanOrEqual(res.maxEpsMeters + RADIUS_TOLERANCE_M);
  }
}

describe('optics ordering', () => {
  const sets: [string, PointSet][] = [
    ['mid-latitude', midLatitudeSet(11)],
    ['pole', poleSet(12)],
    ['antimeridian', antimeridianSet(13)],
    ['duplicates', duplicatesSet(14)],
  ];
  for (const [name, p] of sets) {
    it(`lists every point once with consistent reachability (${name})`, () => {
      const res = optics(p, { maxEpsMeters: 400, minPoints: 5 });
      checkOrderingProperties(p, res);
    });
  }

  it('core distances equal brute force, unweighted and weighted', () => {
    for (const p of [midLatitudeSet(21), weightedSet(22), poleSet(23)]) {
      const res = optics(p, { maxEpsMeters: 250, minPoints: 6 });
      for (let i = 0; i < p.n; i++) {
        const b = bruteCore(p, i, 6, 250);
        if (b === Infinity) expect(res.coreDistance[i]).toBe(Infinity);
        else expect(res.coreDistance[i]).toBeCloseTo(b, 5);
      }
    }
  });

  it('matches a textbook OPTICS without index or heap (order and reachability)', () => {
    for (const p of [midLatitudeSet(31), antimeridianSet(32)]) {
      const res = optics(p, { maxEpsMeters: 300, minPoints: 5 });
      const ref = naiveOptics(p, 300, 5);
      expect(Array.from(res.order)).toEqual(ref.order);
      for (let i = 0; i < p.n; i++) {
        if (ref.reach[i] === Infinity) expect(res.reachability[i]).toBe(Infinity);
        else expect(res.reachability[i]).toBeCloseTo(ref.reach[i], 5);
      }
    }
  });

  it('breaks ties by smaller point id', () => {
    // six sightings at one spot: all reachabilities are 0, so the seed list must pop them by id;
    // two more at one other spot far away start a second run at their lowest id
    const p = pointSet([5, 5, 5, 5, 5, 5, 6, 6], [50, 50, 50, 50, 50, 50, 50, 50]);
    const reversed = pointSet([6, 6, 5, 5, 5, 5, 5, 5], [50, 50, 50, 50, 50, 50, 50, 50]);
    expect(Array.from(optics(p, { maxEpsMeters: 100, minPoints: 2 }).order)).toEqual([0, 1, 2, 3, 4, 5, 6, 7]);
    expect(Array.from(optics(reversed, { maxEpsMeters: 100, minPoints: 2 }).order)).toEqual([0, 1, 2, 3, 4, 5, 6, 7]);
    const a = optics(midLatitudeSet(41), { maxEpsMeters: 300, minPoints: 4 });
    const b = optics(midLatitudeSet(41), { maxEpsMeters: 300, minPoints: 4 });
    expect(Array.from(a.order)).toEqual(Array.from(b.order));
    expect(Array.from(a.predecessor)).toEqual(Array.from(b.predecessor));
  });

  it('reports progress up to 1 and rejects bad options', () => {
    const seen: number[] = [];
    optics(midLatitudeSet(5), { maxEpsMeters: 200, minPoints: 5, onProgress: (d) => seen.push(d) });
    expect(seen.length).toBeGreaterThan(1);
    expect(seen[seen.length - 1]).toBe(1);
    expect(() => optics(midLatitudeSet(5), { maxEpsMeters: 0, minPoints: 5 })).toThrow(/maxEpsMeters/);
    expect(() => optics(midLatitudeSet(5), { maxEpsMeters: 100, minPoints: 0 })).toThrow(/minPoints/);
  });

  it('handles an empty set and a single point', () => {
    expect(optics(pointSet([], []), { maxEpsMeters: 10, minPoints: 2 }).order.length).toBe(0);
    const one = optics(pointSet([1], [2]), { maxEpsMeters: 10, minPoints: 2 });
    expect(Array.from(one.order)).toEqual([0]);
    expect(one.coreDistance[0]).toBe(Infinity);
  });
});

describe('extractDbscan', () => {
  const cases: [string, PointSet, number, number][] = [
    ['mid-latitude', midLatitudeSet(51), 120, 5],
    ['pole', poleSet(52), 150, 6],
    ['antimeridian', antimeridianSet(53), 100, 4],
    ['weighted', weightedSet(54), 150, 8],
    ['duplicates', duplicatesSet(55), 80, 5],
  ];
  for (const [name, p, eps, minPoints] of cases) {
    it(`core points and their partition equal DBSCAN's at the same eps (${name})`, () => {
      // source: Ankerst et al. 1999, section 4.1: ExtractDBSCAN-Clustering equals DBSCAN up to border assignment
      const res = optics(p, { maxEpsMeters: 2 * eps, minPoints });
      const c = extractDbscan(res, eps);
      const ref = bruteCorePartition(p, eps, minPoints);
      const lowestCoreOfRoot = new Map<number, number>();
      const labelOfRoot = new Map<number, number>();
      for (let i = 0; i < p.n; i++) {
        expect(c.roles[i] === ROLE_CORE).toBe(ref.core[i]);
        if (!ref.core[i]) continue;
        const root = ref.root[i];
        if (!lowestCoreOfRoot.has(root)) lowestCoreOfRoot.set(root, i);
        // one label per brute-force component, and one component per label
        if (labelOfRoot.has(root)) expect(c.labels[i]).toBe(labelOfRoot.get(root));
        else labelOfRoot.set(root, c.labels[i]);
      }
      expect(new Set(labelOfRoot.values()).size).toBe(labelOfRoot.size);
      // and the product's own dbscan: same core points with the same hotspot numbers, same count
      const d = dbscan(p, { epsMeters: eps, minPoints });
      expect(d.count).toBe(c.count);
      for (let i = 0; i < p.n; i++) {
        expect(c.roles[i] === ROLE_CORE).toBe(d.roles[i] === ROLE_CORE);
        if (d.roles[i] === ROLE_CORE) expect(c.labels[i]).toBe(d.labels[i]);
      }
      expect(c.count).toBe(labelOfRoot.size);
      // numbering by the lowest core id, as dbscan numbers its hotspots
      const byLowest = [...lowestCoreOfRoot.entries()].sort((a, b) => a[1] - b[1]);
      byLowest.forEach(([root], k) => expect(labelOfRoot.get(root)).toBe(k));
      // borders sit within eps of a core point of their own hotspot; noise carries no hotspot
      for (let i = 0; i < p.n; i++) {
        if (c.roles[i] === ROLE_BORDER) {
          let ok = false;
          for (let j = 0; j < p.n && !ok; j++) ok = c.roles[j] === ROLE_CORE && c.labels[j] === c.labels[i] && dist(p, i, j) <= eps + 1e-6;
          expect(ok).toBe(true);
        } else if (c.roles[i] === ROLE_NOISE) {
          expect(c.labels[i]).toBe(-1);
        }
      }
    });
  }

  it('rejects eps above maxEps', () => {
    const res = optics(midLatitudeSet(6), { maxEpsMeters: 100, minPoints: 5 });
    expect(() => extractDbscan(res, 150)).toThrow(/maxEpsMeters/);
    expect(() => extractDbscan(res, 0)).toThrow(/eps/);
  });
});

/**
 * Nested density: a dense core (sigma 25 m) inside a looser disc (radius 700 m), and two separate
 * patches 6–8 km away, plus thin background over 12 km.
 */
function nestedSet(seed: number): { p: PointSet; group: number[] } {
  const r = rng(seed);
  const b = new PointBuilder();
  const group: number[] = [];
  const add = (g: number, before: number): void => {
    for (let k = before; k < b.lon.length; k++) group.push(g);
  };
  let m = 0;
  b.gaussian(r, 10, 45, 25, 120);
  add(0, m);
  m = b.lon.length;
  b.uniformDisc(r, 10, 45, 700, 160);
  add(1, m);
  m = b.lon.length;
  b.gaussian(r, 10.08, 45.02, 60, 100);
  add(2, m);
  m = b.lon.length;
  b.gaussian(r, 9.92, 44.97, 60, 100);
  add(3, m);
  m = b.lon.length;
  b.uniformDisc(r, 10, 45, 12000, 60);
  add(4, m);
  // shuffle points and groups together
  const idx = Array.from({ length: b.lon.length }, (_, i) => i);
  for (let i = idx.length - 1; i > 0; i--) {
    const j = r.int(i + 1);
    [idx[i], idx[j]] = [idx[j], idx[i]];
  }
  const p = pointSet(
    idx.map((i) => b.lon[i]),
    idx.map((i) => b.lat[i]),
  );
  return { p, group: idx.map((i) => group[i]) };
}

describe('extractXi', () => {
  it('finds the dense core inside the looser patch, and the separate patches', () => {
    for (const seed of [7, 8, 9]) {
      const { p, group } = nestedSet(seed);
      const res = optics(p, { maxEpsMeters: 3000, minPoints: 10 });
      const { clustering, clusters } = extractXi(res, { xi: 0.05 });
      const pos = new Int32Array(p.n);
      res.order.forEach((id, k) => (pos[id] = k));
      /** share of group g's points that lie in ξ cluster c */
      const share = (c: { start: number; end: number }, g: number): number => {
        let k = 0, t = 0;
        for (let i = 0; i < p.n; i++) {
          if (group[i] !== g) continue;
          t++;
          if (pos[i] >= c.start && pos[i] <= c.end) k++;
        }
        return k / t;
      };
      // the dense core on its own (at most a fringe of the looser patch)
      expect(clusters.some((c) => share(c, 0) > 0.95 && share(c, 1) < 0.3 && share(c, 2) === 0 && share(c, 3) === 0)).toBe(true);
      // its parent: the dense core with the looser patch around it, without the separate patches
      expect(clusters.some((c) => share(c, 0) > 0.95 && share(c, 1) > 0.9 && share(c, 2) === 0 && share(c, 3) === 0)).toBe(true);
      // each separate patch whole, alone
      for (const g of [2, 3]) {
        expect(clusters.some((c) => share(c, g) > 0.95 && [0, 1, 2, 3].every((h) => h === g || share(c, h) === 0))).toBe(true);
      }
      // flat labels never mix the three places (dense core + loose patch, east patch, west patch)
      const place = (g: number): number => (g <= 1 ? 0 : g);
      const placeOfLabel = new Map<number, number>();
      for (let i = 0; i < p.n; i++) {
        const l = clustering.labels[i];
        if (l < 0 || group[i] === 4) continue;
        if (placeOfLabel.has(l)) expect(placeOfLabel.get(l)).toBe(place(group[i]));
        else placeOfLabel.set(l, place(group[i]));
      }
      // most background points are noise
      let bgNoise = 0, bg = 0;
      for (let i = 0; i < p.n; i++) {
        if (group[i] !== 4) continue;
        bg++;
        if (clustering.labels[i] === -1) bgNoise++;
      }
      expect(bgNoise / bg).toBeGreaterThan(0.5);
    }
  });

  it('labels the leaf clusters only, leaving points of a parent in none of its children as noise, numbered by lowest point id', () => {
    const { p } = nestedSet(8);
    const res = optics(p, { maxEpsMeters: 3000, minPoints: 10 });
    const { clustering, clusters } = extractXi(res, { xi: 0.05 });
    const pos = new Int32Array(p.n);
    res.order.forEach((id, k) => (pos[id] = k));
    const inside = (a: { start: number; end: number }, b: { start: number; end: number }): boolean => a !== b && a.start >= b.start && a.end <= b.end;
    // the set has a parent (the dense core inside its looser patch), so there is something to leave out
    expect(clusters.some((c) => clusters.some((d) => inside(d, c)))).toBe(true);
    for (const c of clusters) {
      // source: scikit-learn `_extract_xi_labels`: a ξ cluster is labelled only when none of its
      // points is already labelled by a shorter one, i.e. it holds no other ξ cluster
      const isLeaf = !clusters.some((d) => inside(d, c));
      expect(c.label >= 0).toBe(isLeaf);
    }
    let leftover = 0;
    for (let i = 0; i < p.n; i++) {
      const leaf = clusters.find((c) => c.label >= 0 && pos[i] >= c.start && pos[i] <= c.end);
      expect(clustering.labels[i]).toBe(leaf ? leaf.label : -1);
      if (!leaf && clusters.some((c) => pos[i] >= c.start && pos[i] <= c.end)) leftover++;
      const role = clustering.labels[i] < 0 ? ROLE_NOISE : res.coreDistance[i] < Infinity ? ROLE_CORE : ROLE_BORDER;
      expect(clustering.roles[i]).toBe(role);
    }
    expect(leftover).toBeGreaterThan(0);
    // labels 0..count-1 first appear in increasing point id
    let next = 0;
    for (let i = 0; i < p.n; i++) {
      const l = clustering.labels[i];
      if (l === next) next++;
      else expect(l).toBeLessThan(next);
    }
    expect(next).toBe(clustering.count);
    for (const c of clusters) expect(c.end - c.start + 1).toBeGreaterThanOrEqual(10);
  });

  it('honours minClusterSize and rejects bad ξ', () => {
    const { p } = nestedSet(9);
    const res = optics(p, { maxEpsMeters: 3000, minPoints: 10 });
    const big = extractXi(res, { xi: 0.05, minClusterSize: 150 });
    for (const c of big.clusters) expect(c.end - c.start + 1).toBeGreaterThanOrEqual(150);
    expect(big.clustering.count).toBeLessThan(extractXi(res, { xi: 0.05 }).clustering.count);
    expect(() => extractXi(res, { xi: 0 })).toThrow(/xi/);
    expect(() => extractXi(res, { xi: 1.5 })).toThrow(/xi/);
    expect(() => extractXi(res, { xi: 0.1, minClusterSize: 1 })).toThrow(/minClusterSize/);
  });
});
