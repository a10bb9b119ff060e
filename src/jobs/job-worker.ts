/**
 * The worker-thread side of stored datasets: reading posted bodies into store records, and
 * executing runs with a store connection of the thread's own (better-sqlite3 and pg both work in
 * worker threads), so that neither parsing nor loading, clustering and saving a large dataset
 * holds up the main thread. Track assignment is asked of the main thread over a message port,
 * where the run hooks live.
 */
import { Buffer } from 'node:buffer';
import type { MessagePort } from 'node:worker_threads';
import { readRecords, type RecordBatch, type RecordOptions } from '../ingest/records.js';
import { InputError, type InputProblem } from '../ingest/types.js';
import { openStore, type StoreConfig } from '../storage/index.js';
import { executeRun, RunCancelled, runFailureMessage } from './execute.js';
import type { FinishedHotspot, TrackAssignment } from './hooks.js';
import { defaultThreads } from '../trust/trials.js';

export interface RecordsTask {
  op: 'records';
  body: Uint8Array;
  options: RecordOptions;
}

export interface RunTask {
  op: 'run';
  store: StoreConfig;
  datasetId: string;
  runId: string;
  /** the claim under which the main thread took the run (its workerId) */
  claim: string;
  /** the main thread answers `{type:'tracks', hotspots}` with `{assignment}` or `{error}` */
  port: MessagePort;
}

export type JobTask = RecordsTask | RunTask;

export type RecordsOutcome = { ok: true; batch: RecordBatch } | { ok: false; problems: InputProblem[]; total: number; message: string };

export type RunOutcomeMessage =
  | { ok: true; summary: Record<string, unknown>; timings: Record<string, number>; hotspots: number }
  | { ok: false; cancelled: boolean; message: string; internal?: { message: string; stack?: string } };

function records(task: RecordsTask): RecordsOutcome {
  try {
    return { ok: true, batch: readRecords(Buffer.from(task.body.buffer, task.body.byteOffset, task.body.byteLength), task.options) };
  } catch (err) {
    if (err instanceof InputError) return { ok: false, problems: err.problems, total: err.total, message: err.message };
    throw err;
  }
}

function askTracks(port: MessagePort, hotspots: FinishedHotspot[]): Promise<TrackAssignment> {
  return new Promise((resolve, reject) => {
    port.once('message', (m: { assignment?: TrackAssignment; error?: string }) => {
      if (m.assignment) resolve(m.assignment);
      else reject(new Error(m.error ?? 'track assignment failed'));
    });
    port.postMessage({ type: 'tracks', hotspots });
  });
}

async function run(task: RunTask): Promise<RunOutcomeMessage> {
  const store = await openStore({ ...task.store, migrate: false, pgPoolSize: 2 });
  try {
    const [dataset, current] = await Promise.all([store.getDataset(task.datasetId), store.getRun(task.datasetId, task.runId)]);
    if (dataset === null || current === null) return { ok: false, cancelled: true, message: 'the dataset or run was deleted' };
    if (current.status !== 'running') return { ok: false, cancelled: true, message: `the run is ${current.status}` };
    if (current.workerId !== task.claim) return { ok: false, cancelled: true, message: 'the run was taken over by another process' };
    const done = await executeRun(store, current, dataset, { assignTracks: (h) => askTracks(task.port, h), trialThreads: defaultThreads() });
    return { ok: true, ...done };
  } catch (err) {
    const e = err instanceof Error ? err : new Error(String(err));
    if (err instanceof RunCancelled) return { ok: false, cancelled: true, message: e.message };
    // what users may read goes in the run; the service's own failures go to the log, with the run id
    const failure = runFailureMessage(err, task.runId);
    return { ok: false, cancelled: false, message: failure.message, ...(failure.internal ? { internal: { message: e.message, stack: e.stack } } : {}) };
  } finally {
    task.port.close();
    await store.close();
  }
}

/** Runs one task; the default export piscina calls. */
export default function work(task: JobTask): RecordsOutcome | Promise<RunOutcomeMessage> {
  return task.op === 'records' ? records(task) : run(task);
}
