/**
 * The worker-thread side of `StoredLayerThread`: makes the noise and points layers of one stored
 * run from the lent feature texts with the same code as the run's thread (pointLayersJobBytes),
 * sends each piece as it is made (its memory transferred), then lends the texts back.
 */
import { parentPort } from 'node:worker_threads';
import { pointLayersJobBytes } from '../run/cluster.js';
import { PackedTexts } from '../storage/columns.js';
import type { StoredLayerMessage, StoredLayerTask } from './layer-thread.js';

parentPort!.once('message', (task: StoredLayerTask) => {
  const port = parentPort!;
  const texts = PackedTexts.fromLent(task.texts);
  let ok = true;
  let message: string | undefined;
  try {
    const job = { rows: task.rows, pointsHead: task.pointsHead, noiseHead: task.noiseHead, texts };
    for (const layer of ['noise', 'points'] as const) {
      for (const piece of pointLayersJobBytes(job, layer === 'noise')) {
        const m: StoredLayerMessage = { layer, piece };
        port.postMessage(m, [piece.buffer as ArrayBuffer]);
      }
    }
  } catch (err) {
    ok = false;
    message = (err as Error)?.message ?? String(err);
  }
  // every text was lent as bytes, so they can be lent back
  const back = texts.lend()!;
  const done: StoredLayerMessage = { done: true, ok, ...(message === undefined ? {} : { message }), texts: back.texts };
  port.postMessage(done, back.transfer);
});
