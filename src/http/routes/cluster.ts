/**
 * POST /v1/cluster, POST /v1/k-distance and POST /v1/sweep: the body is collected as bytes and handed to the work
 * pool, which reads, checks, clusters and encodes it; the answer comes back as bytes. A full
 * service (503) and query-string settings are checked before the body is received, so a typo or a
 * full service costs no upload; the request takes its place in the work pool only once its body
 * has arrived (src/http/plugins/pools.ts), and a client that goes away ends its work at once.
 * A large clustering body is read while it arrives when a thread is free for it then
 * (src/http/arriving.ts), with the same answer as when it is read after its upload.
 */
import type { FastifyInstance, FastifyReply, FastifyRequest } from 'fastify';
import type { LayerName } from '../../run/layers.js';
import { resolveSettings, SettingsError } from '../../run/settings.js';
import { sweepRequest } from '../../run/sweep.js';
import { SweepError } from '../../trust/sweep.js';
import { resolveTrustSettings, splitTrustSettings } from '../../trust/options.js';
import { ArrivingBody } from '../arriving.js';
import { formatOf, READ_WHILE_ARRIVING, type ArrivalStart } from '../body.js';
import type { ServerConfig } from '../config.js';
import { HttpProblem } from '../errors.js';
import { QueueFullError } from '../pool.js';
import type { WorkRejected, WorkResult, WorkTask } from '../work.js';

export type ClusterRouteOptions = Pick<ServerConfig, 'timeLimitMs' | 'retryAfterS'>;

/** Bodies declaring fewer bytes are read after their upload: there is little to overlap. */
export const READ_WHILE_ARRIVING_FROM_BYTES = 1 << 20;

/** A clustering started while its body arrives. */
interface EarlyWork {
  task: Promise<WorkResult>;
  controller: AbortController;
}
const EARLY = Symbol('early work');
type EarlyRequest = FastifyRequest & { [READ_WHILE_ARRIVING]?: ArrivalStart; [EARLY]?: EarlyWork };

/**
 * Splits the query string into the service's own `layer` (/v1/cluster only; the route schema has
 * checked it) and the clustering settings.
 */
function readQuery(request: FastifyRequest): { layer: LayerName | null; settings: Record<string, unknown> } {
  const { layer, ...settings } = (request.query ?? {}) as Record<string, unknown>;
  return { layer: (layer as LayerName | undefined) ?? null, settings };
}

/**
 * Checks query-string settings before the body is received, so a typo costs no upload.
 * eps may still come in the body's settings member (or is not needed, for k-distance), so its
 * absence is left to the worker's full check.
 */
function checkSettings(settings: Record<string, unknown>, op: WorkTask['op']): void {
  try {
    if (op === 'sweep') {
      sweepRequest(settings, true);
      return;
    }
    if (op === 'k-distance') {
      resolveSettings({ eps: 'auto', ...settings });
      return;
    }
    const { clustering, trust } = splitTrustSettings(settings);
    resolveSettings({ eps: 'auto', ...clustering });
    resolveTrustSettings(trust, undefined, true);
  } catch (err) {
    if (err instanceof SettingsError || err instanceof SweepError) throw new HttpProblem('invalid-parameter', err.message, { parameter: err.parameter });
    throw err;
  }
}

/** The answer for a finished task: its bytes, or the problem it reported. */
function sendResult(request: FastifyRequest, reply: FastifyReply, result: WorkResult): FastifyReply {
  if (result.ok) {
    return reply.code(200).type(result.contentType).send(Buffer.from(result.body.buffer, result.body.byteOffset, result.body.byteLength));
  }
  const failed = 'The service failed to answer this request. Quote the request_id when reporting it.';
  if (result.code === 'internal-error') {
    request.log.error({ detail: result.detail, stack: result.stack }, 'worker failed');
    throw new HttpProblem('internal-error', failed);
  }
  if (result.code === 'abandoned' || result.code === 'read-again') {
    // not expected: a body that arrived whole is read again, never abandoned
    request.log.error({ code: result.code }, 'worker gave no answer');
    throw new HttpProblem('internal-error', failed);
  }
  const rejected = result as WorkRejected;
  throw new HttpProblem(rejected.code, rejected.detail, rejected.extensions);
}

/** Why a task did not finish, as the problem to answer with (or the error itself when unforeseen). */
function failure(err: unknown, why: { clientGone: boolean; timedOut: boolean }, options: ClusterRouteOptions): unknown {
  if (err instanceof HttpProblem) return err;
  if (err instanceof QueueFullError) {
    return new HttpProblem('overloaded', 'Every worker is busy and the waiting line is full; retry later.', {}, { 'retry-after': String(options.retryAfterS) });
  }
  if (why.clientGone) {
    // nobody to answer; said for the log, where it is not a service failure
    return new HttpProblem('bad-request', 'The client closed the connection before the answer was ready; the work was cancelled.');
  }
  if (why.timedOut) {
    return new HttpProblem(
      'time-limit',
      `The work was stopped after the limit of ${options.timeLimitMs} ms. Send fewer observations, use a smaller eps, or ask the operator to raise --time-limit-ms.`,
      { time_limit_ms: options.timeLimitMs },
    );
  }
  if ((err as { code?: string }).code === 'ERR_WORKER_OUT_OF_MEMORY') {
    return new HttpProblem('body-too-large', 'This input needs more memory than the service allows; send fewer observations per request.');
  }
  return err;
}

export default async function clusterRoutes(app: FastifyInstance, options: ClusterRouteOptions): Promise<void> {
  const { workPool, admission } = app;

  /** Runs the request's task in the pool, stopping it at the time limit or when the client goes. */
  const work = async (request: FastifyRequest, reply: FastifyReply, op: WorkTask['op']): Promise<FastifyReply> => {
    const body = request.body as Uint8Array | undefined;
    if (!body || body.byteLength === 0) {
      throw new HttpProblem('malformed-body', 'The request body is empty; send a GeoJSON FeatureCollection, CSV, or GeoJSON text sequence.');
    }
    const format = formatOf(request.headers['content-type'])!;
    const { layer, settings } = readQuery(request);
    const early = (request as EarlyRequest)[EARLY];
    const controller = early?.controller ?? new AbortController();
    const why = { clientGone: false, timedOut: false };
    const timer = setTimeout(() => {
      why.timedOut = true;
      controller.abort(new Error('time limit'));
    }, options.timeLimitMs);
    const onClose = (): void => {
      if (reply.raw.writableFinished) return;
      why.clientGone = true;
      controller.abort(new Error('client went away'));
    };
    reply.raw.once('close', onClose);
    try {
      let result = early === undefined ? null : await early.task;
      // read again whole: the thread was wanted meanwhile, or the body's own settings come first
      if (result === null || (!result.ok && result.code === 'read-again')) result = await workPool.run({ op, body, format, query: settings, layer }, controller.signal);
      return sendResult(request, reply, result);
    } catch (err) {
      throw failure(err, why, options);
    } finally {
      clearTimeout(timer);
      reply.raw.removeListener('close', onClose);
    }
  };

  /**
   * Lets a large clustering body be read while it arrives, if a thread and a place are free once
   * its declared length is trusted (src/http/body.ts).
   */
  const offerEarlyStart = async (request: FastifyRequest, reply: FastifyReply): Promise<void> => {
    (request as EarlyRequest)[READ_WHILE_ARRIVING] = (declared) => {
      if (declared < READ_WHILE_ARRIVING_FROM_BYTES || !workPool.idle || !admission.admitNow(request, reply)) return null;
      const controller = new AbortController();
      const arriving = new ArrivingBody(declared, (allIn) => {
        // the upload failed after every byte was in: the work has gone past reading, stop it
        if (allIn) controller.abort(new Error('the request body did not arrive whole'));
      });
      const format = formatOf(request.headers['content-type'])!;
      const { layer, settings } = readQuery(request);
      const body = new Uint8Array(arriving.buffer.buffer, 0, declared);
      const task = workPool.runArriving({ op: 'cluster', body, format, query: settings, layer, arriving: arriving.share }, arriving, controller.signal);
      // awaited by the handler; when the upload fails there is no handler and nothing to answer
      task.catch(() => undefined);
      (request as EarlyRequest)[EARLY] = { task, controller };
      return arriving;
    };
  };

  const heavy = (op: WorkTask['op']) => ({
    onRequest: [
      admission.check,
      async (request: FastifyRequest) => checkSettings(readQuery(request).settings, op),
      ...(op === 'cluster' ? [offerEarlyStart] : []),
    ],
    preHandler: admission.admit,
    onResponse: admission.release,
    onRequestAbort: admission.release,
    handler: (request: FastifyRequest, reply: FastifyReply) => work(request, reply, op),
  });

  app.post('/v1/cluster', heavy('cluster'));
  app.post('/v1/k-distance', heavy('k-distance'));
  app.post('/v1/sweep', heavy('sweep'));
}
