import { describe, expect, it } from 'vitest';
import { haversineMeters } from '../../src/core/haversine.js';
import { SphereIndex } from '../../src/core/sphere-index.js';
import { pointSet, type PointSet } from '../../src/core/types.js';
import { antimeridianSet, destination, duplicatesSet, globalUniformSet, poleSet, rng, highLatitudeSet, PointBuilder } from '../reference/seeded.js';

/** Same inclusive test as the product: ≤ radius + 1 µm. */
const within = (p: PointSet, i: number, lon: number, lat: number, r: number): boolean =>
  haversineMeters(p.lon[i], p.lat[i], lon, lat) <= r + 1e-6;

/** Brute force: every returned point is inside, every other point is outside, none twice. */
function checkAll(p: PointSet, radius: number, sample = p.n): void {
  const index = new SphereIndex(p, radius);
  for (let i = 0; i < sample; i++) {
    const got = new Set<number>();
    let repeats = 0;
    index.forEachWithin(i, (j) => {
      if (got.has(j)) repeats++;
      got.add(j);
    });
    expect(repeats).toBe(0);
    let wsum = 0;
    for (let j = 0; j < p.n; j++) {
      const inside = within(p, j, p.lon[i], p.lat[i], radius);
      // source: haversine formula evaluated pair by pair (brute force)
      if (inside !== got.has(j)) throw new Error(`point ${j} vs ${i} at radius ${radius}: brute ${inside}, index ${got.has(j)}`);
      if (inside) wsum += p.weight ? p.weight[j] : 1;
    }
    expect(got.has(i)).toBe(true);
    expect(index.weightWithin(i, p.weight)).toBe(wsum);
  }
}

describe('SphereIndex against brute force', () => {
  it('finds exactly the points within the radius near the North Pole', () => {
    checkAll(poleSet(1), 200);
    checkAll(poleSet(2), 1000);
  });

  it('finds exactly the points within the radius across ±180°', () => {
    const p = antimeridianSet(3);
    let east = 0, west = 0;
    for (let i = 0; i < p.n; i++) (p.lon[i] > 0 ? east++ : west++);
    expect(east).toBeGreaterThan(50);
    expect(west).toBeGreaterThan(50);
    checkAll(p, 250);
  });

  it('handles 80° N, tiny (1 m) radii and exact duplicates', () => {
    checkAll(highLatitudeSet(4), 150);
    checkAll(duplicatesSet(5), 1);
    // points 0.5 m, 1 m (on the boundary) and 1.001 m from a centre
    const b = new PointBuilder().add(5, 45);
    for (const m of [0.5, 1, 1.001, 0.999, 2]) {
      const [x, y] = destination(5, 45, m, m);
      b.add(x, y);
    }
    const p = b.build();
    checkAll(p, 1);
    const index = new SphereIndex(p, 1);
    const got: number[] = [];
    index.forEachWithin(0, (j) => got.push(j));
    expect(got.sort()).toEqual([0, 1, 2, 4]);
  });

  it('handles huge (500 km) radii over the whole globe', () => {
    checkAll(globalUniformSet(1500, 6), 500_000, 300);
  });

  it('counts weights in weightWithin', () => {
    const base = poleSet(7);
    const r = rng(8);
    const w = new Float64Array(base.n);
    for (let i = 0; i < base.n; i++) w[i] = r.int(4);
    checkAll({ ...base, weight: w }, 300, 200);
  });

  it('finds the points near arbitrary positions, including the pole itself and ±180°', () => {
    for (const [p, r] of [
      [poleSet(9), 800],
      [antimeridianSet(10), 800],
      [globalUniformSet(2000, 11), 700_000],
    ] as const) {
      const index = new SphereIndex(p, r);
      const probes: Array<[number, number]> = [
        [0, 90],
        [180, -17],
        [-180, -17],
        [123, 89.99],
      ];
      const g = rng(12);
      for (let k = 0; k < 30; k++) probes.push([p.lon[g.int(p.n)] + g.next() * 0.01 - 0.005, p.lat[g.int(p.n)]]);
      for (const [lon0, lat] of probes) {
        const lon = Math.max(-180, Math.min(180, lon0));
        const got = new Set<number>();
        index.forEachNear(lon, lat, (j) => got.add(j));
        const wrong: number[] = [];
        // source: haversine formula evaluated point by point (brute force)
        for (let j = 0; j < p.n; j++) if (got.has(j) !== within(p, j, lon, lat, r)) wrong.push(j);
        expect(wrong).toEqual([]);
        // the pole set's patches lie within 3 km of 90° N, so a 800 m probe at the pole finds some
        if (lat === 90 && r === 800 && p.lat[0] > 89) expect(got.size).toBeGreaterThan(0);
      }
    }
  });

  it('measures metres between indexed points like haversine', () => {
    const p = globalUniformSet(300, 13);
    const index = new SphereIndex(p, 1000);
    for (let i = 0; i + 1 < p.n; i++) {
      const h = haversineMeters(p.lon[i], p.lat[i], p.lon[i + 1], p.lat[i + 1]);
      expect(Math.abs(index.metersBetween(i, i + 1) - h)).toBeLessThan(1e-3);
    }
  });

  it('lists points in cell order with every id exactly once', () => {
    const p = globalUniformSet(5000, 14);
    const index = new SphereIndex(p, 20_000);
    const seen = new Uint8Array(p.n);
    for (const i of index.sorted) seen[i]++;
    expect(seen.every((c) => c === 1)).toBe(true);
  });

  it('rejects radii that are not positive finite metres', () => {
    const p = pointSet([0], [0]);
    expect(() => new SphereIndex(p, 0)).toThrow(RangeError);
    expect(() => new SphereIndex(p, -5)).toThrow(/positive number of metres/);
    expect(() => new SphereIndex(p, Number.NaN)).toThrow(RangeError);
    expect(() => new SphereIndex(p, Infinity)).toThrow(RangeError);
  });
});
