/**
 * The points and noise layers of `roost cluster` written in a worker thread while the calling
 * thread works out the figures (hulls, Clark–Evans) and writes the other files: the two largest
 * parts of a run's end overlap on two cores. The worker is started before the input is read, so
 * its start is hidden behind the reading; it is offered the layers (`PointLayersJob`, from the
 * `onPointLayers` hook of the clustering) as soon as the clustering is known, and writes them with
 * the very function the calling thread would use, so the bytes are the same.
 *
 * Whenever the worker cannot help (one core, or no core free by the load average, input from
 * standard input, no job offered, or it fails), `done` answers false and the caller writes the
 * layers itself, as before.
 */
import { rm } from 'node:fs/promises';
import type { Worker } from 'node:worker_threads';
import type { CsvRows } from '../ingest/csv-bytes.js';
import type { FeatureSpans } from '../ingest/geojson-bytes.js';
import type { PointLayersJob, PointRows } from '../run/cluster.js';
import { coreFree, startWorkerBeside } from '../workers/location.js';

/**
 * When a worker is used: input files from `minBytes` (below, the worker's start costs more than it
 * saves), at any size: the readers keep the features' spans and positions in shared memory
 * (src/workers/shared.ts), so the worker is handed them without a copy; only the clustering's
 * labels, roles and kept positions (9 bytes an observation) are copied. At a million points the
 * worker adds some 40–50 MiB to the peak (364–374 MiB for the seeded 1M GeoJSON file against
 * 315–334 MiB without it) and takes 10–17 % off the wall time (see README, Performance).
 * `minFreeCores`: the worker takes the calling thread's longest stretch of work after the
 * clustering off its path (about a quarter of its time at 100,000 points) when it has a core to
 * itself, but costs some 0.1 s more CPU (its start, its copy of the arrays) and gains nothing when
 * every core is busy with other work: measured on two cores at load average 5–6, the same wall
 * time and more CPU than one thread.
 */
export const LAYER_THREAD = { minBytes: 1 << 20, minFreeCores: 0.5 };

/** What the worker receives: the job without its byte source, and where to write which layer. */
export interface LayerTask {
  input: string;
  rows: PointRows;
  pointsHead: string;
  noiseHead: string;
  spans?: Omit<FeatureSpans, 'source'>;
  csvRows?: Omit<CsvRows, 'source'>;
  files: { path: string; noiseOnly: boolean }[];
}

/** A worker ready to write the points and noise layers of one run. */
export class PointLayerThread {
  private worker: Worker | null;
  private result: Promise<boolean> | null = null;
  private written: string[] = [];

  private constructor(private readonly input: string) {
    this.worker = startWorkerBeside(import.meta.url, 'layer-worker');
    // a worker that fails before it is offered a job is simply not used
    this.worker.on('error', () => {});
    this.worker.unref();
  }

  /** A worker for a run on the file `input` of `bytes` bytes, or null when one would not pay. */
  static start(input: string, bytes: number): PointLayerThread | null {
    if (bytes < LAYER_THREAD.minBytes || !coreFree(LAYER_THREAD.minFreeCores)) return null;
    return new PointLayerThread(input);
  }

  /** Gives the worker the job: the noise layer to `noisePath`, the points layer to `pointsPath`. */
  offer(job: PointLayersJob, noisePath: string, pointsPath: string): void {
    const worker = this.worker;
    if (worker === null || this.result !== null) return;
    const files = [
      { path: noisePath, noiseOnly: true },
      { path: pointsPath, noiseOnly: false },
    ];
    const task: LayerTask = { input: this.input, rows: job.rows, pointsHead: job.pointsHead, noiseHead: job.noiseHead, files };
    if (job.spans !== undefined) task.spans = withoutSource(job.spans);
    if (job.csvRows !== undefined) task.csvRows = withoutSource(job.csvRows);
    this.written = files.map((f) => f.path);
    this.result = new Promise<boolean>((resolve) => {
      worker.once('message', (m: { ok: boolean }) => resolve(m.ok === true));
      worker.once('error', () => resolve(false));
      worker.once('exit', () => resolve(false));
    });
    // from here the process waits for the worker's answer
    worker.ref();
    worker.postMessage(task);
  }

  /**
   * Whether the worker wrote both layers. On false nothing of them is left behind (a part it
   * wrote is removed) and the caller writes them.
   */
  async done(): Promise<boolean> {
    const ok = this.result === null ? false : await this.result;
    await this.stop();
    if (!ok) await Promise.all(this.written.map((p) => rm(p, { force: true })));
    return ok;
  }

  /** Stops the worker (its result, if any, is no longer wanted). */
  async stop(): Promise<void> {
    const worker = this.worker;
    this.worker = null;
    if (worker !== null) await worker.terminate();
  }
}

function withoutSource<T extends { source: unknown }>(x: T): Omit<T, 'source'> {
  const { source: _, ...rest } = x;
  return rest;
}
