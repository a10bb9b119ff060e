import { describe, expect, it } from 'vitest';
import { SphereIndex } from '../../src/core/sphere-index.js';
import { pointSet } from '../../src/core/types.js';
import { nearestNeighbourMeters } from '../../src/geometry/clark-evans.js';
import { startNearestNeighbours } from '../../src/geometry/nearest-parallel.js';
import { antimeridianSet, realisticSet } from '../reference/seeded.js';

/** Seed of the sets below; ROOST_TEST_SEED varies it. */
const SEED = Number(process.env.ROOST_TEST_SEED ?? 20_261_203);
/** A worker started from source loads TypeScript first; on a busy machine that can take seconds. */
const PATIENT = { startPatienceMs: 120_000 };

const bytes = (a: Float64Array): Buffer => Buffer.from(a.buffer, a.byteOffset, a.byteLength);

describe('startNearestNeighbours', () => {
  it('gives the same bytes on one thread and with a worker thread, with and without an index', () => {
    console.log(`nearest on two threads: seed ${SEED} (set ROOST_TEST_SEED to vary)`);
    const p = realisticSet(30_000, SEED);
    const index = new SphereIndex(p, 250);
    const one = startNearestNeighbours(p, index, { threads: 1 });
    const alone = one.collect();
    expect(one.computedIn).toBe('here');
    const two = startNearestNeighbours(p, index, { threads: 2, minPoints: 1_000, ...PATIENT });
    const beside = two.collect();
    expect(two.computedIn).toBe('worker');
    expect(bytes(beside).equals(bytes(alone))).toBe(true);
    expect(bytes(alone).equals(bytes(nearestNeighbourMeters(p, index)))).toBe(true);

    const q = antimeridianSet(SEED);
    const noIndex = startNearestNeighbours(q, undefined, { threads: 2, minPoints: 2, ...PATIENT });
    expect(bytes(noIndex.collect()).equals(bytes(nearestNeighbourMeters(q)))).toBe(true);
    expect(noIndex.computedIn).toBe('worker');
  });

  it('computes on the calling thread below the size that pays for a worker, for one thread, and by default', () => {
    const p = pointSet([0, 0, 1], [0, 0.001, 0]);
    const small = startNearestNeighbours(p, undefined, { threads: 2 });
    expect(Array.from(small.collect())).toEqual(Array.from(nearestNeighbourMeters(p)));
    expect(small.computedIn).toBe('here');
    // one thread unless two are asked for, whatever the size
    const q = realisticSet(3_000, SEED + 2);
    const byDefault = startNearestNeighbours(q, undefined, { minPoints: 2 });
    expect(bytes(byDefault.collect()).equals(bytes(nearestNeighbourMeters(q)))).toBe(true);
    expect(byDefault.computedIn).toBe('here');
    expect(() => startNearestNeighbours(p, new SphereIndex(pointSet([0], [0]), 100))).toThrow(/same points/);
  });

  it('a cancelled worker leaves the caller free to compute the distances itself', () => {
    const p = realisticSet(5_000, SEED + 1);
    const pending = startNearestNeighbours(p, undefined, { threads: 2, minPoints: 2, startPatienceMs: 0 });
    pending.cancel();
    expect(bytes(pending.collect()).equals(bytes(nearestNeighbourMeters(p)))).toBe(true);
  });
});
