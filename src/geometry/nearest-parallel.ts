/**
 * The Clark–Evans nearest-neighbour pass, optionally on a second core: started before the hulls
 * are drawn and collected after them, so with two threads the two largest parts of the figures
 * stage overlap. One thread is the default: on the shared two-core machine at its usual load
 * (load average 8–13) two threads took longer in wall time than one, besides 0.4–0.5 s more CPU
 * (the worker's start and a copy of the unit vectors); see the figures table of
 * test/bench/results.md. Two threads pay only on an otherwise idle machine.
 *
 * The distances are the same bytes wherever they are computed: the worker runs the same search
 * (`ChordTree.nearestChord2All`) over a copy of the same unit vectors and converts with the same
 * `metersForChord2`. The caller stays synchronous: collecting blocks on a shared state word
 * (`Atomics.wait`), which is allowed on Node's main thread and in workers. Whenever the worker
 * cannot help (it does not start in time, fails, or stalls), the distances are computed on the
 * calling thread instead, so a result always comes back.
 */
import type { Worker } from 'node:worker_threads';
import { unitVectors } from '../core/haversine.js';
import type { SphereIndex } from '../core/sphere-index.js';
import type { PointSet } from '../core/types.js';
import { startWorkerBeside } from '../workers/location.js';
import { nearestNeighbourMeters } from './clark-evans.js';

/** Below this many points the pass takes tens of milliseconds and a worker does not pay for its start. */
export const NEAREST_PARALLEL_MIN_POINTS = 200_000;

/** State word values: not started yet, searching, distances written, failed. */
export const NEAREST_WAITING = 0;
export const NEAREST_STARTED = 1;
export const NEAREST_DONE = 2;
export const NEAREST_FAILED = 3;

/** How long collecting waits by default for a worker that has not started yet before computing itself, ms. */
const START_PATIENCE_MS = 5_000;
/** How long collecting waits for a started worker before computing here, ms (a stall, not a slow search). */
const FINISH_PATIENCE_MS = 60_000;

/** What the worker receives: unit vectors, the output and the state word, all in shared memory. */
export interface NearestTask {
  xyz: Float64Array;
  out: Float64Array;
  state: Int32Array;
}

/** Options of `startNearestNeighbours`. */
export interface NearestOptions {
  /** 1 (default) computes on the calling thread when collected; 2 uses a worker from `minPoints` points on */
  threads?: 1 | 2;
  /** smallest point set that gets a worker, default NEAREST_PARALLEL_MIN_POINTS */
  minPoints?: number;
  /** how long collecting waits for a worker that has not started yet before computing itself, ms, default 5000 */
  startPatienceMs?: number;
}

/** Nearest-neighbour distances being computed; `collect` returns them (once). */
export interface PendingNearest {
  /** distance in metres from each observation to its nearest other one, input order (see `nearestNeighbourMeters`) */
  collect(): Float64Array;
  /** stops a worker whose result is no longer wanted (collecting afterwards computes on the calling thread) */
  cancel(): void;
  /** where the distances were computed, known after `collect`: 'worker' or 'here' */
  readonly computedIn: 'worker' | 'here' | null;
}

/** The worker (see startWorkerBeside). */
function startWorker(task: NearestTask): Worker {
  return startWorkerBeside(import.meta.url, 'nearest-worker', { workerData: task });
}

/**
 * Starts the nearest-neighbour pass for Clark–Evans. With two threads (asked for) and at least
 * `minPoints` points the search runs in a worker thread while the caller goes on (drawing hulls);
 * otherwise it runs when collected.
 *
 * @param points observations (degrees)
 * @param index optional SphereIndex over the same points, whose unit vectors are reused
 * @param options threads (1 or 2, default 1), the size from which a worker is used, and how long
 *   to wait for the worker to start
 */
export function startNearestNeighbours(points: PointSet, index?: SphereIndex, options: NearestOptions = {}): PendingNearest {
  const threads = options.threads ?? 1;
  const minPoints = options.minPoints ?? NEAREST_PARALLEL_MIN_POINTS;
  const startPatienceMs = options.startPatienceMs ?? START_PATIENCE_MS;
  if (index && index.n !== points.n) {
    throw new RangeError(`the index covers ${index.n} points but the point set has ${points.n}; build it over the same points`);
  }
  let computedIn: 'worker' | 'here' | null = null;
  const here = (): Float64Array => {
    computedIn = 'here';
    return nearestNeighbourMeters(points, index);
  };
  if (threads === 1 || points.n < Math.max(2, minPoints)) {
    return { collect: here, cancel: () => {}, get computedIn() { return computedIn; } };
  }

  const n = points.n;
  const xyz = new Float64Array(new SharedArrayBuffer(n * 3 * 8));
  xyz.set(index ? index.xyz : unitVectors(points.lon, points.lat));
  const out = new Float64Array(new SharedArrayBuffer(n * 8));
  const state = new Int32Array(new SharedArrayBuffer(4));
  const task: NearestTask = { xyz, out, state };
  let worker: Worker | null = startWorker(task);
  // a worker that fails to start reports here; collecting then finds it not started and computes itself
  worker.on('error', () => {});
  worker.unref();
  const stop = (): void => {
    if (worker !== null) void worker.terminate();
    worker = null;
  };
  const collect = (): Float64Array => {
    if (worker === null) return here(); // cancelled, or collected before
    if (Atomics.load(state, 0) === NEAREST_WAITING) Atomics.wait(state, 0, NEAREST_WAITING, startPatienceMs);
    const deadline = Date.now() + FINISH_PATIENCE_MS;
    let s = Atomics.load(state, 0);
    while (s === NEAREST_STARTED && Date.now() < deadline) {
      Atomics.wait(state, 0, NEAREST_STARTED, deadline - Date.now());
      s = Atomics.load(state, 0);
    }
    stop();
    if (s !== NEAREST_DONE) return here();
    computedIn = 'worker';
    return Float64Array.from(out);
  };
  return { collect, cancel: stop, get computedIn() { return computedIn; } };
}
