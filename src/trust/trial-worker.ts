/**
 * The worker-thread side of the simulations and resamples: one task is a run of consecutive
 * simulations (or resamples), whose results come back as one Float64Array.
 */
import { simulatedMaxima, type ChanceSpec } from './chance.js';
import { resampleJaccards, type StabilitySpec } from './stability.js';

export type TrialTask = { kind: 'chance'; spec: ChanceSpec; from: number; to: number } | { kind: 'stability'; spec: StabilitySpec; from: number; to: number };

/** Runs one task; the default export piscina calls. */
export default function trials(task: TrialTask): Float64Array {
  return task.kind === 'chance' ? simulatedMaxima(task.spec, task.from, task.to) : resampleJaccards(task.spec, task.from, task.to);
}
