/**
 * The worker-thread side of `startNearestNeighbours`: the nearest-neighbour distances of one
 * point set, written into shared memory, with the progress in a shared state word.
 */
import { workerData } from 'node:worker_threads';
import { ChordTree } from '../core/chord-tree.js';
import { metersForChord2 } from '../core/haversine.js';
import { NEAREST_DONE, NEAREST_FAILED, NEAREST_STARTED, type NearestTask } from './nearest-parallel.js';

const { xyz, out, state } = workerData as NearestTask;
Atomics.store(state, 0, NEAREST_STARTED);
Atomics.notify(state, 0);
try {
  const best2 = new ChordTree(xyz).nearestChord2All();
  for (let i = 0; i < best2.length; i++) out[i] = metersForChord2(best2[i]);
  Atomics.store(state, 0, NEAREST_DONE);
} catch {
  // the caller computes the distances itself
  Atomics.store(state, 0, NEAREST_FAILED);
}
Atomics.notify(state, 0);
