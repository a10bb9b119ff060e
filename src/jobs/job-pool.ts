/**
 * The threads that do the heavy work of stored datasets (src/jobs/job-worker.ts): one per
 * concurrent run plus one, so that reading a posted batch never waits behind a long run.
 * Its threads start from the shared worker entry (src/workers/entry.ts).
 */
import { Piscina } from 'piscina';
import { workerEntry } from '../workers/location.js';
import type { LayerIndexParts } from '../ogc/layer-index.js';
import type { JobTask, PublishOutcome, PublishTask, RecordsOutcome, RecordsTask, RunOutcomeMessage, RunTask, StoreOutcome, StoreTask } from './job-worker.js';

export interface JobPool {
  /** Reads a body into records in a worker; the body's ArrayBuffer is transferred. */
  records(task: Omit<RecordsTask, 'op'>): Promise<RecordsOutcome>;
  /**
   * Reads, stores (one transaction, on the thread's own connection) and places a large post; the
   * body's ArrayBuffer is transferred. Not cancelled when the client goes away: the batch is
   * stored whole or not at all either way.
   */
  store(task: Omit<StoreTask, 'op'>): Promise<StoreOutcome>;
  /** Makes a run's published layers from its stored layers, in a thread with its own store connection. */
  publish(task: Omit<PublishTask, 'op'>): Promise<PublishOutcome>;
  /** Indexes a result layer's bytes for paging (src/ogc/layer-index.ts); the bytes are shared with the thread, not copied. */
  index(bytes: Uint8Array): Promise<LayerIndexParts>;
  /** Executes a claimed run in a worker; aborting `signal` ends the worker thread at once. */
  run(task: Omit<RunTask, 'op'>, signal: AbortSignal): Promise<RunOutcomeMessage>;
  close(): Promise<void>;
}

/** Posted batches, published-layer builds and layer indexes waiting beyond those being worked on (our choice; more are turned away). */
export const MAX_WAITING_BATCHES = 16;

/** The pool's waiting line for posted batches is full. */
export class JobQueueFull extends Error {
  constructor() {
    super('every thread reading posted batches is busy and the waiting line is full');
    this.name = 'JobQueueFull';
  }
}

/** A pool of `runs + 1` threads, started on first use and stopped after a minute idle. */
export function createJobPool(runs: number): JobPool {
  const { filename, execArgv } = workerEntry();
  const piscina = new Piscina<JobTask, RecordsOutcome | StoreOutcome | PublishOutcome | LayerIndexParts | RunOutcomeMessage>({
    filename,
    execArgv,
    minThreads: 0,
    maxThreads: runs + 1,
    idleTimeout: 60_000,
    concurrentTasksPerWorker: 1,
    // runs never wait here (the runner hands over at most `runs`), so this bounds posted batches
    maxQueue: MAX_WAITING_BATCHES + runs,
  });
  const queued = async <T>(task: JobTask, body?: Uint8Array): Promise<T> => {
    try {
      return (await piscina.run(task, body === undefined ? {} : { transferList: [body.buffer as ArrayBuffer] })) as T;
    } catch (err) {
      if (err instanceof Error && /queue is at limit|no task queue available/i.test(err.message)) throw new JobQueueFull();
      throw err;
    }
  };
  return {
    records: (task) => queued<RecordsOutcome>({ op: 'records', ...task }, task.body),
    store: (task) => queued<StoreOutcome>({ op: 'store', ...task }, task.body),
    publish: (task) => queued<PublishOutcome>({ op: 'publish', ...task }),
    index: (bytes) => queued<LayerIndexParts>({ op: 'index', bytes }),
    async run(task, signal) {
      return (await piscina.run({ op: 'run', ...task }, { signal, transferList: [task.port as unknown as ArrayBuffer] })) as RunOutcomeMessage;
    },
    async close() {
      await piscina.destroy();
    },
  };
}
