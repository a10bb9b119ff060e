import { describe, expect, it } from 'vitest';
import { EARTH_RADIUS_M, haversineMeters } from '../../src/core/haversine.js';
import { pointSet, ROLE_BORDER, ROLE_CORE, ROLE_NOISE, type Clustering, type PointSet } from '../../src/core/types.js';
import { medoidIndex, sphericalMean } from '../../src/geometry/centre.js';
import { clarkEvans, nearestNeighbourMeters } from '../../src/geometry/clark-evans.js';
import { hotspotFigures, resultFigures } from '../../src/geometry/figures.js';
import { midLatitudeSet, rng, weightedSet } from '../reference/seeded.js';

const RAD = Math.PI / 180;
const ONE_DEGREE_M = EARTH_RADIUS_M * RAD;

function clustering(labels: number[], roles: number[], count: number): Clustering {
  return { labels: Int32Array.from(labels), roles: Uint8Array.from(roles), count };
}

describe('hotspotFigures', () => {
  // hotspot 0: two points 1° either side of (0, 0) on the equator, plus a border point at the centre
  // hotspot 1: four points 1° from the North Pole
  const points = pointSet([-1, 1, 0, 50, 0, 90, 180, -90], [0, 0, 0, 50, 89, 89, 89, 89]);
  const c = clustering([0, 0, 0, -1, 1, 1, 1, 1], [ROLE_CORE, ROLE_CORE, ROLE_BORDER, ROLE_NOISE, 1, 1, 2, 1], 2);
  const areaKm2 = Float64Array.of(4, 0.5);

  it('counts members, roles and weight, and divides by the hull area', () => {
    const [a, b] = hotspotFigures(points, c, { areaKm2 });
    expect(a).toMatchObject({ hotspot: 0, count: 3, coreCount: 2, borderCount: 1, weight: 3, areaKm2: 4 });
    expect(a.densityPerKm2).toBe(3 / 4);
    expect(a.weightDensityPerKm2).toBe(3 / 4);
    expect(b).toMatchObject({ hotspot: 1, count: 4, coreCount: 3, borderCount: 1, weight: 4, areaKm2: 0.5 });
    expect(b.densityPerKm2).toBe(8);
    expect(a.firstObservedAt).toBeNull();
    expect(a.categories).toBeNull();
  });

  it('finds the centre, the medoid and the standard distance', () => {
    const [a, b] = hotspotFigures(points, c, { areaKm2 });
    expect(a.centre[0]).toBeCloseTo(0, 12);
    expect(a.centre[1]).toBeCloseTo(0, 12);
    expect(a.medoid).toBe(2);
    // hand computation: distances 1°, 1°, 0 → sqrt((2 · (1° in metres)²) / 3)
    // source: standard distance sqrt(Σ d² / n) (Bachi 1963, from memory)
    expect(a.radiusMeters).toBeCloseTo(Math.sqrt((2 * ONE_DEGREE_M ** 2) / 3), 6);
    expect(b.centre[1]).toBeCloseTo(90, 9);
    expect(b.radiusMeters).toBeCloseTo(ONE_DEGREE_M, 4); // every member 1° from the pole
    // all four are 1° away up to rounding of the centre, so any of them may be nearest
    expect([4, 5, 6, 7]).toContain(b.medoid);
  });

  it('breaks medoid ties by the lowest input index', () => {
    // indices 3 and 1 sit at the same spot, nearest to the centre of the four
    const p = pointSet([2, 0.1, -2, 0.1], [0, 0, 0, 0]);
    const [f] = hotspotFigures(p, clustering([0, 0, 0, 0], [1, 1, 1, 1], 1), { areaKm2: Float64Array.of(1) });
    expect(f.medoid).toBe(1);
    const reversed = pointSet([2, 0.1, -2, 0.1].reverse(), [0, 0, 0, 0]);
    expect(hotspotFigures(reversed, clustering([0, 0, 0, 0], [1, 1, 1, 1], 1), { areaKm2: Float64Array.of(1) })[0].medoid).toBe(0);
  });

  it('weights the centre and the standard distance', () => {
    // (0, 0) with weight 3 and (0, 1) with weight 1 on one meridian
    const p = pointSet([0, 0], [0, 1], [3, 1]);
    const [f] = hotspotFigures(p, clustering([0, 0], [1, 1], 1), { areaKm2: Float64Array.of(2) });
    // hand computation: summed vector (3 + cos 1°, 0, sin 1°) → latitude atan2(sin 1°, 3 + cos 1°)
    const latC = Math.atan2(Math.sin(RAD), 3 + Math.cos(RAD)) / RAD;
    expect(f.centre[1]).toBeCloseTo(latC, 12);
    const d0 = latC * ONE_DEGREE_M;
    const d1 = (1 - latC) * ONE_DEGREE_M;
    // source: weighted standard distance sqrt(Σ w d² / Σ w) (Bachi 1963, from memory)
    expect(f.radiusMeters).toBeCloseTo(Math.sqrt((3 * d0 * d0 + d1 * d1) / 4), 6);
    expect(f.weight).toBe(4);
    expect(f.weightDensityPerKm2).toBe(2);
    expect(f.densityPerKm2).toBe(1);
    expect(f.medoid).toBe(0);
  });

  it('reports the first and last observed_at in UTC, skipping missing times', () => {
    const observedAt = Float64Array.of(
      Date.UTC(2024, 5, 3, 8, 0),
      NaN,
      Date.UTC(2024, 4, 30, 22, 15, 30),
      Date.UTC(2020, 0, 1), // noise: not counted
      NaN,
      NaN,
      NaN,
      NaN,
    );
    const [a, b] = hotspotFigures(points, c, { areaKm2, observedAt });
    expect(a.firstObservedAt).toBe('2024-05-30T22:15:30.000Z');
    expect(a.lastObservedAt).toBe('2024-06-03T08:00:00.000Z');
    expect(b.firstObservedAt).toBeNull();
    expect(b.lastObservedAt).toBeNull();
  });

  it('counts category values per hotspot with sorted keys, leaving out members without one', () => {
    const category = ['wren', 'robin', null, 'robin', 'robin', '__proto__', 'ash', 'robin'];
    const [a, b] = hotspotFigures(points, c, { areaKm2, category });
    expect(a.categories).toEqual({ robin: 1, wren: 1 });
    expect(Object.keys(a.categories!)).toEqual(['robin', 'wren']);
    expect(Object.keys(b.categories!)).toEqual(['__proto__', 'ash', 'robin']);
    expect(b.categories!['robin']).toBe(2);
    expect(Object.prototype.hasOwnProperty.call(b.categories, '__proto__')).toBe(true);
    expect(JSON.stringify(b.categories)).toBe('{"__proto__":1,"ash":1,"robin":2}');
  });

  it('agrees with per-hotspot centre, medoid and radius computed member by member on a seeded set', () => {
    const p: PointSet = weightedSet(5);
    const r = rng(6);
    const h = 7;
    const labels = Int32Array.from({ length: p.n }, () => r.int(h + 1) - 1); // about 1 in 8 noise
    const roles = Uint8Array.from(labels, (l) => (l < 0 ? ROLE_NOISE : r.next() < 0.7 ? ROLE_CORE : ROLE_BORDER));
    const figures = hotspotFigures(p, { labels, roles, count: h }, { areaKm2: new Float64Array(h).fill(3) });
    for (let c = 0; c < h; c++) {
      const members = Int32Array.from(Array.from(labels.keys()).filter((i) => labels[i] === c));
      const centre = sphericalMean(p.lon, p.lat, p.weight, members);
      expect(figures[c].centre[0]).toBeCloseTo(centre.lon, 9);
      expect(figures[c].centre[1]).toBeCloseTo(centre.lat, 9);
      expect(figures[c].medoid).toBe(medoidIndex(p.lon, p.lat, centre, members));
      let sw = 0, swd2 = 0;
      for (const i of members) {
        const d = haversineMeters(centre.lon, centre.lat, p.lon[i], p.lat[i]);
        sw += p.weight![i];
        swd2 += p.weight![i] * d * d;
      }
      expect(figures[c].radiusMeters).toBeCloseTo(Math.sqrt(swd2 / sw), 6);
      expect(figures[c].weight).toBe(sw);
      expect(figures[c].count).toBe(members.length);
      expect(figures[c].coreCount + figures[c].borderCount).toBe(members.length);
    }
  });

  it('rejects mismatched inputs with messages that say what to pass', () => {
    expect(() => hotspotFigures(points, c, { areaKm2: Float64Array.of(1) })).toThrow(/one hull area per hotspot/);
    expect(() => hotspotFigures(points, c, { areaKm2: Float64Array.of(1, 0) })).toThrow(/hotspot 1 has area 0/);
    expect(() => hotspotFigures(points, clustering([0, 0, 0, -1, 1, 1, 1, 2], [1, 1, 1, 0, 1, 1, 1, 1], 2), { areaKm2 })).toThrow(
      /observation 7 has label 2/,
    );
    expect(() => hotspotFigures(points, c, { areaKm2, observedAt: new Float64Array(3) })).toThrow(/observedAt has 3 values/);
    expect(() => hotspotFigures(points, c, { areaKm2, category: ['a'] })).toThrow(/category has 1 values/);
  });
});

describe('resultFigures', () => {
  it('counts clustered and noise observations, their shares and the total weight', () => {
    const p = pointSet([0, 1, 2, 3, 4], [0, 0, 0, 0, 0], [1, 2, 0.5, 0, 4]);
    const f = resultFigures(p, clustering([0, -1, 1, 1, -1], [1, 0, 1, 2, 0], 2), { studyAreaKm2: null });
    expect(f).toEqual({
      observations: 5,
      hotspots: 2,
      clustered: 3,
      noise: 2,
      clusteredShare: 0.6,
      noiseShare: 0.4,
      totalWeight: 7.5,
      clarkEvans: null,
      clarkEvansNotComputed: 'there is no study area: none was given',
      sharedPositions: 0,
      distinctPositions: 5,
      clarkEvansDistinct: null,
    });
  });

  it('runs Clark–Evans over all observations when a study area is given, with or without precomputed distances', () => {
    const p = midLatitudeSet(8);
    const labels = new Int32Array(p.n).fill(-1);
    const c: Clustering = { labels, roles: new Uint8Array(p.n), count: 0 };
    const areaKm2 = 40;
    const nearest = nearestNeighbourMeters(p);
    const computed = resultFigures(p, c, { studyAreaKm2: areaKm2 });
    const given = resultFigures(p, c, { studyAreaKm2: areaKm2, nearest });
    expect(computed.clarkEvans).toEqual(clarkEvans(nearest, areaKm2));
    expect(given.clarkEvans).toEqual(computed.clarkEvans);
    expect(computed.totalWeight).toBe(p.n);
    expect(computed.noiseShare).toBe(1);
    expect(() => resultFigures(p, c, { studyAreaKm2: areaKm2, nearest: new Float64Array(2) })).toThrow(/nearest has 2 distances/);
  });

  it('leaves Clark–Evans out with fewer than two observations, and gives zero shares for none', () => {
    const one = resultFigures(pointSet([1], [1]), clustering([-1], [0], 0), { studyAreaKm2: 10 });
    expect(one.clarkEvans).toBeNull();
    expect(one.clarkEvansNotComputed).toBe('it needs at least 2 observations, and there is 1');
    const far = resultFigures(pointSet([1, 2, 3], [1, 2, 1]), clustering([-1, -1, -1], [0, 0, 0], 0), { studyAreaKm2: null, studyAreaProblem: 'the hull could not be drawn' });
    expect(far.clarkEvansNotComputed).toBe('there is no study area: the hull could not be drawn');
    const none = resultFigures(pointSet([], []), clustering([], [], 0), { studyAreaKm2: 10 });
    expect(none).toMatchObject({ observations: 0, clusteredShare: 0, noiseShare: 0, totalWeight: 0, clarkEvans: null });
  });

  it('counts observations that share a position and runs Clark–Evans over the distinct positions too', () => {
    // A 30 × 30 square lattice of spacing a, every position observed twice (as when addresses are
    // geocoded to one point per building): over all observations every nearest neighbour is at 0,
    // so R = 0 whatever the places' pattern; over the distinct positions the lattice shows.
    const a = 200;
    const side = 30;
    const step = (a / EARTH_RADIUS_M) / RAD;
    const lon: number[] = [];
    const lat: number[] = [];
    for (let r = 0; r < side; r++) {
      for (let c = 0; c < side; c++) {
        for (let copy = 0; copy < 2; copy++) {
          lon.push(10 + c * step);
          lat.push(r * step);
        }
      }
    }
    const p = pointSet(lon, lat);
    const labels = new Int32Array(p.n).fill(-1);
    const areaKm2 = (side * side * a * a) / 1e6;
    const f = resultFigures(p, { labels, roles: new Uint8Array(p.n), count: 0 }, { studyAreaKm2: areaKm2 });
    expect(f.sharedPositions).toBe(p.n);
    expect(f.distinctPositions).toBe(side * side);
    expect(f.clarkEvans?.R).toBe(0);
    // source: Clark & Evans 1954, r̄_E = 1/(2√ρ) with ρ = 1/a² gives R = 2 for a square lattice
    // (the lattice is 6 km across near the equator, where the ground spacing stays a within 0.01 %)
    expect(f.clarkEvansDistinct?.R).toBeCloseTo(2, 3);
    expect(f.clarkEvansDistinct?.pattern).toBe('evenly-spaced');
    expect(f.clarkEvansDistinct?.n).toBe(side * side);
    // without shared positions there is no second test
    const once = resultFigures(pointSet(lon.filter((_, i) => i % 2 === 0), lat.filter((_, i) => i % 2 === 0)), { labels: labels.subarray(0, side * side), roles: new Uint8Array(side * side), count: 0 }, { studyAreaKm2: areaKm2 });
    expect(once.sharedPositions).toBe(0);
    expect(once.clarkEvansDistinct).toBeNull();
    expect(once.clarkEvans?.R).toBeCloseTo(2, 3);
  });
});

