/**
 * The run queue of one process: claims queued runs from the store (oldest first, each by exactly
 * one claimer across processes), executes at most `concurrency` at a time off the event loop
 * (in a worker thread with its own store connection; on this thread only for an in-memory store),
 * calls the run hooks, and records the outcome.
 *
 * Crash recovery: every claim is a lease renewed every `heartbeatMs` (src/jobs/lease.ts). At
 * start-up and every heartbeat / 4, any process puts runs whose lease ran out (their process
 * died) back in the queue and claims from it, since a run only reads stored observations and
 * saving its result replaces any earlier one, so running it again is safe. A run interrupted
 * MAX_INTERRUPTIONS times is marked failed instead, so that a run that kills its process (memory,
 * say) does not do so forever. This works the same on PostgreSQL and on a SQLite file shared by
 * several processes: a run is running again elsewhere at most 1.75 heartbeats after its process's
 * last renewal.
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
import { executeRun, RunCancelled, runFailureMessage } from './execute.js';
import type { FinishedHotspot, RunContext, RunHooks, RunOutcome } from './hooks.js';
import type { JobPool } from './job-pool.js';
import { DEFAULT_HEARTBEAT_MS, keepLease, leaseMs, MAX_INTERRUPTIONS, takeoverScanMs } from './lease.js';

export { MAX_INTERRUPTIONS } from './lease.js';

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
  /** time between renewals of a running run's lease, milliseconds; default DEFAULT_HEARTBEAT_MS (see src/jobs/lease.ts) */
  heartbeatMs?: number;
  log?: RunnerLog;
}

const quiet: RunnerLog = { info: () => undefined, warn: () => undefined, error: () => undefined };

interface InFlight {
  runId: string;
  controller: AbortController;
  done: Promise<void>;
  /**
   * why this process aborted it: 'cancel' (the run is cancelled), 'close' (shutting down, queued
   * again) or 'lost' (its lease was taken over: the run is another process's now)
   */
  reason: 'cancel' | 'close' | 'lost' | null;
}

export class Runner {
  /** this process's run queue; each claim adds a number of its own (see claimId) */
  readonly workerId = `${hostname()}:${process.pid}:${randomUUID().slice(0, 8)}`;
  /** runs executing here, by claim id */
  private readonly inFlight = new Map<string, InFlight>();
  private claims = 0;
  private filling: Promise<void> | null = null;
  private refill = false;
  private closed = false;
  private poll: NodeJS.Timeout | null = null;
  private scan: NodeJS.Timeout | null = null;
  private scanning = false;
  private readonly heartbeatMs: number;
  private readonly log: RunnerLog;

  constructor(private readonly options: RunnerOptions) {
    if (!Number.isInteger(options.concurrency) || options.concurrency < 1) throw new RangeError(`concurrency must be a whole number ≥ 1, got ${options.concurrency}`);
    if (options.storeConfig !== null && options.pool === null) throw new RangeError('a worker pool is needed to execute runs in worker threads');
    this.heartbeatMs = options.heartbeatMs ?? DEFAULT_HEARTBEAT_MS;
    if (!Number.isInteger(this.heartbeatMs) || this.heartbeatMs < 4) throw new RangeError(`heartbeatMs must be a whole number ≥ 4, got ${this.heartbeatMs}`);
    this.log = options.log ?? quiet;
  }

  /** Runs executing in this process now. */
  get running(): string[] {
    return [...this.inFlight.values()].map((e) => e.runId);
  }

  /**
   * Puts runs whose lease ran out (their process stopped) back in the queue, or fails those
   * interrupted MAX_INTERRUPTIONS times. Called at start-up and every heartbeat / 4 once started.
   * @returns the ids queued again and failed
   */
  async recover(): Promise<{ requeued: string[]; failed: string[] }> {
    await this.renewInFlight();
    const out = await this.options.store.reclaimExpiredRuns(MAX_INTERRUPTIONS);
    if (out.requeued.length + out.failed.length > 0) this.log.warn(out, 'runs interrupted by a stopped process');
    return out;
  }

  /**
   * Renews the lease of every run executing here before this process looks for runs whose lease
   * ran out. A lease of ours can only have run out while this process was alive but its event loop
   * held up (a long step on the main thread delays the heartbeat and this look alike); without
   * this, the look would find our own run and queue it again. A run the store no longer gives to
   * our claim is left to keepLease, which notices at its next beat.
   */
  private async renewInFlight(): Promise<void> {
    const ms = leaseMs(this.heartbeatMs);
    for (const [claim, entry] of this.inFlight) {
      try {
        await this.options.store.renewRunLease(entry.runId, claim, ms);
      } catch (err) {
        this.log.warn({ err, run: entry.runId }, 'could not renew the run\'s lease before looking for stopped runs');
      }
    }
  }

  /** Starts taking runs: now and every pollMs; and taking over runs whose lease ran out. */
  start(): void {
    if (this.poll !== null || this.closed) return;
    this.poll = setInterval(() => this.wake(), this.options.pollMs ?? 2000);
    this.poll.unref();
    this.scan = setInterval(() => {
      if (this.scanning || this.closed) return;
      this.scanning = true;
      this.recover()
        .then((r) => {
          if (r.requeued.length > 0) this.wake();
        })
        .catch((err: unknown) => this.log.error({ err }, 'could not look for runs whose process stopped'))
        .finally(() => (this.scanning = false));
    }, takeoverScanMs(this.heartbeatMs));
    this.scan.unref();
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
      const run = await this.options.store.claimNextRun(`${this.workerId}:${++this.claims}`, leaseMs(this.heartbeatMs));
      if (run === null) return;
      this.launch(run);
    }
  }

  private launch(run: Run): void {
    const claim = run.workerId!;
    const entry: InFlight = { runId: run.id, controller: new AbortController(), done: Promise.resolve(), reason: null };
    this.inFlight.set(claim, entry);
    entry.done = this.execute(run, entry)
      .catch((err: unknown) => this.log.error({ err, run: run.id }, 'run bookkeeping failed'))
      .finally(() => {
        this.inFlight.delete(claim);
        this.wake();
      });
  }

  private async execute(run: Run, entry: InFlight): Promise<void> {
    const { store, hooks } = this.options;
    const dataset = await store.getDataset(run.datasetId);
    if (dataset === null) return; // deleted with its runs
    const ctx: RunContext = { store, dataset, run };
    const signal = entry.controller.signal;
    const claim = run.workerId!;
    const lease = keepLease(
      store,
      run,
      this.heartbeatMs,
      () => {
        // cancelled (its status says so) or taken over after the lease ran out
        entry.reason ??= 'lost';
        entry.controller.abort(new RunCancelled('the run is no longer this process\'s'));
      },
      (err) => this.log.warn({ err, run: run.id }, 'could not renew the run\'s lease; trying again at the next heartbeat'),
    );
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
          const tracks = hooks.tracksInThread === undefined ? {} : { tracks: hooks.tracksInThread };
          const res = await this.options.pool!.run({ store: this.options.storeConfig, datasetId: run.datasetId, runId: run.id, claim, port: port2, ...tracks }, signal);
          if (!res.ok) {
            if (res.cancelled) cancelled = true;
            else failure = res.message;
            if (res.internal) this.log.error({ run: run.id, dataset: run.datasetId, error: res.internal.message, stack: res.internal.stack }, 'run failed inside the service');
          }
        } finally {
          port1.close();
        }
      } else {
        await executeRun(store, run, dataset, { signal, assignTracks: (h) => hooks.assignTracks(ctx, h) });
      }
    } catch (err) {
      if (err instanceof RunCancelled || signal.aborted) cancelled = true;
      else {
        const f = runFailureMessage(err, run.id);
        failure = f.message;
        if (f.internal) this.log.error({ err, run: run.id, dataset: run.datasetId }, 'run failed inside the service');
      }
    } finally {
      lease.stop();
    }

    if (entry.reason === 'close') {
      // shutting down: the run goes back to the queue for the next start (or another instance)
      await store.updateRun(run.id, { status: 'queued', progress: 0, startedAt: null }, ['running'], claim).catch(() => undefined);
      return;
    }
    if (entry.reason === 'lost') {
      const now = await store.getRun(run.datasetId, run.id).catch(() => null);
      if (now !== null && now.status !== 'cancelled') {
        // another process holds it now and reports its outcome
        this.log.warn({ run: run.id, status: now.status }, 'run taken over by another process after its lease ran out; stopped here');
        return;
      }
    }
    if (failure !== null) {
      this.log.warn({ run: run.id, error: failure }, 'run failed');
      await store.updateRun(run.id, { status: 'failed', error: failure, finishedAt: new Date().toISOString() }, ['running'], claim).catch((e: unknown) => {
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
    for (const entry of this.inFlight.values()) {
      if (entry.runId !== runId) continue;
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
    if (this.scan) clearInterval(this.scan);
    await this.filling;
    for (const e of this.inFlight.values()) {
      e.reason = 'close';
      e.controller.abort(new Error('the service is shutting down'));
    }
    await Promise.all([...this.inFlight.values()].map((e) => e.done));
  }
}
