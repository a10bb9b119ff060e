/**
 * The worker-thread side of OPTICS's shared core distances (`optics` with two threads): takes
 * chunks of cells from the shared counter and writes their core distances into shared memory.
 */
import { workerData } from 'node:worker_threads';
import { runCoreTask, type CoreTask } from './optics.js';

runCoreTask(workerData as CoreTask);
