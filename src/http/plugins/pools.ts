/**
 * The worker pools: `app.workPool` for clustering requests (a fixed set of threads and a bounded
 * waiting line) and `app.jobPool` for reading large posted batches, executing stored runs and
 * indexing result layers for paging.
 * `app.admission` bounds the requests admitted to the work pool and not yet answered, which is
 * the bound on memory held by their bodies. Both pools start from one worker entry
 * (src/workers/entry.ts) and stop with the app.
 */
import type { FastifyInstance, FastifyReply, FastifyRequest } from 'fastify';
import fp from 'fastify-plugin';
import { createJobPool, JobQueueFull, type JobPool } from '../../jobs/job-pool.js';
import { indexLayersWith } from '../../ogc/layers.js';
import { HttpProblem } from '../errors.js';
import { createWorkPool, type WorkPool } from '../pool.js';

/**
 * Admission of requests to the work pool: at most workers + queueSize at a time. A request is
 * admitted once its body has arrived (a slow upload holds an upload slot, not a worker), or
 * earlier, while it arrives, when a thread is free to read it then (`admitNow`; that thread is
 * given back when another request needs it), and frees its place when it is answered or its
 * connection closes, whichever comes first.
 */
export interface Admission {
  /** an onRequest hook: answers 503 at once, before any upload, when the service is full now */
  check(request: FastifyRequest): Promise<void>;
  /** a preHandler hook (after the body arrived): admits the request or answers 503 */
  admit(request: FastifyRequest, reply: FastifyReply): Promise<void>;
  /** admits the request now, while its body arrives, if there is room; `admit` then lets it pass */
  admitNow(request: FastifyRequest, reply: FastifyReply): boolean;
  /** releases what `admit` took (also done by itself when the connection closes); safe to call twice */
  release(request: FastifyRequest): Promise<void>;
  /** requests admitted and not yet answered */
  readonly inProgress: number;
}

declare module 'fastify' {
  interface FastifyInstance {
    workPool: WorkPool;
    jobPool: JobPool;
    admission: Admission;
    /** large posted batches being read and stored in the job pool (src/http/routes/observations.ts) */
    storing: { inProgress: number };
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
  // refused before its body arrived: the connection is closed after the answer, so a client
  // still sending (a byte a second, say) holds no socket once it has its answer
  const full = (early = false): HttpProblem => new HttpProblem('overloaded', `All ${options.workers} workers are busy and ${options.queueSize} requests wait; retry later.`, {}, early ? { ...retryAfter, connection: 'close' } : retryAfter);
  const release = async (request: FastifyRequest): Promise<void> => {
    if ((request as Admitted)[ADMITTED]) {
      (request as Admitted)[ADMITTED] = false;
      admitted--;
    }
  };
  const take = (request: FastifyRequest, reply: FastifyReply): boolean => {
    if (admitted >= capacity) return false;
    admitted++;
    (request as Admitted)[ADMITTED] = true;
    // 'close' comes once the answer is sent or the connection is gone, whatever the framework's hooks do
    reply.raw.once('close', () => void release(request));
    return true;
  };
  return {
    async check() {
      if (admitted >= capacity) throw full(true);
    },
    async admit(request, reply) {
      if ((request as Admitted)[ADMITTED]) return;
      if (!take(request, reply)) throw full();
    },
    admitNow: take,
    release,
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
  app.decorate('storing', { inProgress: 0 });
  // result layers are indexed for paging in a job thread: the scan and parse of every feature of a
  // large layer would hold up the main thread for as long (an app without a store has none to index)
  if (app.hasDecorator('store')) {
    indexLayersWith(app.store, async (bytes) => {
      try {
        return await jobPool.index(bytes);
      } catch (err) {
        if (err instanceof JobQueueFull) throw new HttpProblem('overloaded', 'Every thread indexing result layers is busy and the waiting line is full; retry later.', {}, { 'retry-after': String(options.retryAfterS) });
        throw err;
      }
    });
  }
  app.addHook('onClose', async () => {
    await Promise.all([workPool.close(), jobPool.close()]);
  });
}

export default fp(pools, { name: 'roost-pools', fastify: '5.x' });
