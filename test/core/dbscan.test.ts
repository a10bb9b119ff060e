import { createRequire } from 'node:module';
import { describe, expect, it } from 'vitest';
import { dbscan } from '../../src/core/dbscan.js';
import { EARTH_RADIUS_M, haversineMeters } from '../../src/core/haversine.js';
import { SphereIndex } from '../../src/core/sphere-index.js';
import { ROLE_BORDER, ROLE_CORE, ROLE_NOISE, pointSet, type Clustering, type PointSet } from '../../src/core/types.js';
import { bruteDbscan } from '../reference/brute-dbscan.js';
import {
  PointBuilder,
  antimeridianSet,
  destination,
  duplicatesSet,
  highLatitudeSet,
  midLatitudeSet,
  patchesSet,
  poleSet,
  rng,
  weightedSet,
} from '../reference/seeded.js';

/** The subset of density-clustering's DBSCAN class used here (the package ships no types). */
interface DensityDbscan {
  run(data: number[][], eps: number, minPts: number, distance: (a: number[], b: number[]) => number): number[][];
  _regionQuery(pointId: number): number[];
}
const require = createRequire(import.meta.url);
const { DBSCAN: DensityDBSCAN } = require('density-clustering') as { DBSCAN: new () => DensityDbscan };

/** Longitude in degrees of a point `meters` east of 0° on the equator. */
const eastDegrees = (meters: number): number => (meters / EARTH_RADIUS_M) * (180 / Math.PI);

/** Index of the first point whose label or role differs, or −1. */
function firstDifference(a: Clustering, b: Clustering): number {
  for (let i = 0; i < a.labels.length; i++) if (a.labels[i] !== b.labels[i] || a.roles[i] !== b.roles[i]) return i;
  return -1;
}

function expectSame(p: PointSet, epsMeters: number, minPoints: number): Clustering {
  const ours = dbscan(p, { epsMeters, minPoints });
  // source: brute-force DBSCAN (test/reference/brute-dbscan.ts) after Ester et al. (1996)
  const ref = bruteDbscan(p, epsMeters, minPoints);
  expect({ eps: epsMeters, minPoints, count: ours.count, first: firstDifference(ours, ref) }).toEqual({
    eps: epsMeters,
    minPoints,
    count: ref.count,
    first: -1,
  });
  return ours;
}

/** Guards against a vacuous comparison: the set must produce hotspots, borders and noise. */
function expectMixed(c: Clustering): void {
  const seen = new Set(c.roles);
  expect(c.count).toBeGreaterThan(1);
  expect([...seen].sort()).toEqual([ROLE_NOISE, ROLE_CORE, ROLE_BORDER]);
}

describe('dbscan against the brute-force reference', () => {
  const sets: Array<[string, (seed: number) => PointSet]> = [
    ['mid latitude', midLatitudeSet],
    ['80° N', highLatitudeSet],
    ['North Pole', poleSet],
    ['antimeridian', antimeridianSet],
    ['weighted', weightedSet],
    ['duplicates', duplicatesSet],
  ];
  for (const [name, make] of sets) {
    it(`gives the same labels and roles on the ${name} set`, () => {
      for (const seed of [1, 2]) {
        const p = make(seed);
        for (const [eps, minPts] of [
          [60, 4],
          [150, 5],
          [300, 10],
        ]) {
          const c = expectSame(p, eps, minPts);
          if (eps === 150) expectMixed(c);
        }
      }
    });
  }

  it('keeps hotspots that straddle ±180° and the pole in one piece', () => {
    const anti = new PointBuilder().gaussian(rng(21), 180, 10, 100, 80).build();
    const a = expectSame(anti, 120, 5);
    const sides = new Set<number>();
    for (let i = 0; i < anti.n; i++) if (a.labels[i] === 0) sides.add(Math.sign(anti.lon[i]));
    expect(sides).toEqual(new Set([-1, 1]));
    expect(a.count).toBe(1);
    const pole = new PointBuilder().gaussian(rng(22), 0, 89.999, 150, 80).build();
    const b = expectSame(pole, 150, 5);
    expect(b.count).toBe(1);
  });

  it('counts a point at exactly eps as a neighbour', () => {
    // a centre with four points at exactly 100 m: with min_points 5 (itself included) it is core
    const b = new PointBuilder().add(-3.7, 40.4);
    for (const bearing of [0, 1.3, 2.9, 4.4]) {
      const [x, y] = destination(-3.7, 40.4, bearing, 100);
      b.add(x, y);
    }
    const p = b.build();
    for (let j = 1; j < p.n; j++) expect(Math.abs(haversineMeters(p.lon[0], p.lat[0], p.lon[j], p.lat[j]) - 100)).toBeLessThan(1e-7);
    const at = expectSame(p, 100, 5);
    expect(Array.from(at.roles)).toEqual([ROLE_CORE, ROLE_BORDER, ROLE_BORDER, ROLE_BORDER, ROLE_BORDER]);
    expect(Array.from(at.labels)).toEqual([0, 0, 0, 0, 0]);
    const below = expectSame(p, 99.999, 5);
    expect(below.count).toBe(0);
    expect(Array.from(below.labels)).toEqual([-1, -1, -1, -1, -1]);
  });

  it('treats identical positions as neighbours at distance zero, each counting once', () => {
    const p = pointSet([2, 2, 2, 2, 2.5], [48, 48, 48, 48, 48]);
    expect(Array.from(expectSame(p, 1, 4).roles)).toEqual([1, 1, 1, 1, 0]);
    expect(expectSame(p, 1, 5).count).toBe(0);
  });

  it('uses summed weights for the core test', () => {
    // positions in metres east along the equator, eps 50 m, min_points 5:
    // 0 m (w 5) is core alone; 40 m (w 0) is core through its neighbour's weight; 85 m (w 0)
    // sees only the 40 m point (sum 0) and is its border; 1000 m (w 4.5) + 1030 m (w 0.5) reach
    // 5 together; 3000 m (w 4.999) + 3040 m (w 0) stay short of 5 and are noise
    const m = [0, 40, 1000, 1030, 3000, 3040, 85];
    const w = [5, 0, 4.5, 0.5, 4.999, 0, 0];
    const p = pointSet(m.map(eastDegrees), m.map(() => 0), w);
    const c = expectSame(p, 50, 5);
    expect(Array.from(c.roles)).toEqual([ROLE_CORE, ROLE_CORE, ROLE_CORE, ROLE_CORE, ROLE_NOISE, ROLE_NOISE, ROLE_BORDER]);
    expect(Array.from(c.labels)).toEqual([0, 0, 1, 1, -1, -1, 0]);
  });
});

describe('dbscan rules', () => {
  it('numbers hotspots by their lowest core index and is deterministic', () => {
    const p = midLatitudeSet(5);
    const a = dbscan(p, { epsMeters: 150, minPoints: 5 });
    const b = dbscan(p, { epsMeters: 150, minPoints: 5 });
    expect(Buffer.from(a.labels.buffer)).toEqual(Buffer.from(b.labels.buffer));
    let next = 0;
    for (let i = 0; i < p.n; i++) {
      if (a.roles[i] !== ROLE_CORE) continue;
      expect(a.labels[i]).toBeLessThanOrEqual(next);
      if (a.labels[i] === next) next++;
    }
    expect(next).toBe(a.count);
  });

  it('gives a border point to the nearest core point, ties to the lower hotspot', () => {
    // metres east along the equator, eps 120 m, min_points 6. Hotspot 0: five points at −200 and
    // a core at −100; hotspot 1: a core at +100 and five points at +200. Between them, points
    // at −10 (90 m from −100), +15 (85 m from +100) and 0 (100 m from both, an exact tie: the
    // layout is mirror-symmetric, so both distances are computed from identical numbers). Each
    // in-between point sees both cores and the other two, 5 in all: not core.
    const m = [-200, -200, -200, -200, -200, -100, 100, 200, 200, 200, 200, 200, -10, 15, 0];
    const p = pointSet(m.map(eastDegrees), m.map(() => 0));
    const c = expectSame(p, 120, 6);
    expect(c.count).toBe(2);
    expect(Array.from(c.roles.slice(0, 12)).every((r) => r === ROLE_CORE)).toBe(true);
    expect(Array.from(c.labels.slice(0, 12))).toEqual([0, 0, 0, 0, 0, 0, 1, 1, 1, 1, 1, 1]);
    expect(Array.from(c.roles.slice(12))).toEqual([ROLE_BORDER, ROLE_BORDER, ROLE_BORDER]);
    expect(Array.from(c.labels.slice(12))).toEqual([0, 1, 0]);
  });

  it('accepts a shared index built for a larger radius and reports progress up to 1', () => {
    const p = poleSet(6);
    const shared = new SphereIndex(p, 400);
    const done: number[] = [];
    const a = dbscan(p, { epsMeters: 150, minPoints: 5, index: shared, onProgress: (d) => done.push(d) });
    const b = dbscan(p, { epsMeters: 150, minPoints: 5 });
    expect(firstDifference(a, b)).toBe(-1);
    expect(done.at(-1)).toBe(1);
    for (let k = 1; k < done.length; k++) expect(done[k]).toBeGreaterThanOrEqual(done[k - 1]);
  });

  it('handles an empty set and a single point', () => {
    const empty = dbscan(pointSet([], []), { epsMeters: 10, minPoints: 1 });
    expect(empty.count).toBe(0);
    const one = dbscan(pointSet([10], [10]), { epsMeters: 10, minPoints: 1 });
    expect(Array.from(one.labels)).toEqual([0]);
    expect(Array.from(one.roles)).toEqual([ROLE_CORE]);
  });

  it('rejects bad options and inputs with messages that say what to fix', () => {
    const p = pointSet([0, 1], [0, 1]);
    expect(() => dbscan(p, { epsMeters: 0, minPoints: 5 })).toThrow(/epsMeters must be a positive finite number/);
    expect(() => dbscan(p, { epsMeters: Infinity, minPoints: 5 })).toThrow(RangeError);
    expect(() => dbscan(p, { epsMeters: Number.NaN, minPoints: 5 })).toThrow(RangeError);
    expect(() => dbscan(p, { epsMeters: 10, minPoints: 0.5 })).toThrow(/minPoints must be a finite number ≥ 1/);
    expect(() => dbscan(p, { epsMeters: 10, minPoints: Infinity })).toThrow(RangeError);
    expect(() => dbscan(pointSet([0, 1], [0, 1], [1, -1]), { epsMeters: 10, minPoints: 2 })).toThrow(/point 1 has weight -1/);
    expect(() => dbscan(pointSet([0, 1], [0, 1], [1, Number.NaN]), { epsMeters: 10, minPoints: 2 })).toThrow(RangeError);
    expect(() => dbscan(pointSet([0, 181], [0, 1]), { epsMeters: 10, minPoints: 2 })).toThrow(/point 1 has position/);
    expect(() => dbscan(pointSet([0, 1], [0, Number.NaN]), { epsMeters: 10, minPoints: 2 })).toThrow(RangeError);
    const small = new SphereIndex(p, 5);
    expect(() => dbscan(p, { epsMeters: 10, minPoints: 2, index: small })).toThrow(/build it for at least eps/);
    const other = new SphereIndex(pointSet([0], [0]), 10);
    expect(() => dbscan(p, { epsMeters: 10, minPoints: 2, index: other })).toThrow(/same points/);
  });
});

describe('dbscan against density-clustering', () => {
  /**
   * density-clustering 1.3.0 (lib/DBSCAN.js): `_regionQuery` scans every point including the
   * query point itself (distance 0 < eps) and keeps those with `dist < this.epsilon` (strict);
   * a point is core when `neighbors.length >= this.minPts`. So its minPts counts the point itself,
   * as ours does, and only the strict `<` differs: the data below is checked to hold no pair within
   * 10 µm of eps (ours adds 1 µm of slack), where `<` and `≤` could disagree. Border points go to whichever cluster reaches
   * them first there, so only core points and their partition are compared, plus the noise set
   * (points density-reachable from no core point), which does not depend on that choice.
   */
  function compare(p: PointSet, eps: number, minPts: number): void {
    const data: number[][] = [];
    for (let i = 0; i < p.n; i++) data.push([p.lon[i], p.lat[i]]);
    const dist = (a: number[], b: number[]): number => haversineMeters(a[0], a[1], b[0], b[1]);
    let nearEps = 0;
    for (let i = 0; i < p.n; i++) {
      for (let j = i + 1; j < p.n; j++) if (Math.abs(dist(data[i], data[j]) - eps) <= 1e-5) nearEps++;
    }
    expect(nearEps).toBe(0);
    const ref = new DensityDBSCAN();
    // record its own core test: each point's region query runs exactly once
    const refCore = new Uint8Array(p.n);
    const query = ref._regionQuery;
    ref._regionQuery = function (this: DensityDbscan, id: number): number[] {
      const found = query.call(this, id);
      refCore[id] = found.length >= minPts ? 1 : 0;
      return found;
    };
    // source: npm density-clustering 1.3.0, DBSCAN class, with a haversine distance function
    const clusters = ref.run(data, eps, minPts, dist);
    const refLabel = new Int32Array(p.n).fill(-1);
    clusters.forEach((members, c) => members.forEach((i) => (refLabel[i] = c)));
    const ours = dbscan(p, { epsMeters: eps, minPoints: minPts });

    const toRef = new Map<number, number>();
    const toOurs = new Map<number, number>();
    let cores = 0;
    for (let i = 0; i < p.n; i++) {
      expect(ours.roles[i] === ROLE_CORE).toBe(refCore[i] === 1);
      expect(ours.roles[i] === ROLE_NOISE).toBe(refLabel[i] === -1);
      if (refCore[i] === 0) continue;
      cores++;
      const a = ours.labels[i], b = refLabel[i];
      // the label maps must be one-to-one on core points
      expect(toRef.get(a) ?? b).toBe(b);
      expect(toOurs.get(b) ?? a).toBe(a);
      toRef.set(a, b);
      toOurs.set(b, a);
    }
    expect(toRef.size).toBe(ours.count);
    expect(clusters.length).toBe(ours.count);
    expect(cores).toBeGreaterThan(0);
  }

  it('finds the same core points and the same partition of them', () => {
    compare(midLatitudeSet(31), 120, 5);
    compare(highLatitudeSet(32), 200, 8);
    compare(poleSet(33), 150, 4);
    compare(antimeridianSet(34), 150, 6);
    compare(patchesSet(35, { lon: 30, lat: -60, spreadMeters: 5000, patches: 12, pointsPerPatch: 30, sigmaMeters: 300, background: 100 }), 250, 5);
  });
});
