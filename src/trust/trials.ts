/**
 * Running simulations and resamples, in this thread or spread over worker threads. Each
 * simulation draws from its own seeded stream (src/trust/random.ts), and results are put back in
 * simulation order, so the outcome is the same whatever the number of threads.
 */
import { availableParallelism } from 'node:os';
import { entryBeside } from '../workers/location.js';
import { simulatedMaxima, type ChanceSpec } from './chance.js';
import { resampleJaccards, type StabilitySpec } from './stability.js';
import type { TrialTask } from './trial-worker.js';

export type Trials = { kind: 'chance'; spec: ChanceSpec } | { kind: 'stability'; spec: StabilitySpec };

/** Called after each finished simulation or resample with the number done and the total. */
export type TrialProgress = (done: number, total: number) => void;

/** Width of one trial's result: 1 for a simulation, one value per hotspot for a resample. */
function width(t: Trials): number {
  return t.kind === 'chance' ? 1 : t.spec.hotspots;
}

/** Runs `count` trials in this thread, one after another. */
export function runTrialsHere(t: Trials, count: number, onProgress?: TrialProgress): Float64Array {
  let done = 0;
  const each = (): void => onProgress?.(++done, count);
  return t.kind === 'chance' ? simulatedMaxima(t.spec, 0, count, each) : resampleJaccards(t.spec, 0, count, each);
}

/** Threads used when none are named: the machine's parallelism. */
export function defaultThreads(): number {
  return Math.max(1, availableParallelism());
}

/**
 * Runs `count` trials over `threads` worker threads (in this thread when threads is 1), in
 * batches of a few trials each so the threads stay busy to the end and progress can be told.
 */
export async function runTrials(t: Trials, count: number, threads: number, onProgress?: TrialProgress): Promise<Float64Array> {
  if (threads <= 1 || count <= 1) return runTrialsHere(t, count, onProgress);
  const { filename, execArgv } = entryBeside(import.meta.url, 'trial-worker');
  // loaded only when threads are used, so a plain run does not pay for loading it
  const { Piscina } = await import('piscina');
  const pool = new Piscina<TrialTask, Float64Array>({ filename, execArgv, minThreads: threads, maxThreads: threads, concurrentTasksPerWorker: 1 });
  const w = width(t);
  const out = new Float64Array(count * w);
  const batch = Math.max(1, Math.min(10, Math.ceil(count / (threads * 4))));
  let done = 0;
  try {
    const tasks: Promise<void>[] = [];
    for (let from = 0; from < count; from += batch) {
      const to = Math.min(count, from + batch);
      const task = { ...t, from, to } as TrialTask;
      tasks.push(
        pool.run(task).then((values) => {
          out.set(values, from * w);
          done += to - from;
          onProgress?.(done, count);
        }),
      );
    }
    await Promise.all(tasks);
  } finally {
    await pool.destroy();
  }
  return out;
}
