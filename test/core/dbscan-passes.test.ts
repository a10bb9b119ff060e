/**
 * The passes of `dbscan` (src/core/dbscan.ts) on seeded sets where cells are crowded, so that a
 * count reaches min_points early: without weights each count reads the point's own cell first
 * and stops at min_points; with weights the cells are read in list order. Both must give the
 * labels and roles of the brute-force reference (test/reference/brute-dbscan.ts), on dense
 * patches, stacks of identical positions, weights with fractional parts, the pole and ±180°.
 * Seed: ROOST_SEED (printed).
 */
import { describe, expect, it } from 'vitest';
import { dbscan } from '../../src/core/dbscan.js';
import { pointSet, type Clustering, type PointSet } from '../../src/core/types.js';
import { bruteDbscan } from '../reference/brute-dbscan.js';
import { PointBuilder, realisticSet, rng } from '../reference/seeded.js';

const SEED = Number(process.env.ROOST_SEED ?? 1604);

/** Dense patches (a few hundred points within a few eps) at the pole, at ±180° and at mid latitude, with stacked duplicates. */
function crowdedSet(seed: number): PointSet {
  const r = rng(seed);
  const b = new PointBuilder();
  for (const [lon, lat, sigma] of [
    [0, 90, 120],
    [180, -17, 80],
    [-180, -17.001, 200],
    [12.5, 41.9, 60],
    [12.51, 41.9, 400],
  ]) {
    b.gaussian(r, lon, lat, sigma, 150 + r.int(300));
    const m = b.lon.length;
    for (let k = 0; k < 10; k++) {
      const j = m - 1 - r.int(100);
      const copies = 1 + r.int(12);
      for (let c = 0; c < copies; c++) b.add(b.lon[j], b.lat[j]);
    }
  }
  return b.shuffle(r).build();
}

/** The same points with seeded weights: zeros, fractions and whole numbers. */
function weighted(p: PointSet, seed: number): PointSet {
  const r = rng(seed);
  const w = Array.from({ length: p.n }, () => [0, 0.1, 0.3, 0.7, 1, 1.5, 2.25][r.int(7)]);
  return pointSet(Array.from(p.lon), Array.from(p.lat), w);
}

function expectReference(p: PointSet, eps: number, minPoints: number): Clustering {
  const ours = dbscan(p, { epsMeters: eps, minPoints });
  const ref = bruteDbscan(p, eps, minPoints);
  let first = -1;
  for (let i = 0; i < p.n && first < 0; i++) if (ours.labels[i] !== ref.labels[i] || ours.roles[i] !== ref.roles[i]) first = i;
  expect({ seed: SEED, eps, minPoints, count: ours.count, first }).toEqual({ seed: SEED, eps, minPoints, count: ref.count, first: -1 });
  return ours;
}

describe(`dbscan's passes on crowded cells (seed ${SEED})`, () => {
  it('gives the reference labels and roles without weights', () => {
    console.log(`dbscan passes: seed ${SEED} (ROOST_SEED)`);
    const sets = [crowdedSet(SEED), realisticSet(2500, SEED, { regionMeters: 3000 })];
    for (const p of sets) {
      let hotspots = 0;
      for (const [eps, minPoints] of [
        [50, 3],
        [120, 5],
        [250, 12],
        [500, 40],
      ]) hotspots += expectReference(p, eps, minPoints).count;
      expect(hotspots).toBeGreaterThan(2);
    }
  }, 120_000);

  it('gives the reference labels and roles with weights, fractional sums included', () => {
    const sets = [weighted(crowdedSet(SEED + 1), SEED), weighted(realisticSet(2000, SEED + 1, { regionMeters: 3000 }), SEED + 2)];
    for (const p of sets) {
      let hotspots = 0;
      for (const [eps, minPoints] of [
        [50, 2.5],
        [120, 5],
        [250, 12.3],
      ]) hotspots += expectReference(p, eps, minPoints).count;
      expect(hotspots).toBeGreaterThan(2);
    }
  }, 120_000);
});
