/**
 * The worker-thread side of stored datasets: reading posted bodies into store records; reading,
 * storing and placing large posts whole (src/jobs/store-batch.ts) with a store connection of the
 * thread's own, so that a batch of 100 000 observations does not hold up the main thread; making
 * a run's published layers (src/publish/publish.ts); indexing result layers for paging
 * (src/ogc/layer-index.ts); and
 * executing runs with a store connection of the thread's own (better-sqlite3 and pg both work in
 * worker threads), so that neither parsing nor loading, clustering and saving a large dataset
 * holds up the main thread. Track assignment is asked of the main thread over a message port,
 * where the run hooks live.
 */
import { Buffer } from 'node:buffer';
import type { MessagePort } from 'node:worker_threads';
import { readRecords, type RecordBatch, type RecordOptions } from '../ingest/records.js';
import { InputError, type InputProblem } from '../ingest/types.js';
import { openStore, StoreError, type StoreConfig, type StoreErrorCode } from '../storage/index.js';
import { BatchNotStored, HotspotLookup, storeBatch, type StoredBatch } from './store-batch.js';
import { publishLayerTexts, type PublishedLayers, type PublishOptions } from '../publish/publish.js';
import { joinPieces } from '../storage/layer-pieces.js';
import { executeRun, RunCancelled, runFailureMessage } from './execute.js';
import type { FinishedHotspot, TrackAssignment } from './hooks.js';
import { assignTracks } from './tracking.js';
import type { TrackSettings } from '../tracks/match.js';
import { defaultThreads } from '../trust/trials.js';
import { indexParts, type LayerIndexParts } from '../ogc/layer-index.js';

export interface RecordsTask {
  op: 'records';
  body: Uint8Array;
  options: RecordOptions;
}

export interface StoreTask {
  op: 'store';
  store: StoreConfig;
  datasetId: string;
  body: Uint8Array;
  options: RecordOptions;
  replace: boolean;
  partial: boolean;
}

export interface PublishTask {
  op: 'publish';
  store: StoreConfig;
  runId: string;
  options: PublishOptions;
}

/** A run's published layers, or null when the run has no stored points or hotspots layer. */
export type PublishOutcome = PublishedLayers | null;

export interface RunTask {
  op: 'run';
  store: StoreConfig;
  datasetId: string;
  runId: string;
  /** the claim under which the main thread took the run (its workerId) */
  claim: string;
  /** the main thread answers `{type:'tracks', hotspots}` with `{assignment}` or `{error}` */
  port: MessagePort;
  /** when given, the tracks are matched in this thread with these thresholds (RunHooks.tracksInThread), not asked of the main thread */
  tracks?: Partial<TrackSettings>;
}

export interface IndexTask {
  op: 'index';
  /** a layer's UTF-8 bytes, in memory shared with the main thread (not copied) */
  bytes: Uint8Array;
}

export type JobTask = RecordsTask | StoreTask | PublishTask | RunTask | IndexTask;

export type RecordsOutcome = { ok: true; batch: RecordBatch } | { ok: false; problems: InputProblem[]; total: number; message: string };

/**
 * A large post's outcome: stored (or refused as a whole for conflicts, see StoredBatch.result),
 * unreadable input, or a store failure, after which nothing of the batch is stored; `code` is the
 * StoreError's when the store refused it for a reason users can act on.
 */
export type StoreOutcome =
  | { ok: true; stored: StoredBatch }
  | { ok: false; input: { problems: InputProblem[]; total: number; message: string } }
  | { ok: false; failure: { code: StoreErrorCode | null; message: string; stack?: string } };

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

/** The which-hotspot lookups of this thread, kept across posts (a run's hotspots do not change). */
const lookup = new HotspotLookup();

async function storePost(task: StoreTask): Promise<StoreOutcome> {
  let batch: RecordBatch;
  try {
    batch = readRecords(Buffer.from(task.body.buffer, task.body.byteOffset, task.body.byteLength), task.options);
  } catch (err) {
    if (err instanceof InputError) return { ok: false, input: { problems: err.problems, total: err.total, message: err.message } };
    throw err;
  }
  let store;
  try {
    try {
      store = await openStore({ ...task.store, migrate: false, pgPoolSize: 1 });
    } catch (err) {
      throw new BatchNotStored(err);
    }
    return { ok: true, stored: await storeBatch(store, lookup, JSON.stringify(task.store), task.datasetId, batch, { replace: task.replace, partial: task.partial }) };
  } catch (err) {
    if (!(err instanceof BatchNotStored)) throw err; // the batch is stored; placing it failed
    const e = err.cause instanceof Error ? err.cause : err;
    return { ok: false, failure: { code: err.cause instanceof StoreError ? err.cause.code : null, message: e.message, stack: e.stack } };
  } finally {
    await store?.close();
  }
}

/** Reads a run's points and hotspots layers and makes its published layers (src/publish/publish.ts). */
async function publish(task: PublishTask): Promise<PublishOutcome> {
  const store = await openStore({ ...task.store, migrate: false, pgPoolSize: 1 });
  try {
    const points = await joinPieces(await store.getRunLayerPieces(task.runId, 'points'));
    const hotspots = await joinPieces(await store.getRunLayerPieces(task.runId, 'hotspots'));
    return points === null || hotspots === null ? null : publishLayerTexts(points, hotspots, task.options);
  } finally {
    await store.close();
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
    const tracks = task.tracks;
    const assign = tracks === undefined ? (h: FinishedHotspot[]) => askTracks(task.port, h) : (h: FinishedHotspot[]) => assignTracks({ store, dataset, run: current }, h, tracks);
    const done = await executeRun(store, current, dataset, { assignTracks: assign, trialThreads: defaultThreads() });
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
export default function work(task: JobTask): RecordsOutcome | LayerIndexParts | Promise<StoreOutcome> | Promise<PublishOutcome> | Promise<RunOutcomeMessage> {
  if (task.op === 'records') return records(task);
  if (task.op === 'index') return indexParts(task.bytes);
  if (task.op === 'store') return storePost(task);
  if (task.op === 'publish') return publish(task);
  return run(task);
}
