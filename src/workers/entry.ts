/**
 * The one module every worker thread starts from: the request pool (clustering and k-distance
 * requests, src/http/worker.ts) and the job pool (reading and storing posted batches, making published layers and
 * executing stored runs, indexing result layers, src/jobs/job-worker.ts) both point piscina here, and the task's `op` picks the work.
 */
import { isMainThread } from 'node:worker_threads';
import { lowerThreadPriority } from './priority.js';
import clusterWork from '../http/worker.js';
import type { WorkResult, WorkTask } from '../http/work.js';
import jobWork, { type JobTask, type PublishOutcome, type RecordsOutcome, type RunOutcomeMessage, type StoreOutcome } from '../jobs/job-worker.js';
import type { LayerIndexParts } from '../ogc/layer-index.js';

export type ThreadTask = WorkTask | JobTask;

if (!isMainThread) lowerThreadPriority();

/** Runs one task; the default export piscina calls. */
export default function work(task: ThreadTask): WorkResult | RecordsOutcome | LayerIndexParts | Promise<StoreOutcome> | Promise<PublishOutcome> | Promise<RunOutcomeMessage> {
  return task.op === 'records' || task.op === 'store' || task.op === 'publish' || task.op === 'run' || task.op === 'index' ? jobWork(task) : clusterWork(task);
}
