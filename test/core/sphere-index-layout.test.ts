/**
 * The grid layout of SphereIndex (point order, cell runs, neighbour-cell lists) equals the
 * layout written down plainly: point ids sorted by (⌊x / cell⌋, ⌊y / cell⌋, ⌊z / cell⌋, id) with
 * an ordinary comparison sort, cells as runs of equal grid coordinates, and each cell's
 * neighbour cells found by comparing grid coordinates of every pair of cells. The index builds
 * this layout with counting sorts over x slabs (a comparison sort for sparse slabs), moving the
 * unit vectors with the ids, and a sweep;
 * everything the clustering passes do follows from it, so equal layouts mean equal results.
 *
 * Seeded sets: dense patches (counting sorts), the whole globe at a small radius (sparse slabs),
 * the North Pole, ±180°, stacked duplicates, and a set mixing both kinds of slab.
 * Seed: ROOST_SEED (printed).
 */
import { describe, expect, it } from 'vitest';
import { SphereIndex } from '../../src/core/sphere-index.js';
import type { PointSet } from '../../src/core/types.js';
import { antimeridianSet, duplicatesSet, globalUniformSet, poleSet, realisticSet } from '../reference/seeded.js';

const SEED = Number(process.env.ROOST_SEED ?? 4242);

function plainLayout(index: SphereIndex): { sorted: number[]; cellStart: number[]; nbr: number[][] } {
  const inv = 1 / index.cellSize;
  const g = (i: number, axis: number): number => Math.floor(index.xyz[3 * i + axis] * inv);
  const ids = Array.from({ length: index.n }, (_, i) => i);
  ids.sort((a, b) => g(a, 0) - g(b, 0) || g(a, 1) - g(b, 1) || g(a, 2) - g(b, 2) || a - b);
  const cellStart: number[] = [];
  const cells: [number, number, number][] = [];
  ids.forEach((i, k) => {
    const last = cells.at(-1);
    if (!last || last[0] !== g(i, 0) || last[1] !== g(i, 1) || last[2] !== g(i, 2)) {
      cells.push([g(i, 0), g(i, 1), g(i, 2)]);
      cellStart.push(k);
    }
  });
  cellStart.push(index.n);
  const nbr = cells.map((c) => {
    const out: number[] = [];
    cells.forEach((d, j) => {
      if (Math.abs(c[0] - d[0]) <= 1 && Math.abs(c[1] - d[1]) <= 1 && Math.abs(c[2] - d[2]) <= 1) out.push(j);
    });
    return out;
  });
  return { sorted: ids, cellStart, nbr };
}

describe('SphereIndex layout', () => {
  console.info(`sphere index layout seed ${SEED} (ROOST_SEED)`);
  const mixed = (): PointSet => {
    const a = realisticSet(1500, SEED + 5, { regionMeters: 5_000 });
    const b = globalUniformSet(1500, SEED + 6);
    const lon = Float64Array.from([...a.lon, ...b.lon]);
    const lat = Float64Array.from([...a.lat, ...b.lat]);
    return { n: lon.length, lon, lat, weight: null };
  };
  const cases: [string, PointSet, number][] = [
    ['dense patches', realisticSet(3000, SEED, { regionMeters: 8_000 }), 250],
    ['whole globe, small radius', globalUniformSet(3000, SEED + 1), 2_000],
    ['North Pole', poleSet(SEED + 2), 150],
    ['±180°', antimeridianSet(SEED + 3), 150],
    ['stacked duplicates', duplicatesSet(SEED + 4), 100],
    ['dense and sparse slabs together', mixed(), 1_000],
  ];
  for (const [name, points, radius] of cases) {
    it(`equals the plainly sorted layout (${name})`, () => {
      const index = new SphereIndex(points, radius);
      const want = plainLayout(index);
      expect(Array.from(index.sorted)).toEqual(want.sorted);
      expect(Array.from(index.cellStart)).toEqual(want.cellStart);
      const got = want.nbr.map((_, c) => Array.from(index.nbr.subarray(index.nbrStart[c], index.nbrStart[c + 1])));
      expect(got).toEqual(want.nbr);
      // the vectors copied in cell order, each point's cell and each cell's grid coordinates
      const inv = 1 / index.cellSize;
      for (let c = 0; c < index.cellCount; c++) {
        for (let k = index.cellStart[c]; k < index.cellStart[c + 1]; k++) {
          const i = index.sorted[k];
          for (let axis = 0; axis < 3; axis++) expect(index.sxyz[3 * k + axis]).toBe(index.xyz[3 * i + axis]);
          expect(index.cellOf[i]).toBe(c);
          expect([index.cx[c], index.cy[c], index.cz[c]]).toEqual([0, 1, 2].map((axis) => Math.floor(index.xyz[3 * i + axis] * inv)));
        }
      }
    });
  }
});
