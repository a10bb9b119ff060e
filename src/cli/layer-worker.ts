/**
 * The worker-thread side of `PointLayerThread`: writes the points and noise layers of one job
 * from the input file's bytes, with the same code as the calling thread would (pointLayersJobBytes).
 */
import { parentPort } from 'node:worker_threads';
import { InputFile } from '../ingest/source.js';
import { pointLayersJobBytes, type PointLayersJob } from '../run/cluster.js';
import type { LayerTask } from './layer-thread.js';
import { writeChunks } from './output.js';

parentPort!.once('message', (task: LayerTask) => {
  try {
    const source = new InputFile(task.input);
    const job: PointLayersJob = { rows: task.rows, pointsHead: task.pointsHead, noiseHead: task.noiseHead };
    if (task.spans !== undefined) job.spans = { ...task.spans, source };
    if (task.csvRows !== undefined) job.csvRows = { ...task.csvRows, source };
    for (const file of task.files) writeChunks(file.path, pointLayersJobBytes(job, file.noiseOnly, true));
    parentPort!.postMessage({ ok: true });
  } catch (err) {
    parentPort!.postMessage({ ok: false, message: (err as Error)?.message ?? String(err) });
  }
});
