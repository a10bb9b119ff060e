import { describe, expect, it } from 'vitest';
import { ChordTree } from '../../src/core/chord-tree.js';
import { unitVectors } from '../../src/core/haversine.js';
import { pointSet, type PointSet } from '../../src/core/types.js';
import { antimeridianSet, duplicatesSet, globalUniformSet, midLatitudeSet, poleSet, realisticSet } from '../reference/seeded.js';

/** Seed of the property test below; ROOST_TEST_SEED varies it. */
const SEED = Number(process.env.ROOST_TEST_SEED ?? 20_261_203);

/**
 * Brute-force reference: the smallest squared chord to every other point, each product computed
 * as the tree computes it (other minus query, squared and summed), so the answer must be equal,
 * not merely close.
 */
function bruteNearestChord2(xyz: Float64Array): Float64Array {
  const n = xyz.length / 3;
  const out = new Float64Array(n).fill(Infinity);
  for (let i = 0; i < n; i++) {
    for (let j = 0; j < n; j++) {
      if (j === i) continue;
      const dx = xyz[3 * j] - xyz[3 * i], dy = xyz[3 * j + 1] - xyz[3 * i + 1], dz = xyz[3 * j + 2] - xyz[3 * i + 2];
      const d2 = dx * dx + dy * dy + dz * dz;
      if (d2 < out[i]) out[i] = d2;
    }
  }
  return out;
}

describe('ChordTree.nearestChord2All', () => {
  const sets: [string, PointSet][] = [
    ['mid-latitude', midLatitudeSet(31)],
    ['pole', poleSet(32)],
    ['antimeridian', antimeridianSet(33)],
    ['duplicates', duplicatesSet(34)],
    ['global', globalUniformSet(1200, 35)],
    [`patches and background, seed ${SEED}`, realisticSet(3000, SEED)],
  ];

  it('equals brute force exactly, and kthChord2All(1), on seeded sets', () => {
    console.log(`chord-tree nearest: seed ${SEED} (set ROOST_TEST_SEED to vary)`);
    for (const [name, p] of sets) {
      const xyz = unitVectors(p.lon, p.lat);
      const tree = new ChordTree(xyz);
      const got = Array.from(tree.nearestChord2All());
      expect(got, name).toEqual(Array.from(bruteNearestChord2(xyz)));
      expect(got, name).toEqual(Array.from(tree.kthChord2All(1)));
    }
  });

  it('gives 0 for shared positions and Infinity when there is no other point', () => {
    const shared = pointSet([3, 3, 4, 5, 5, 5], [1, 1, 2, 2, 2, 2]);
    const d = new ChordTree(unitVectors(shared.lon, shared.lat)).nearestChord2All();
    expect([d[0], d[1], d[3], d[4], d[5]]).toEqual([0, 0, 0, 0, 0]);
    expect(d[2]).toBeGreaterThan(0);
    expect(Array.from(new ChordTree(unitVectors(Float64Array.of(7), Float64Array.of(8))).nearestChord2All())).toEqual([Infinity]);
    expect(new ChordTree(new Float64Array(0)).nearestChord2All().length).toBe(0);
  });
});
