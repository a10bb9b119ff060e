/**
 * POST /v1/cluster, POST /v1/k-distance and POST /v1/sweep: the body is collected as bytes and handed to the work
 * pool, which reads, checks, clusters and encodes it; the answer comes back as bytes. A full
 * service (503) and query-string settings are checked before the body is received, so a typo or a
 * full service costs no upload; the request takes its place in the work pool only once its body
 * has arrived (src/http/plugins/pools.ts), and a client that goes away ends its work at once.
 */
import type { FastifyInstance, FastifyReply, FastifyRequest } from 'fastify';
import type { LayerName } from '../../run/layers.js';
import { resolveSettings, SettingsError } from '../../run/settings.js';
import { sweepRequest } from '../../run/sweep.js';
import { SweepError } from '../../trust/sweep.js';
import { resolveTrustSettings, splitTrustSettings } from '../../trust/options.js';
import { formatOf } from '../body.js';
import type { ServerConfig } from '../config.js';
import { HttpProblem } from '../errors.js';
import { QueueFullError } from '../pool.js';
import type { WorkResult, WorkTask } from '../work.js';

export type ClusterRouteOptions = Pick<ServerConfig, 'timeLimitMs' | 'retryAfterS'>;

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
  if (result.code === 'internal-error') {
    request.log.error({ detail: result.detail, stack: result.stack }, 'worker failed');
    throw new HttpProblem('internal-error', 'The service failed to answer this request. Quote the request_id when reporting it.');
  }
  throw new HttpProblem(result.code, result.detail, result.extensions);
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
    const controller = new AbortController();
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
      return sendResult(request, reply, await workPool.run({ op, body, format, query: settings, layer }, controller.signal));
    } catch (err) {
      throw failure(err, why, options);
    } finally {
      clearTimeout(timer);
      reply.raw.removeListener('close', onClose);
    }
  };

  const heavy = (op: WorkTask['op']) => ({
    onRequest: [admission.check, async (request: FastifyRequest) => checkSettings(readQuery(request).settings, op)],
    preHandler: admission.admit,
    onResponse: admission.release,
    onRequestAbort: admission.release,
    handler: (request: FastifyRequest, reply: FastifyReply) => work(request, reply, op),
  });

  app.post('/v1/cluster', heavy('cluster'));
  app.post('/v1/k-distance', heavy('k-distance'));
  app.post('/v1/sweep', heavy('sweep'));
}
