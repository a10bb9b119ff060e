import { describe, expect, it } from 'vitest';
import { EARTH_RADIUS_M, haversineMeters } from '../../src/core/haversine.js';
import { SphereIndex } from '../../src/core/sphere-index.js';
import { pointSet, type PointSet } from '../../src/core/types.js';
import { unitVectors } from '../../src/core/haversine.js';
import { clarkEvans, distinctIndices, distinctNearestMeters, distinctPositions, nearestNeighbourMeters } from '../../src/geometry/clark-evans.js';
import {
  antimeridianSet,
  destination,
  duplicatesSet,
  globalUniformSet,
  midLatitudeSet,
  PointBuilder,
  poleSet,
  rng,
} from '../reference/seeded.js';

const DEG = 180 / Math.PI;

/** Brute-force reference: haversine distance to every other point, smallest kept. */
function bruteNearest(p: PointSet): Float64Array {
  const out = new Float64Array(p.n).fill(Infinity);
  for (let i = 0; i < p.n; i++) {
    for (let j = i + 1; j < p.n; j++) {
      const d = haversineMeters(p.lon[i], p.lat[i], p.lon[j], p.lat[j]);
      if (d < out[i]) out[i] = d;
      if (d < out[j]) out[j] = d;
    }
  }
  return out;
}

function expectSameDistances(got: Float64Array, want: Float64Array): void {
  expect(got.length).toBe(want.length);
  let worst = 0;
  for (let i = 0; i < want.length; i++) {
    const err = Math.abs(got[i] - want[i]) - (1e-6 + 1e-9 * want[i]);
    if (err > worst) worst = err;
  }
  // chord and haversine round differently: micrometres at most
  expect(worst).toBe(0);
}

/** Dense patches in one region plus `outliers` points spread over the whole globe. */
function patchesWithOutliers(seed: number, outliers: number): PointSet {
  const r = rng(seed);
  const b = new PointBuilder();
  for (let p = 0; p < 6; p++) {
    const [cx, cy] = destination(-3.7, 40.4, r.next() * 2 * Math.PI, 5000 * Math.sqrt(r.next()));
    b.gaussian(r, cx, cy, 60, 300);
  }
  for (let k = 0; k < outliers; k++) b.add(r.next() * 360 - 180, Math.asin(2 * r.next() - 1) * DEG);
  return b.shuffle(r).build();
}

describe('nearestNeighbourMeters', () => {
  it('matches brute force on seeded sets, mid latitudes, near the pole, across ±180° and with duplicates', () => {
    const sets: [string, PointSet][] = [
      ['mid-latitude', midLatitudeSet(11)],
      ['pole', poleSet(12)],
      ['antimeridian', antimeridianSet(13)],
      ['duplicates', duplicatesSet(14)],
      ['global', globalUniformSet(1500, 15)],
      // dense patches with a few or many remote points: widely varying neighbour distances
      ['few outliers', patchesWithOutliers(16, 12)],
      ['many outliers', patchesWithOutliers(17, 400)],
    ];
    for (const [, p] of sets) expectSameDistances(nearestNeighbourMeters(p), bruteNearest(p));
  });

  it('gives 0 for identical positions, including the same pole written with different longitudes', () => {
    const p = pointSet([10, 10, 11, 0, 135, -180, 180], [20, 20, 20, 90, 90, -5, -5]);
    const nn = nearestNeighbourMeters(p);
    expect(nn[0]).toBe(0);
    expect(nn[1]).toBe(0);
    expect(nn[3]).toBeLessThan(1e-6); // (0, 90) and (135, 90) are the same point
    expect(nn[4]).toBeLessThan(1e-6);
    expect(nn[5]).toBeLessThan(1e-6); // −180 and 180 are the same meridian
    expectSameDistances(nn, bruteNearest(p));
  });

  it('reuses a prebuilt index over the same points and gives the same answer at any index radius', () => {
    const p = antimeridianSet(21);
    const want = bruteNearest(p);
    for (const radius of [20, 150, 5000]) expectSameDistances(nearestNeighbourMeters(p, new SphereIndex(p, radius)), want);
    expect(() => nearestNeighbourMeters(p, new SphereIndex(duplicatesSet(1), 100))).toThrow(/same points/);
  });

  it('handles two far-apart points and sets too small to have a neighbour', () => {
    const two = pointSet([0, 179], [0, 1]);
    expectSameDistances(nearestNeighbourMeters(two), bruteNearest(two));
    expect(Array.from(nearestNeighbourMeters(pointSet([5], [5])))).toEqual([Infinity]);
    expect(nearestNeighbourMeters(pointSet([], [])).length).toBe(0);
  });
});

/** Square lattice of side×side points with ground spacing `a` metres, centred on the equator. */
function squareLattice(side: number, a: number): PointSet {
  const lon: number[] = [];
  const lat: number[] = [];
  const step = (a / EARTH_RADIUS_M) * DEG;
  for (let r = 0; r < side; r++) {
    for (let c = 0; c < side; c++) {
      lon.push((c - side / 2) * step);
      lat.push((r - side / 2) * step);
    }
  }
  return pointSet(lon, lat);
}

/** Hexagonal (triangular) lattice with ground spacing `a` metres: rows a√3/2 apart, every other row shifted by a/2. */
function hexLattice(rows: number, cols: number, a: number): PointSet {
  const lon: number[] = [];
  const lat: number[] = [];
  const step = (a / EARTH_RADIUS_M) * DEG;
  for (let r = 0; r < rows; r++) {
    for (let c = 0; c < cols; c++) {
      lon.push((c - cols / 2 + (r % 2) / 2) * step);
      lat.push((r - rows / 2) * step * (Math.sqrt(3) / 2));
    }
  }
  return pointSet(lon, lat);
}

describe('clarkEvans', () => {
  it('gives R = 2 for a square lattice', () => {
    // Every point of a side×side lattice owns an a×a square, so the area is n·a² exactly and
    // no edge correction is needed; every nearest neighbour is at distance a.
    const a = 100;
    const p = squareLattice(60, a);
    const ce = clarkEvans(nearestNeighbourMeters(p), (p.n * a * a) / 1e6);
    // source: Clark & Evans 1954, r̄_E = 1/(2√ρ) with ρ = 1/a² gives r̄_E = a/2, so R = 2 for a square lattice
    expect(ce.R).toBeCloseTo(2, 4);
    expect(ce.observedMeanMeters).toBeCloseTo(a, 2);
    expect(ce.expectedMeanMeters).toBeCloseTo(a / 2, 6);
    expect(ce.pattern).toBe('evenly-spaced');
    expect(ce.z).toBeGreaterThan(1.96);
  });

  it('gives R = 2.1491 for a hexagonal lattice, the most dispersed pattern', () => {
    const a = 250;
    const p = hexLattice(50, 50, a);
    // each point owns a hexagon of area a²·√3/2
    const ce = clarkEvans(nearestNeighbourMeters(p), (p.n * a * a * Math.sqrt(3)) / 2 / 1e6);
    // source: Clark & Evans 1954, maximum R = 2.1491 for a hexagonal distribution
    expect(ce.R).toBeCloseTo(2.1491, 3);
  });

  it('gives R ≈ 1 for uniform random points over the whole sphere, which has no edge', () => {
    const p = globalUniformSet(20000, 31);
    const areaKm2 = (4 * Math.PI * EARTH_RADIUS_M * EARTH_RADIUS_M) / 1e6;
    const ce = clarkEvans(nearestNeighbourMeters(p), areaKm2);
    // source: Clark & Evans 1954, E[r̄_A] = r̄_E under a Poisson process, so R = 1; the standard
    // error of R here is 0.5227/√n ≈ 0.0037, the tolerance is over 5 of them
    expect(Math.abs(ce.R - 1)).toBeLessThan(0.02);
    expect(Math.abs(ce.z)).toBeLessThan(4);
  });

  it('gives R ≈ 1 for uniform random points in a square, slightly above 1 from the edge', () => {
    const r = rng(32);
    const side = 10_000; // metres
    const n = 4000;
    const step = (side / EARTH_RADIUS_M) * DEG;
    const lon = new Float64Array(n);
    const lat = new Float64Array(n);
    for (let i = 0; i < n; i++) {
      lon[i] = r.next() * step;
      lat[i] = r.next() * step;
    }
    const ce = clarkEvans(nearestNeighbourMeters({ n, lon, lat, weight: null }), (side * side) / 1e6);
    // source: Clark & Evans 1954 (R = 1 under randomness); common practice, no source: without
    // edge correction points near the boundary lengthen r̄_A by about 1 % at this n
    expect(ce.R).toBeGreaterThan(0.97);
    expect(ce.R).toBeLessThan(1.06);
  });

  it('gives R < 1 and a significant negative z for clustered patches', () => {
    const p = midLatitudeSet(33);
    const areaKm2 = (Math.PI * 3600 * 3600) / 1e6; // the disc the set's points are drawn in
    const ce = clarkEvans(nearestNeighbourMeters(p), areaKm2);
    expect(ce.R).toBeLessThan(1);
    expect(ce.z).toBeLessThan(-1.96);
    expect(ce.pattern).toBe('aggregated');
    expect(ce.n).toBe(p.n);
    expect(ce.studyAreaKm2).toBe(areaKm2);
  });

  it('follows the published formulas on a hand-computed case', () => {
    // n = 4 in 16 m²: ρ = 0.25 per m², r̄_E = 1/(2·0.5) = 1 m, σ = 0.26136/√(4·0.25) = 0.26136 m
    // source: Clark & Evans 1954 formulas
    const areaKm2 = 16 / 1e6;
    const same = clarkEvans(Float64Array.of(1, 1, 1, 1), areaKm2);
    expect(same.R).toBeCloseTo(1, 12);
    expect(same.z).toBeCloseTo(0, 9);
    expect(same.pattern).toBe('random');
    const closer = clarkEvans(Float64Array.of(0.5, 0.5, 0.5, 0.5), areaKm2);
    expect(closer.R).toBeCloseTo(0.5, 12);
    expect(closer.z).toBeCloseTo(-0.5 / 0.26136, 9); // −1.913: not beyond 1.96
    expect(closer.pattern).toBe('random');
    const closest = clarkEvans(Float64Array.of(0.4, 0.4, 0.4, 0.4), areaKm2);
    expect(closest.z).toBeCloseTo(-0.6 / 0.26136, 9); // −2.296
    expect(closest.pattern).toBe('aggregated');
  });

  it('rejects too few observations, a non-positive area and missing distances', () => {
    expect(() => clarkEvans(Float64Array.of(3), 1)).toThrow(/at least 2 observations/);
    expect(() => clarkEvans(Float64Array.of(3, 4), 0)).toThrow(/positive number of km²/);
    expect(() => clarkEvans(Float64Array.of(3, 4), Number.NaN)).toThrow(/positive number of km²/);
    expect(() => clarkEvans(Float64Array.of(3, Infinity), 1)).toThrow(/distance 1 is Infinity/);
  });
});

/** Reference for distinctPositions: the first observation of every `${lon},${lat}` text, input order. */
function distinctByText(p: PointSet): number[] {
  const seen = new Set<string>();
  const keep: number[] = [];
  for (let i = 0; i < p.n; i++) {
    const key = `${p.lon[i]},${p.lat[i]}`;
    if (seen.has(key)) continue;
    seen.add(key);
    keep.push(i);
  }
  return keep;
}

/**
 * Seeded sets whose positions repeat: a few places observed many times, −0 beside 0, the poles
 * (every longitude one place on the ground, but distinct positions as written), ±180°, and
 * positions that differ only in the last bit.
 */
function sharedSet(seed: number, n: number): PointSet {
  const r = rng(seed);
  const lon: number[] = [];
  const lat: number[] = [];
  const places: [number, number][] = [
    [0, 0],
    [-0, 0],
    [0, -0],
    [180, 10],
    [-180, 10],
    [12.5, 90],
    [-40, 90],
    [7, -90],
    [1 + Number.EPSILON, 45],
    [1, 45],
  ];
  for (let k = 0; k < 20; k++) places.push([r.next() * 2 - 1, r.next() * 2 - 1]);
  for (let i = 0; i < n; i++) {
    const u = r.next();
    if (u < 0.4) {
      const [x, y] = places[Math.floor(r.next() * places.length)]!;
      lon.push(x);
      lat.push(y);
    } else if (u < 0.6 && lon.length > 0) {
      const j = Math.floor(r.next() * lon.length);
      lon.push(lon[j]!);
      lat.push(lat[j]!);
    } else {
      lon.push(r.next() * 4 - 2);
      lat.push(r.next() * 4 - 2);
    }
  }
  return pointSet(lon, lat);
}

describe('distinct positions', () => {
  it('keeps the first observation of every position written the same, as a set of texts would, on seeded sets', () => {
    for (const seed of [21, 22, 23, 24]) {
      for (const n of [0, 1, 2, 7, 300, 5000]) {
        const p = sharedSet(seed, n);
        const want = distinctByText(p);
        expect(Array.from(distinctIndices(p)), `seed ${seed}, n ${n}`).toEqual(want);
        const d = distinctPositions(p);
        if (want.length === p.n) expect(d).toBe('same');
        else {
          expect(d).not.toBe('same');
          const got = d as PointSet;
          expect(Array.from(got.lon)).toEqual(want.map((i) => p.lon[i]));
          expect(Array.from(got.lat)).toEqual(want.map((i) => p.lat[i]));
        }
      }
    }
  });

  it('derives the distances over distinct positions bit for bit as a search of them gives, scanning or not', () => {
    for (const seed of [31, 32, 33]) {
      for (const n of [2, 9, 400, 3000]) {
        const p = sharedSet(seed, n);
        const keep = distinctIndices(p);
        if (keep.length < 2) continue;
        const want = nearestNeighbourMeters(distinctPositions(p) === 'same' ? p : (distinctPositions(p) as PointSet));
        const nearest = nearestNeighbourMeters(p);
        const got = distinctNearestMeters(p, nearest, keep);
        expect(got, `seed ${seed}, n ${n}`).not.toBeNull();
        // the same doubles: Clark–Evans sums them in the same order
        expect(Array.from(got!), `seed ${seed}, n ${n}`).toEqual(Array.from(want));
        expect(Array.from(distinctNearestMeters(p, nearest, keep, unitVectors(p.lon, p.lat))!)).toEqual(Array.from(want));
      }
    }
    // too many scans: left to a whole search
    const p = sharedSet(34, 3000);
    expect(distinctNearestMeters(p, nearestNeighbourMeters(p), distinctIndices(p), undefined, 1000)).toBeNull();
  });
});
