/**
 * The worker pools: `app.workPool` for clustering requests (a fixed set of threads and a bounded
 * waiting line) and `app.jobPool` for reading large posted batches and executing stored runs.
 * `app.admission` bounds the requests admitted to the work pool and not yet answered, which is
 * the bound on memory held by their bodies. Both pools start from one worker entry
 * (src/workers/entry.ts) and stop with the app.
 */
import type { FastifyInstance, FastifyRequest } from 'fastify';
import fp from 'fastify-plugin';
import { createJobPool, type JobPool } from '../../jobs/job-pool.js';
import { HttpProblem } from '../errors.js';
import { createWorkPool, type WorkPool } from '../pool.js';

/** Admission of requests to the work pool: at most workers + queueSize at a time. */
export interface Admission {
  /** an onRequest hook: admits the request or answers 503 */
  admit(request: FastifyRequest): Promise<void>;
  /** an onResponse / onRequestAbort hook: releases what `admit` took */
  release(request: FastifyRequest): Promise<void>;
  /** requests admitted and not yet answered */
  readonly inProgress: number;
}

declare module 'fastify' {
  interface FastifyInstance {
    workPool: WorkPool;
    jobPool: JobPool;
    admission: Admission;
  }
}

export interface PoolsOptions {
  /** threads of the work pool */
  workers: number;
  /** requests that may wait for a work-pool thread */
  queueSize: number;
  /** stored runs executed at once (the job pool has one thread more) */
  runConcurrency: number;
  /** seconds a turned-away client is asked to wait */
  retryAfterS: number;
  /** a work pool to use instead of starting one (closed with the app all the same) */
  pool?: WorkPool;
}

const ADMITTED = Symbol('admitted');
type Admitted = FastifyRequest & { [ADMITTED]?: boolean };

function createAdmission(options: PoolsOptions): Admission {
  let admitted = 0;
  const capacity = options.workers + options.queueSize;
  const retryAfter = { 'retry-after': String(options.retryAfterS) };
  return {
    async admit(request) {
      if (admitted >= capacity) {
        throw new HttpProblem('overloaded', `All ${options.workers} workers are busy and ${options.queueSize} requests wait; retry later.`, {}, retryAfter);
      }
      admitted++;
      (request as Admitted)[ADMITTED] = true;
    },
    async release(request) {
      if ((request as Admitted)[ADMITTED]) {
        (request as Admitted)[ADMITTED] = false;
        admitted--;
      }
    },
    get inProgress() {
      return admitted;
    },
  };
}

async function pools(app: FastifyInstance, options: PoolsOptions): Promise<void> {
  const workPool = options.pool ?? createWorkPool({ workers: options.workers, queueSize: options.queueSize });
  const jobPool = createJobPool(options.runConcurrency);
  app.decorate('workPool', workPool);
  app.decorate('jobPool', jobPool);
  app.decorate('admission', createAdmission(options));
  app.addHook('onClose', async () => {
    await Promise.all([workPool.close(), jobPool.close()]);
  });
}

export default fp(pools, { name: 'roost-pools', fastify: '5.x' });
