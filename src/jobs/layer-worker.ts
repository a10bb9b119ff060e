/**
 * The worker-thread side of `StoredLayerThread`: makes the noise and points layers of one stored
 * run from the lent feature texts with the same code as the run's thread (pointLayersJobBytes),
 * sends each piece as it is made (its memory transferred), then gives the texts back.
 */
import { parentPort } from 'node:worker_threads';
import { pointLayersJobBytes, type FeatureByteSource } from '../run/cluster.js';
import type { LentTexts } from '../storage/columns.js';
import type { StoredLayerMessage, StoredLayerTask } from './layer-thread.js';

/** The lent texts read as PackedTexts reads its byte chunks. */
function byteSource(texts: LentTexts): FeatureByteSource {
  const chunks = texts.chunks.map((c) => Buffer.from(c.buffer, c.byteOffset, c.byteLength));
  const { chunk, start, end } = texts;
  return {
    bytesOf: (i) => chunks[chunk[i]!]!,
    byteStart: (i) => start[i]!,
    byteEnd: (i) => end[i]!,
    at: (i) => (i >= 0 && i < texts.length ? chunks[chunk[i]!]!.toString('utf8', start[i]!, end[i]!) : undefined),
  };
}

/** The texts' buffers, to transfer back. */
function buffersOf(texts: LentTexts): ArrayBuffer[] {
  const all = new Set<ArrayBuffer>();
  for (const a of [texts.chunk, texts.start, texts.end, ...texts.chunks]) if (a.buffer instanceof ArrayBuffer) all.add(a.buffer);
  return [...all];
}

parentPort!.once('message', (task: StoredLayerTask) => {
  const port = parentPort!;
  let done: StoredLayerMessage;
  try {
    const job = { rows: task.rows, pointsHead: task.pointsHead, noiseHead: task.noiseHead, texts: byteSource(task.texts) };
    for (const layer of ['noise', 'points'] as const) {
      for (const piece of pointLayersJobBytes(job, layer === 'noise')) {
        const m: StoredLayerMessage = { layer, piece };
        port.postMessage(m, [piece.buffer as ArrayBuffer]);
      }
    }
    done = { done: true, ok: true, texts: task.texts };
  } catch (err) {
    done = { done: true, ok: false, message: (err as Error)?.message ?? String(err), texts: task.texts };
  }
  port.postMessage(done, buffersOf(task.texts));
});
