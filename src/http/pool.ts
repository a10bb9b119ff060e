/**
 * The pool of worker threads that does the heavy work, with a bounded queue and cancellation.
 * Its threads start from the shared worker entry (src/workers/entry.ts).
 */
import { Piscina } from 'piscina';
import { workerEntry } from '../workers/location.js';
import type { ArrivingBody } from './arriving.js';
import type { WorkResult, WorkTask } from './work.js';

export interface WorkPool {
  /**
   * Runs a task in a worker. The body's ArrayBuffer is transferred (unusable afterwards here).
   * Aborting `signal` rejects at once and, when the task is running, ends its worker thread
   * (a fresh one replaces it), which is the only way to stop synchronous work.
   * Rejects with QueueFullError when `queueSize` tasks already wait.
   */
  run(task: WorkTask, signal: AbortSignal): Promise<WorkResult>;
  /**
   * Runs a clustering on a body while it arrives (`task.arriving`; src/http/arriving.ts). While the
   * worker waits for bytes it gives its thread back as soon as another task is run with every
   * thread busy, and answers `read-again`.
   */
  runArriving(task: WorkTask, arriving: ArrivingBody, signal: AbortSignal): Promise<WorkResult>;
  /** whether a thread is free now (no task running or waiting on it) */
  readonly idle: boolean;
  /** worker threads */
  readonly threads: number;
  /** tasks waiting for a free worker */
  readonly queued: number;
  /** share of time the workers were busy since start, 0–1 */
  readonly utilization: number;
  /** stops the workers; tasks still running are cancelled */
  close(): Promise<void>;
}

/** The pool's waiting line is full. */
export class QueueFullError extends Error {
  constructor() {
    super('every worker is busy and the waiting line is full');
    this.name = 'QueueFullError';
  }
}

export interface WorkPoolOptions {
  /** worker threads, at least 1 */
  workers: number;
  /** tasks that may wait for a worker, at least 0 */
  queueSize: number;
}

/** Starts `options.workers` threads at once, so the first request does not pay their start-up. */
export function createWorkPool(options: WorkPoolOptions): WorkPool {
  const { filename, execArgv } = workerEntry();
  const piscina = new Piscina<WorkTask, WorkResult>({
    filename,
    execArgv,
    minThreads: options.workers,
    maxThreads: options.workers,
    // a backstop: the service already turns requests away before their upload when
    // workers + queueSize requests are in hand
    maxQueue: options.queueSize + options.workers,
    concurrentTasksPerWorker: 1,
    idleTimeout: 2 ** 31 - 1,
  });
  /** tasks given to piscina and not yet settled */
  let active = 0;
  /** bodies being read while they arrive */
  const reading = new Set<ArrivingBody>();
  const start = async (task: WorkTask, signal: AbortSignal): Promise<WorkResult> => {
    // a shared body is shared, not transferred
    const transferList = task.body.buffer instanceof ArrayBuffer ? [task.body.buffer] : [];
    active++;
    try {
      return await piscina.run(task, { signal, transferList });
    } catch (err) {
      if (err instanceof Error && /queue is at limit|no task queue available/i.test(err.message)) throw new QueueFullError();
      throw err;
    } finally {
      active--;
    }
  };
  return {
    run(task, signal) {
      // a thread waiting for an upload gives way to a task that would otherwise wait for it
      if (active >= options.workers) for (const a of reading) a.askToYield();
      return start(task, signal);
    },
    async runArriving(task, arriving, signal) {
      reading.add(arriving);
      try {
        return await start(task, signal);
      } finally {
        reading.delete(arriving);
      }
    },
    get idle() {
      return active < options.workers;
    },
    get threads() {
      return options.workers;
    },
    get queued() {
      return piscina.queueSize;
    },
    get utilization() {
      return piscina.utilization;
    },
    async close() {
      await piscina.destroy();
    },
  };
}
