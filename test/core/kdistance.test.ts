import KDBush from 'kdbush';
import { around } from 'geokdbush';
import { describe, expect, it } from 'vitest';
import { dbscan } from '../../src/core/dbscan.js';
import { haversineMeters } from '../../src/core/haversine.js';
import { kDistances, kneedle, suggestEps } from '../../src/core/kdistance.js';
import { pointSet, type PointSet } from '../../src/core/types.js';
import { antimeridianSet, duplicatesSet, globalUniformSet, midLatitudeSet, poleSet, realisticSet } from '../reference/seeded.js';

/** Brute force: for each k, each point's k-th smallest haversine distance to the other points. */
function bruteKDistancesFor(p: PointSet, ks: number[]): number[][] {
  const out: number[][] = ks.map(() => []);
  for (let i = 0; i < p.n; i++) {
    const ds: number[] = [];
    for (let j = 0; j < p.n; j++) if (j !== i) ds.push(haversineMeters(p.lon[i], p.lat[i], p.lon[j], p.lat[j]));
    ds.sort((a, b) => a - b);
    ks.forEach((k, c) => out[c].push(ds[k - 1]));
  }
  return out;
}
const bruteKDistances = (p: PointSet, k: number): number[] => bruteKDistancesFor(p, [k])[0];

describe('kDistances', () => {
  const sets: [string, PointSet][] = [
    ['mid-latitude', midLatitudeSet(1)],
    ['pole', poleSet(2)],
    ['antimeridian', antimeridianSet(3)],
    ['duplicates', duplicatesSet(4)],
    ['whole globe', globalUniformSet(400, 5)],
  ];
  for (const [name, p] of sets) {
    it(`equals brute force for k = 1, 4, 9 (${name})`, () => {
      const ks = [1, 4, 9];
      const brute = bruteKDistancesFor(p, ks);
      for (const [c, k] of ks.entries()) {
        const got = kDistances(p, k);
        const want = brute[c].sort((a, b) => a - b);
        expect(got.length).toBe(p.n);
        for (let i = 0; i < p.n; i++) expect(got[i]).toBeCloseTo(want[i], 6);
      }
    });
  }

  it('agrees with geokdbush on larger sets', () => {
    // source: geokdbush `around` (k nearest by great-circle distance over a kdbush index)
    for (const p of [realisticSet(4000, 9), globalUniformSet(4000, 10)]) {
      const tree = new KDBush(p.n);
      for (let i = 0; i < p.n; i++) tree.add(p.lon[i], p.lat[i]);
      tree.finish();
      const want: number[] = [];
      for (let i = 0; i < p.n; i++) {
        const j = around(tree, p.lon[i], p.lat[i], 5, Infinity, (id: number) => id !== i)[4];
        want.push(haversineMeters(p.lon[i], p.lat[i], p.lon[j], p.lat[j]));
      }
      want.sort((a, b) => a - b);
      const got = kDistances(p, 5);
      for (let i = 0; i < p.n; i++) expect(got[i]).toBeCloseTo(want[i], 6);
    }
  });

  it('samples large sets deterministically, with exact distances for the sampled points', () => {
    const p = midLatitudeSet(6);
    const a = kDistances(p, 3, { sampleSize: 100, seed: 7 });
    const b = kDistances(p, 3, { sampleSize: 100, seed: 7 });
    const c = kDistances(p, 3, { sampleSize: 100, seed: 8 });
    expect(a.length).toBe(100);
    expect(Array.from(a)).toEqual(Array.from(b));
    expect(Array.from(a)).not.toEqual(Array.from(c));
    const all = bruteKDistances(p, 3);
    for (const d of a) expect(all.some((x) => Math.abs(x - d) < 1e-6)).toBe(true);
    for (let i = 1; i < a.length; i++) expect(a[i]).toBeGreaterThanOrEqual(a[i - 1]);
  });

  it('rejects k out of range', () => {
    const p = pointSet([0, 1, 2], [0, 0, 0]);
    expect(() => kDistances(p, 3)).toThrow(/more than k points/);
    expect(() => kDistances(p, 0)).toThrow(/k must be/);
  });
});

describe('kneedle', () => {
  it('finds the maximum of x − y on y = x² (knee at x = 1/2)', () => {
    // for y = x² on [0, 1] the scaled difference curve x − x² peaks at x = 1/2; analytic
    const y = Array.from({ length: 101 }, (_, i) => (i / 100) ** 2);
    expect(kneedle(y)).toBe(50);
  });

  it('finds the analytic knee of an exponential curve', () => {
    // y = e^(a x) on [0, 1]: x − (e^(ax) − 1)/(e^a − 1) peaks where a e^(ax) = e^a − 1,
    // x* = ln((e^a − 1)/a)/a; analytic
    const a = 5;
    const m = 1001;
    const y = Array.from({ length: m }, (_, i) => Math.exp((a * i) / (m - 1)));
    const xStar = Math.log((Math.exp(a) - 1) / a) / a;
    expect(Math.abs((kneedle(y) as number) - xStar * (m - 1))).toBeLessThanOrEqual(1);
  });

  it('finds a sharp bend of a piecewise-linear curve at its index', () => {
    const y = Array.from({ length: 1000 }, (_, i) => (i < 700 ? i : 700 + 50 * (i - 700)));
    expect(kneedle(y)).toBe(700);
  });

  it('returns the strongest of several bends', () => {
    // slope 1, then 3 from 300, then 40 from 800: the scaled difference curve is larger at 800
    const y = Array.from({ length: 1000 }, (_, i) => (i < 300 ? i : i < 800 ? 300 + 3 * (i - 300) : 1800 + 40 * (i - 800)));
    const d = (i: number): number => i / 999 - y[i] / y[999];
    expect(d(800)).toBeGreaterThan(d(300));
    expect(kneedle(y)).toBe(800);
  });

  it('finds no knee on a straight line, a flat curve or too few points', () => {
    expect(kneedle(Array.from({ length: 50 }, (_, i) => 3 + 2 * i))).toBeNull();
    expect(kneedle(new Array(50).fill(7))).toBeNull();
    expect(kneedle([1, 2])).toBeNull();
  });

  it('needs the difference curve to fall by S · mean(Δx) after the maximum (threshold rule)', () => {
    // y = x² on 101 points: after the peak 0.25 at index 50, d falls to 0 at the end, a drop of
    // 0.25, which is 25 · mean(Δx); source: Satopää et al. 2011, threshold T = y_lmx − S · mean(Δx)
    const y = Array.from({ length: 101 }, (_, i) => (i / 100) ** 2);
    expect(kneedle(y, { sensitivity: 24 })).toBe(50);
    expect(kneedle(y, { sensitivity: 26 })).toBeNull();
    expect(() => kneedle(y, { sensitivity: -1 })).toThrow(/sensitivity/);
  });
});

describe('suggestEps', () => {
  it('suggests an eps at the scale of the patches on patchy data', () => {
    // midLatitudeSet: patches with sigma 75–225 m and background about 600 m apart (4th neighbour)
    for (const seed of [1, 2, 3]) {
      const p = midLatitudeSet(seed);
      const s = suggestEps(p, 5);
      expect(s.k).toBe(4);
      expect(s.sampled).toBe(p.n);
      expect(s.total).toBe(p.n);
      expect(s.epsMeters).not.toBeNull();
      const eps = s.epsMeters as number;
      expect(eps).toBeGreaterThan(60);
      expect(eps).toBeLessThan(350);
      // at that eps DBSCAN finds hotspots but does not swallow everything into one
      const c = dbscan(p, { epsMeters: eps, minPoints: 5 });
      expect(c.count).toBeGreaterThanOrEqual(4);
      let noise = 0;
      for (let i = 0; i < p.n; i++) if (c.labels[i] < 0) noise++;
      expect(noise).toBeGreaterThan(0);
      expect(s.message).toMatch(/bends at/);
    }
  });

  it('down-samples the curve and keeps the knee', () => {
    const p = midLatitudeSet(4);
    const s = suggestEps(p, 6, { maxCurvePoints: 50 });
    const { rank, meters } = s.curve;
    expect(rank.length).toBeGreaterThanOrEqual(50);
    expect(rank.length).toBeLessThanOrEqual(51);
    expect(rank[0]).toBe(0);
    expect(rank[rank.length - 1]).toBe(p.n - 1);
    expect(rank).toContain(s.kneeIndex);
    const full = kDistances(p, 5);
    rank.forEach((r, c) => {
      if (c > 0) expect(r).toBeGreaterThan(rank[c - 1]);
      expect(meters[c]).toBe(full[r]);
    });
    expect(s.epsMeters).toBe(full[s.kneeIndex as number]);
  });

  it('says plainly when there is no knee', () => {
    // every position twice: each point's nearest other point is at 0 m, a flat curve
    const lon = [0, 0, 1, 1, 2, 2, 3, 3];
    const lat = [0, 0, 1, 1, 2, 2, 3, 3];
    const s = suggestEps(pointSet(lon, lat), 2);
    expect(s.kneeIndex).toBeNull();
    expect(s.epsMeters).toBeNull();
    expect(s.message).toMatch(/no knee found/i);
    expect(s.message).toMatch(/min_points/);
  });

  it('answers without a knee when there are too few points', () => {
    const s = suggestEps(pointSet([0, 1, 2], [0, 0, 0]), 5);
    expect(s.epsMeters).toBeNull();
    expect(s.curve.rank).toEqual([]);
    expect(s.message).toMatch(/no knee found.*too few/i);
  });

  it('rejects min_points below 2', () => {
    expect(() => suggestEps(midLatitudeSet(1), 1)).toThrow(/min_points/);
  });
});
