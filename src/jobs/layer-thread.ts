/**
 * The points and noise layers of a stored run made in a worker thread while the run's own thread
 * works out the figures and the tracks: the largest part of a run's end that needs nothing but
 * the clustering and the stored feature texts. The texts are lent to the worker, not copied (their
 * buffers are transferred and come back with the layers), so a million-point run neither copies
 * some 200 MB nor holds it twice; the layers come back as the pieces of about 1 MiB the store
 * saves, made by the very function the run's thread would use (`pointLayersJobBytes`), so the
 * bytes are the same.
 *
 * Whenever the worker cannot help (a PostgreSQL store, one core, or no core free by the load
 * average, fewer observations than `STORED_LAYER_THREAD.minObservations`, texts not all kept as bytes, a run
 * that reads the texts while the worker has them, or a worker that fails), the run's thread makes
 * the layers itself, as before.
 */
import type { Worker } from 'node:worker_threads';
import type { PointLayersJob, PointRows } from '../run/cluster.js';
import { PackedTexts, type LentTexts } from '../storage/columns.js';
import type { Store } from '../storage/store.js';
import { coreFree, startWorkerBeside } from '../workers/location.js';

/**
 * When a worker is used: on the `stores` named, from `minObservations` (below, its start, some
 * 0.1 s of CPU, is a large part of what it saves) and when `minFreeCores` of a core is free by the
 * last minute's load average (on busy cores a second thread gains no time; see
 * src/cli/layer-thread.ts). SQLite only: it saves on the run's own thread, so the second core is
 * otherwise idle at the end of a run, while PostgreSQL's server takes in the layers on the other
 * core as the run's thread makes them. Measured at 1M on the quiet two-core machine, compiled code,
 * alternating (test/bench/stored-run-results.md): SQLite 5.75–8.43 s with the worker against
 * 6.32–9.88 s without; PostgreSQL 7.51–10.54 s with it against 7.20–8.47 s without.
 */
export const STORED_LAYER_THREAD: { stores: Store['engine'][]; minObservations: number; minFreeCores: number } = { stores: ['sqlite'], minObservations: 200_000, minFreeCores: 0.5 };

/** What the worker receives. */
export interface StoredLayerTask {
  rows: PointRows;
  pointsHead: string;
  noiseHead: string;
  texts: LentTexts;
}

/** What the worker sends: each piece as it is made, then the texts back. */
export type StoredLayerMessage =
  | { layer: 'noise' | 'points'; piece: Uint8Array }
  | { done: true; ok: boolean; message?: string; texts: LentTexts };

/** The points and noise layers as the store saves them. */
export interface PointLayerPieces {
  noise: Buffer[];
  points: Buffer[];
}

/** A worker making the points and noise layers of one stored run. */
export class StoredLayerThread {
  private worker: Worker | null;
  private result: Promise<PointLayerPieces | null> | null = null;

  private constructor() {
    this.worker = startWorkerBeside(import.meta.url, 'layer-worker');
    // a worker that fails before it is offered a job is simply not used
    this.worker.on('error', () => {});
    this.worker.unref();
  }

  /** A worker for a run of `n` observations on a store of `engine`, or null when one would not pay. */
  static start(n: number, engine: Store['engine']): StoredLayerThread | null {
    const when = STORED_LAYER_THREAD;
    if (!when.stores.includes(engine) || n < when.minObservations || !coreFree(when.minFreeCores)) return null;
    return new StoredLayerThread();
  }

  /**
   * Gives the worker the job, lending it the job's texts, when they are packed texts whose bytes
   * can be lent; from here until `layers` settles the texts cannot be read on this thread.
   * Returns whether the job was taken.
   */
  offer(job: PointLayersJob): boolean {
    const worker = this.worker;
    const texts = job.texts;
    if (worker === null || this.result !== null || !(texts instanceof PackedTexts)) return false;
    const lent = texts.lend();
    if (lent === null) return false;
    const pieces: PointLayerPieces = { noise: [], points: [] };
    this.result = new Promise<PointLayerPieces | null>((resolve, reject) => {
      const lost = (): void => reject(new Error('the worker thread making the points layer stopped without giving back the run\'s feature texts'));
      worker.on('message', (m: StoredLayerMessage) => {
        if ('piece' in m) pieces[m.layer].push(Buffer.from(m.piece.buffer, m.piece.byteOffset, m.piece.byteLength));
        else {
          texts.restore(m.texts);
          worker.off('exit', lost);
          resolve(m.ok ? pieces : null);
        }
      });
      worker.once('exit', lost);
    });
    // a rejection is seen by `layers`; until then it is not unhandled
    this.result.catch(() => {});
    const task: StoredLayerTask = { rows: job.rows, pointsHead: job.pointsHead, noiseHead: job.noiseHead, texts: lent.texts };
    worker.ref();
    worker.postMessage(task, lent.transfer);
    return true;
  }

  /**
   * The layers the worker made, or null when it was offered no job or could not make them (the
   * texts are back and the caller makes them). Throws when the worker stopped with the texts.
   */
  async layers(): Promise<PointLayerPieces | null> {
    try {
      return this.result === null ? null : await this.result;
    } finally {
      await this.stop();
    }
  }

  /** Stops the worker (its result, if any, is no longer wanted). */
  async stop(): Promise<void> {
    const worker = this.worker;
    this.worker = null;
    if (worker !== null) await worker.terminate();
  }
}
