/**
 * The OPTICS walk in index positions (src/core/optics.ts: core distances first, from the k
 * smallest kept while reading each cell outward from the point's x and skipping cells that cannot
 * hold a nearer point; then the seed heap over positions, reading only unordered neighbours, kept
 * at the front of their cells by swapping each ordered point to the back) gives
 * exactly the result of the plain indexed OPTICS in test/reference/optics-plain.ts (point ids,
 * id-keyed heap, quickselect), which in turn equals the textbook OPTICS in optics.test.ts: same
 * ordering, same reachability and core distances to the last bit, same predecessors.
 *
 * Seeded sets with exact ties (stacked duplicates, where many neighbours share one reachability
 * equal to the core distance, and cells of more than 32 points, ordered by x through buckets or,
 * where x is bunched, a comparison sort), points at the North Pole and across ±180°, weights, fractional and large minPoints
 * (above the sorted-run limit, where quickselect takes over), and a set whose cells hold hundreds
 * of points. The core distances computed by two threads (a worker taking chunks of cells beside
 * the calling thread) equal the one-thread ones bit for bit.
 * Seed: ROOST_SEED (printed).
 */
import { describe, expect, it } from 'vitest';
import { optics, orderCellsByX, sharedCoreDistances, smallCoreCells, type OpticsResult } from '../../src/core/optics.js';
import { SphereIndex } from '../../src/core/sphere-index.js';
import type { PointSet } from '../../src/core/types.js';
import { plainOptics } from '../reference/optics-plain.js';
import { antimeridianSet, duplicatesSet, midLatitudeSet, PointBuilder, poleSet, realisticSet, rng, weightedSet } from '../reference/seeded.js';

const SEED = Number(process.env.ROOST_SEED ?? 1999);

/** Patches with heavy stacks of identical positions (up to 60 copies of one spot) at the pole and at ±180°. */
function stackedSet(seed: number): PointSet {
  const r = rng(seed);
  const b = new PointBuilder();
  for (const [lon, lat] of [
    [0, 90],
    [180, -17],
    [-180, -17.001],
    [12.5, 41.9],
  ]) {
    b.gaussian(r, lon, lat, 150, 120);
    const m = b.lon.length;
    for (let k = 0; k < 20; k++) {
      const j = m - 1 - r.int(120);
      const copies = 1 + r.int(60);
      for (let c = 0; c < copies; c++) b.add(b.lon[j], b.lat[j]);
    }
  }
  return b.shuffle(r).build();
}

/** The same set with integer weights 0..4 (exact sums whatever the order). */
function withWeights(p: PointSet, seed: number): PointSet {
  const r = rng(seed);
  const w = new Float64Array(p.n);
  for (let i = 0; i < p.n; i++) w[i] = r.int(5);
  return { ...p, weight: w };
}

function expectSame(got: OpticsResult, want: OpticsResult): void {
  expect(Buffer.from(got.order.buffer).equals(Buffer.from(want.order.buffer))).toBe(true);
  expect(Buffer.from(got.reachability.buffer).equals(Buffer.from(want.reachability.buffer))).toBe(true);
  expect(Buffer.from(got.coreDistance.buffer).equals(Buffer.from(want.coreDistance.buffer))).toBe(true);
  expect(Buffer.from(got.predecessor.buffer).equals(Buffer.from(want.predecessor.buffer))).toBe(true);
}

describe('OPTICS walk in index positions', () => {
  console.info(`optics walk seed ${SEED} (ROOST_SEED)`);
  const sets: [string, PointSet][] = [
    ['mid-latitude', midLatitudeSet(SEED)],
    ['pole', poleSet(SEED + 1)],
    ['antimeridian', antimeridianSet(SEED + 2)],
    ['duplicates', duplicatesSet(SEED + 3)],
    ['stacked', stackedSet(SEED + 4)],
    ['weighted', weightedSet(SEED + 5)],
    ['stacked weighted', withWeights(stackedSet(SEED + 6), SEED + 7)],
    ['realistic 20k', realisticSet(20_000, SEED + 8, { regionMeters: 20_000 })],
    // cells of hundreds of points
    ['crowded cells 12k', realisticSet(12_000, SEED + 9, { regionMeters: 2_500 })],
  ];
  const params: [number, number][] = [
    [250, 5],
    [400, 1],
    [300, 2.5],
    [500, 40],
  ];
  for (const [name, points] of sets) {
    it(`equals the plain indexed OPTICS bit for bit (${name}, ${points.n} points)`, () => {
      for (const [maxEpsMeters, minPoints] of params) {
        const got = optics(points, { maxEpsMeters, minPoints });
        const want = plainOptics(points, { maxEpsMeters, minPoints });
        expectSame(got, want);
        // the sets do reach the cases named: finite reachabilities, and ties on them
        const finite = Array.from(want.reachability).filter((r) => r < Infinity);
        expect(finite.length).toBeGreaterThan(0);
      }
    });
  }
  it('has ties in the reachability of the stacked set (the tie rule is exercised)', () => {
    const want = plainOptics(stackedSet(SEED + 4), { maxEpsMeters: 250, minPoints: 5 });
    const finite = Array.from(want.reachability).filter((r) => r < Infinity);
    expect(new Set(finite).size).toBeLessThan(finite.length);
  });
});

describe('OPTICS core distances on two threads', () => {
  const PATIENT = { startWaitMs: 120_000 };
  console.info(`optics two threads seed ${SEED} (ROOST_SEED)`);
  const sets: [string, PointSet, number, number][] = [
    ['realistic 20k', realisticSet(20_000, SEED + 10, { regionMeters: 20_000 }), 250, 5],
    ['stacked', stackedSet(SEED + 11), 250, 5],
    ['pole', poleSet(SEED + 12), 400, 3],
    ['antimeridian', antimeridianSet(SEED + 13), 300, 2.5],
  ];
  for (const [name, points, maxEpsMeters, minPoints] of sets) {
    it(`are the one-thread core distances bit for bit, the worker taking part (${name}, ${points.n} points)`, () => {
      const k = Math.ceil(minPoints);
      const index = new SphereIndex(points, maxEpsMeters);
      orderCellsByX(index);
      const one = new Float64Array(points.n).fill(Infinity);
      smallCoreCells(index, k, one, 0, index.cellCount);
      // chunks of a few cells, and the worker started before this thread takes any, so both compute some
      const chunkCells = Math.max(1, Math.floor(index.cellCount / 64));
      const two = sharedCoreDistances(index, k, { chunkCells, ...PATIENT });
      expect(two.workerChunks).toBeGreaterThan(0);
      expect(Buffer.from(two.out.buffer).equals(Buffer.from(one.buffer))).toBe(true);
      expect(one.some((d) => d < Infinity)).toBe(true);
    }, 120_000);
  }
  it('give OPTICS the same result on two threads as the plain indexed OPTICS (realistic 20k)', () => {
    const points = realisticSet(20_000, SEED + 14, { regionMeters: 20_000 });
    for (const threads of [1, 2] as const) {
      expectSame(optics(points, { maxEpsMeters: 250, minPoints: 5, threads }), plainOptics(points, { maxEpsMeters: 250, minPoints: 5 }));
    }
  }, 120_000);
});
