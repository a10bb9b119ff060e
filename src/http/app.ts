/**
 * Builds the HTTP application without listening (server.ts listens; tests use `inject`).
 * The application is a short list of plugins, each owning one concern (see DEVELOPERS.md):
 * problems and shutdown, body parsing, the store, the worker pools, the run queue, load shedding,
 * then one plugin per route group. The main thread only routes, collects bodies as bytes and sends
 * bytes back; workers do the rest.
 */
import { randomUUID } from 'node:crypto';
import type { Duplex } from 'node:stream';
import Fastify, { LogController, type FastifyError, type FastifyInstance, type FastifyReply, type FastifyRequest } from 'fastify';
import underPressure from '@fastify/under-pressure';
import type { RunHooks } from '../jobs/hooks.js';
import type { StoreConfig } from '../storage/index.js';
import type { Store } from '../storage/store.js';
import { DEFAULT_CONFIG, type ServerConfig } from './config.js';
import { HttpProblem, PROBLEM_MEDIA_TYPE } from './errors.js';
import bodies from './plugins/bodies.js';
import pools from './plugins/pools.js';
import problems from './plugins/problems.js';
import runQueue from './plugins/run-queue.js';
import schemas from './plugins/schemas.js';
import shutdown from './plugins/shutdown.js';
import storePlugin from './plugins/store.js';
import type { WorkPool } from './pool.js';
import access from './plugins/access.js';
import audit from './plugins/audit.js';
import edge from './plugins/edge.js';
import changeRoutes from './routes/changes.js';
import keyRoutes from './routes/keys.js';
import publishedRoutes from './routes/published.js';
import clusterRoutes from './routes/cluster.js';
import datasetRoutes from './routes/datasets.js';
import observationRoutes from './routes/observations.js';
import runRoutes from './routes/runs.js';
import serviceRoutes from './routes/service.js';
import featuresRoutes from '../ogc/routes.js';
import webRoutes from './routes/web.js';

export { OPENAPI_PATH } from './contract.js';

export interface AppOptions {
  /** complete configuration (see resolveConfig); defaults to DEFAULT_CONFIG */
  config?: ServerConfig;
  /** pino logger options, or false for none; defaults to JSON logs at config.logLevel */
  logger?: boolean | Record<string, unknown>;
  /** a pool to use instead of starting one (closed with the app all the same) */
  pool?: WorkPool;
  /** told of every route as it is added (method and URL), for listings and checks */
  onRoute?: (route: { method: string | string[]; url: string }) => void;
  /** a store to use instead of opening the configured one (closed with the app all the same) */
  store?: Store;
  /** how worker threads open that store; absent: runs execute on the main thread */
  storeConfig?: StoreConfig;
  /** run hooks (track assignment, notices); default: the configured service hooks */
  hooks?: RunHooks;
}

/** Never written to the logs: bearer tokens and webhook secrets, wherever a logger meets them. */
export const LOG_REDACT = {
  paths: ['req.headers.authorization', 'request.headers.authorization', 'headers.authorization', 'authorization', 'token', '*.token', 'secret', '*.secret', 'webhook.secret', '*.webhook.secret'],
  censor: '[hidden]',
};

/** A client-supplied request id is kept when it is short and plain, so logs can be joined. */
const REQUEST_ID = /^[A-Za-z0-9._:-]{1,128}$/;

/**
 * Answers requests Node's HTTP parser refuses (bad headers, bad Content-Length) with a
 * problem+json body too, before any route or request object exists.
 */
function badHttp(err: NodeJS.ErrnoException & { rawPacket?: unknown }, socket: Duplex): void {
  if (!socket.writable) return;
  const tooLarge = err.code === 'HPE_HEADER_OVERFLOW';
  const problem = tooLarge
    ? new HttpProblem('bad-request', 'The request headers are too large.')
    : new HttpProblem('bad-request', `The request is not valid HTTP (${err.code ?? 'parse error'}); check its headers and Content-Length.`);
  const id = randomUUID();
  const body = JSON.stringify(problem.body(id));
  socket.end(
    `HTTP/1.1 ${problem.status} Bad Request\r\nX-Request-Id: ${id}\r\nContent-Type: ${PROBLEM_MEDIA_TYPE}; charset=utf-8\r\nContent-Length: ${Buffer.byteLength(body)}\r\nConnection: close\r\n\r\n${body}`,
  );
}

/**
 * Answers what the router refuses before any route or hook runs (a path with bad percent-encoding,
 * a path segment too long) as a problem like every other error.
 */
function frameworkErrors(error: FastifyError, request: FastifyRequest, reply: FastifyReply): void {
  const problem =
    error.code === 'FST_ERR_MAX_PARAM_LENGTH'
      ? new HttpProblem('uri-too-long', 'A segment of the path is longer than this service reads; ids are at most 256 characters.')
      : error.code === 'FST_ERR_BAD_URL'
        ? new HttpProblem('bad-request', 'The path has a bad percent-encoding: every % must be followed by two hex digits, and the bytes must be UTF-8 text.')
        : new HttpProblem('bad-request', 'The request cannot be routed.');
  request.log.info({ code: problem.code, detail: problem.message }, 'request refused');
  void reply
    .code(problem.status)
    .header('x-request-id', request.id)
    .type(PROBLEM_MEDIA_TYPE)
    .send(JSON.stringify(problem.body(String(request.id))));
}

/**
 * The request log: one line per answered request (method, address, status, milliseconds), where
 * Fastify's own writes two (one as the request comes in, one as it is answered). Under load the
 * log's writes were a tenth of the main thread's busy time (test/bench/soak-results.md). Fastify's
 * other request logs (errors, streams cut short) stay as they are.
 */
class RequestLog extends LogController {
  override incomingRequest(): void {
    // said with the answer
  }

  override requestCompleted(error: Error | null, request: FastifyRequest, reply: FastifyReply): void {
    const line = { method: request.method, url: request.url, status: reply.statusCode, ms: Math.round(reply.elapsedTime * 10) / 10 };
    if (error) reply.log.error({ ...line, err: error }, 'request errored');
    else reply.log.info(line, 'request answered');
  }
}

/** The Fastify instance with the server-level settings: limits, timeouts, request ids. */
function createServer(config: ServerConfig, logger: AppOptions['logger']): FastifyInstance {
  return Fastify({
    logger: logger ?? { level: config.logLevel, redact: LOG_REDACT },
    bodyLimit: config.bodyLimitBytes,
    requestTimeout: config.requestTimeoutMs,
    keepAliveTimeout: config.keepAliveTimeoutMs,
    // the service answers 503 problem+json itself while closing (see plugins/shutdown.ts)
    return503OnClosing: false,
    // one line per request, written once it is answered (RequestLog below), not two
    logController: new RequestLog(),
    requestIdHeader: false,
    clientErrorHandler: badHttp,
    // ids are at most 256 characters (src/ingest/limits.ts), escaped up to three times as long
    routerOptions: { maxParamLength: 3 * 256 },
    frameworkErrors,
    genReqId: (req) => {
      const given = req.headers['x-request-id'];
      return typeof given === 'string' && REQUEST_ID.test(given) ? given : randomUUID();
    },
  });
}

/**
 * Builds the Roost HTTP application. The caller listens (or injects) and must `close()` it, which
 * stops the run queue, the workers and the store, in that order.
 */
export async function buildApp(options: AppOptions = {}): Promise<FastifyInstance> {
  const config = options.config ?? { ...DEFAULT_CONFIG };
  const app = createServer(config, options.logger);
  if (options.onRoute) app.addHook('onRoute', options.onRoute);

  await app.register(problems);
  await app.register(shutdown, { retryAfterS: config.retryAfterS });
  await app.register(bodies, { bodyLimitBytes: config.bodyLimitBytes, uploads: config.uploads, uploadTimeoutMs: config.uploadTimeoutMs, retryAfterS: config.retryAfterS });
  await app.register(storePlugin, { databaseUrl: config.databaseUrl, dbPath: config.dbPath, store: options.store, storeConfig: options.storeConfig });
  // the edge and access checks reach every route group registered after them
  await app.register(edge, { config });
  await app.register(access);
  await app.register(audit);
  const { workers, queueSize, runConcurrency, retryAfterS } = config;
  await app.register(schemas);
  await app.register(pools, { workers, queueSize, runConcurrency, retryAfterS, pool: options.pool });
  const { scheduleScanMs, scheduleMinIntervalS, runHeartbeatMs, webhookAttempts, webhookTimeoutMs, allowPrivateWebhooks, publicUrl } = config;
  await app.register(runQueue, { runConcurrency, scheduleScanMs, scheduleMinIntervalS, runHeartbeatMs, webhookAttempts, webhookTimeoutMs, allowPrivateWebhooks, publicUrl, hooks: options.hooks });
  await app.register(serviceRoutes, { publicUrl });
  await app.register(clusterRoutes, { timeLimitMs: config.timeLimitMs, retryAfterS });
  await app.register(datasetRoutes, { allowPrivateWebhooks, scheduleMinIntervalMs: config.scheduleMinIntervalS * 1000 });
  await app.register(observationRoutes, { maxPostFeatures: config.maxPostFeatures });
  await app.register(runRoutes, { layerStreams: config.layerStreams, maxQueuedRuns: config.maxQueuedRuns, retryAfterS });
  await app.register(changeRoutes);
  await app.register(publishedRoutes);
  await app.register(keyRoutes);
  await app.register(featuresRoutes, { publicUrl });
  await app.register(webRoutes, { basemapStyle: config.basemapStyle });
  // registered last so the slow start-up above does not count as event-loop delay; its hook
  // reaches every route group all the same
  await app.register(underPressure, {
    maxEventLoopDelay: config.maxEventLoopDelayMs,
    retryAfter: retryAfterS,
    pressureHandler: async (_request: FastifyRequest, _reply: FastifyReply, type: string) => {
      throw new HttpProblem('overloaded', `The service is under pressure (${type}); retry later.`, {}, { 'retry-after': String(retryAfterS) });
    },
  });

  return app;
}
