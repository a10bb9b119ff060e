/**
 * The run queue of one process: claims queued runs from the store (oldest first, each by exactly
 * one claimer across processes), executes at most `concurrency` at a time off the event loop
 * (in a worker thread with its own store connection; on this thread only for an in-memory store),
 * calls the run hooks, and records the outcome.
 *
 * Crash recovery (`recover`, at start-up): runs left 'running' by a process that died are put back
 * in the queue, since a run only reads stored observations and saving its result replaces any
 * earlier one, so running it again is safe. A run interrupted three times is marked failed
 * instead, so that a run that kills its process (memory, say) does not do so forever. On
 * PostgreSQL, where several instances share the queue, only runs without a heartbeat for
 * `staleMs` are touched (a live instance updates its runs every `heartbeatMs`).
 *
 * Cancelling: a queued run is cancelled at once; a running one here is stopped at once (its
 * worker thread is ended); a running one in another process stops at its next progress write or
 * heartbeat, which fail once the run is no longer 'running'.
 */
import { randomUUID } from 'node:crypto';
import { MessageChannel } from 'node:worker_threads';
import { hostname } from 'node:os';
import type { StoreConfig } from '../storage/index.js';
import { StoreError, type Run, type Store } from '../storage/store.js';
import { executeRun, RunCancelled } from './execute.js';
import type { FinishedHotspot, RunContext, RunHooks, RunOutcome } from './hooks.js';
import type { JobPool } from './job-pool.js';

export interface RunnerLog {
  info(obj: object, msg: string): void;
  warn(obj: object, msg: string): void;
  error(obj: object, msg: string): void;
}

export interface RunnerOptions {
  store: Store;
  hooks: RunHooks;
  /** runs executed at once by this process, at least 1 */
  concurrency: number;
  /** how worker threads open the store; null runs on this thread (required for an in-memory SQLite store) */
  storeConfig: StoreConfig | null;
  /** worker threads for runs (needed when storeConfig is given) */
  pool: JobPool | null;
  /** how often the queue is looked at for runs queued by other processes, milliseconds; default 2000 */
  pollMs?: number;
  /** how often a running run's heartbeat is written, milliseconds; default 30 000 */
  heartbeatMs?: number;
  /** PostgreSQL: a run without heartbeat this long is taken as interrupted, milliseconds; default 120 000 */
  staleMs?: number;
  log?: RunnerLog;
}

/** Interruptions after which a run is failed instead of queued again. */
export const MAX_INTERRUPTIONS = 3;

const INTERRUPTED = /^interrupted (\d+) times?/;

const quiet: RunnerLog = { info: () => undefined, warn: () => undefined, error: () => undefined };

interface InFlight {
  controller: AbortController;
  done: Promise<void>;
  /** why this process aborted it: 'cancel' (the run is cancelled) or 'close' (shutting down, queued again) */
  reason: 'cancel' | 'close' | null;
}

export class Runner {
  readonly workerId = `${hostname()}:${process.pid}:${randomUUID().slice(0, 8)}`;
  private readonly inFlight = new Map<string, InFlight>();
  private filling: Promise<void> | null = null;
  private refill = false;
  private closed = false;
  private poll: NodeJS.Timeout | null = null;
  private readonly log: RunnerLog;

  constructor(private readonly options: RunnerOptions) {
    if (!Number.isInteger(options.concurrency) || options.concurrency < 1) throw new RangeError(`concurrency must be a whole number ≥ 1, got ${options.concurrency}`);
    if (options.storeConfig !== null && options.pool === null) throw new RangeError('a worker pool is needed to execute runs in worker threads');
    this.log = options.log ?? quiet;
  }

  /** Runs executing in this process now. */
  get running(): string[] {
    return [...this.inFlight.keys()];
  }

  /**
   * Puts runs left 'running' by a dead process back in the queue (or fails those interrupted
   * MAX_INTERRUPTIONS times). @returns the ids queued again and failed
   */
  async recover(): Promise<{ requeued: string[]; failed: string[] }> {
    const { store } = this.options;
    const filter = store.engine === 'postgres' ? { staleMs: this.options.staleMs ?? 120_000 } : {};
    const ids = await store.requeueInterruptedRuns(filter);
    const requeued: string[] = [];
    const failed: string[] = [];
    for (const id of ids) {
      try {
        const run = await store.updateRun(id, {}, ['queued']);
        const times = Number(INTERRUPTED.exec(run.error ?? '')?.[1] ?? 0) + 1;
        if (times >= MAX_INTERRUPTIONS) {
          await store.updateRun(id, { status: 'failed', finishedAt: new Date().toISOString(), error: `interrupted ${times} times by the process stopping; not tried again` }, ['queued']);
          failed.push(id);
        } else {
          await store.updateRun(id, { error: `interrupted ${times} time${times > 1 ? 's' : ''} by the process stopping; queued again` }, ['queued']);
          requeued.push(id);
        }
      } catch (e) {
        if (!(e instanceof StoreError && e.code === 'conflict')) throw e; // claimed meanwhile by another instance
      }
    }
    if (ids.length > 0) this.log.warn({ requeued, failed }, 'runs interrupted by a stopped process');
    return { requeued, failed };
  }

  /** Starts taking runs: now and every pollMs. */
  start(): void {
    if (this.poll !== null || this.closed) return;
    this.poll = setInterval(() => this.wake(), this.options.pollMs ?? 2000);
    this.poll.unref();
    this.wake();
  }

  /** Looks at the queue now (after a run was created here). */
  wake(): void {
    if (this.closed) return;
    if (this.filling) {
      this.refill = true;
      return;
    }
    this.filling = this.fill()
      .catch((err: unknown) => this.log.error({ err }, 'could not take runs from the queue'))
      .finally(() => {
        this.filling = null;
        if (this.refill) {
          this.refill = false;
          this.wake();
        }
      });
  }

  private async fill(): Promise<void> {
    while (!this.closed && this.inFlight.size < this.options.concurrency) {
      const run = await this.options.store.claimNextRun(this.workerId);
      if (run === null) return;
      this.launch(run);
    }
  }

  private launch(run: Run): void {
    const entry: InFlight = { controller: new AbortController(), done: Promise.resolve(), reason: null };
    this.inFlight.set(run.id, entry);
    entry.done = this.execute(run, entry)
      .catch((err: unknown) => this.log.error({ err, run: run.id }, 'run bookkeeping failed'))
      .finally(() => {
        this.inFlight.delete(run.id);
        this.wake();
      });
  }

  private async execute(run: Run, entry: InFlight): Promise<void> {
    const { store, hooks } = this.options;
    const dataset = await store.getDataset(run.datasetId);
    if (dataset === null) return; // deleted with its runs
    const ctx: RunContext = { store, dataset, run };
    const signal = entry.controller.signal;
    const heartbeat = setInterval(() => {
      store.updateRun(run.id, {}, ['running']).catch((e: unknown) => {
        if (e instanceof StoreError) entry.controller.abort(new RunCancelled('the run is no longer running'));
      });
    }, this.options.heartbeatMs ?? 30_000);
    heartbeat.unref();
    this.log.info({ run: run.id, dataset: dataset.id }, 'run started');
    let failure: string | null = null;
    let cancelled = false;
    try {
      if (this.options.storeConfig !== null) {
        const { port1, port2 } = new MessageChannel();
        port1.on('message', (m: { hotspots: FinishedHotspot[] }) => {
          hooks.assignTracks(ctx, m.hotspots).then(
            (assignment) => port1.postMessage({ assignment }),
            (err: unknown) => port1.postMessage({ error: `track assignment failed: ${(err as Error).message}` }),
          );
        });
        try {
          const res = await this.options.pool!.run({ store: this.options.storeConfig, datasetId: run.datasetId, runId: run.id, port: port2 }, signal);
          if (!res.ok) {
            if (res.cancelled) cancelled = true;
            else failure = res.message;
          }
        } finally {
          port1.close();
        }
      } else {
        await executeRun(store, run, dataset, { signal, assignTracks: (h) => hooks.assignTracks(ctx, h) });
      }
    } catch (err) {
      if (err instanceof RunCancelled || signal.aborted) cancelled = true;
      else failure = (err as Error).message;
    } finally {
      clearInterval(heartbeat);
    }

    if (entry.reason === 'close') {
      // shutting down: the run goes back to the queue for the next start (or another instance)
      await store.updateRun(run.id, { status: 'queued', progress: 0, startedAt: null }, ['running']).catch(() => undefined);
      return;
    }
    if (failure !== null) {
      this.log.warn({ run: run.id, error: failure }, 'run failed');
      await store.updateRun(run.id, { status: 'failed', error: failure, finishedAt: new Date().toISOString() }, ['running']).catch((e: unknown) => {
        if (!(e instanceof StoreError && e.code === 'conflict')) throw e;
        cancelled = true;
      });
    }
    const final = (await store.getRun(run.datasetId, run.id)) ?? run;
    const status = final.status === 'succeeded' || final.status === 'failed' || final.status === 'cancelled' ? final.status : cancelled ? 'cancelled' : 'failed';
    this.log.info({ run: run.id, status }, 'run over');
    const outcome: RunOutcome = { status, summary: final.summary, error: final.error };
    try {
      await hooks.afterRun({ ...ctx, run: final }, outcome);
    } catch (err) {
      this.log.error({ err, run: run.id }, 'after-run hook failed (the run keeps its outcome)');
    }
  }

  /**
   * Cancels a queued or running run of the dataset.
   * @returns the run as it is now, or null when the dataset has no such run
   * @throws StoreError 'conflict' when the run is already over
   */
  async cancel(datasetId: string, runId: string): Promise<Run | null> {
    const { store } = this.options;
    const run = await store.getRun(datasetId, runId);
    if (run === null) return null;
    const updated = await store.updateRun(runId, { status: 'cancelled', finishedAt: new Date().toISOString(), error: 'cancelled on request' }, ['queued', 'running']);
    const entry = this.inFlight.get(runId);
    if (entry) {
      entry.reason = 'cancel';
      entry.controller.abort(new RunCancelled());
    }
    return updated;
  }

  /** Resolves when no run executes in this process (for tests and shutdown). */
  async idle(): Promise<void> {
    while (this.inFlight.size > 0 || this.filling) {
      await Promise.all([...this.inFlight.values()].map((e) => e.done));
      await this.filling;
    }
  }

  /** Stops taking runs; runs executing here are stopped and queued again. */
  async close(): Promise<void> {
    this.closed = true;
    if (this.poll) clearInterval(this.poll);
    await this.filling;
    for (const e of this.inFlight.values()) {
      e.reason = 'close';
      e.controller.abort(new Error('the service is shutting down'));
    }
    await Promise.all([...this.inFlight.values()].map((e) => e.done));
  }
}
