/**
 * Builds the HTTP application without listening (server.ts listens; tests use `inject`).
 * The main thread only routes, collects bodies as bytes and sends bytes back; workers do the rest.
 */
import { randomUUID } from 'node:crypto';
import { readFileSync } from 'node:fs';
import type { Duplex } from 'node:stream';
import { fileURLToPath } from 'node:url';
import Fastify, { type FastifyError, type FastifyInstance, type FastifyReply, type FastifyRequest } from 'fastify';
import underPressure from '@fastify/under-pressure';
import swagger from '@fastify/swagger';
import swaggerUi from '@fastify/swagger-ui';
import { resolveSettings, SettingsError } from '../run/settings.js';
import { BODY_MEDIA_TYPES, formatOf, rawBodyParser } from './body.js';
import { DEFAULT_CONFIG, type ServerConfig } from './config.js';
import { HttpProblem, PROBLEM_MEDIA_TYPE } from './errors.js';
import { createWorkPool, QueueFullError, type WorkPool } from './pool.js';
import { LAYERS, type Layer, type WorkTask } from './work.js';
import { createRoostHooks } from '../jobs/run-hooks.js';
import { Scheduler } from '../jobs/schedule.js';
import { registerChangeRoutes } from './routes/changes.js';
import type { RunHooks } from '../jobs/hooks.js';
import { createJobPool } from '../jobs/job-pool.js';
import { Runner } from '../jobs/runner.js';
import { isPostgresUrl, openStore, type StoreConfig } from '../storage/index.js';
import type { Store } from '../storage/store.js';
import type { DatasetServices } from './routes/common.js';
import { registerDatasetRoutes } from './routes/datasets.js';
import { registerObservationRoutes } from './routes/observations.js';
import { registerRunRoutes } from './routes/runs.js';

/** The repository's OpenAPI document, two levels up from src/http and from dist/http alike. */
export const OPENAPI_PATH = fileURLToPath(new URL('../../openapi.yaml', import.meta.url));

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

/** The app's dataset services, for start-up tasks and tests (`app.datasets`). */
declare module 'fastify' {
  interface FastifyInstance {
    datasets: DatasetServices;
  }
}

/** A client-supplied request id is kept when it is short and plain, so logs can be joined. */
const REQUEST_ID = /^[A-Za-z0-9._:-]{1,128}$/;

const SERVICE_NAME = 'roost';

/** Requests admitted to heavy routes and not yet answered: the bound on memory held by bodies. */
const ADMITTED = Symbol('admitted');

type Admitted = FastifyRequest & { [ADMITTED]?: boolean };

function problemFor(err: FastifyError | Error): HttpProblem {
  if (err instanceof HttpProblem) return err;
  const e = err as FastifyError;
  if (e.code === 'FST_ERR_CTP_BODY_TOO_LARGE') return new HttpProblem('body-too-large', 'The request body is larger than this service accepts.');
  if (e.code === 'FST_ERR_CTP_INVALID_MEDIA_TYPE') {
    return new HttpProblem(
      'unsupported-media-type',
      `This endpoint reads ${Object.keys(BODY_MEDIA_TYPES).join(', ')}; set Content-Type to one of them.`,
    );
  }
  if (e.validation) return new HttpProblem('invalid-parameter', e.message);
  if (typeof e.statusCode === 'number' && e.statusCode >= 400 && e.statusCode < 500) {
    return new HttpProblem('bad-request', e.message);
  }
  return new HttpProblem('internal-error', 'The service failed to answer this request. Quote the request_id when reporting it.');
}

/** Splits the query string into the service's own `layer` and the clustering settings. */
function readQuery(request: FastifyRequest, op: WorkTask['op']): { layer: Layer | null; settings: Record<string, unknown> } {
  const { layer, ...settings } = (request.query ?? {}) as Record<string, unknown>;
  if (layer === undefined) return { layer: null, settings };
  if (op !== 'cluster') throw new HttpProblem('invalid-parameter', '"layer" applies to /v1/cluster only', { parameter: 'layer' });
  if (typeof layer !== 'string' || !(LAYERS as readonly string[]).includes(layer)) {
    throw new HttpProblem('invalid-parameter', `"layer" must be one of ${LAYERS.join(', ')}`, { parameter: 'layer' });
  }
  return { layer: layer as Layer, settings };
}

/**
 * Checks query-string settings before the body is received, so a typo costs no upload.
 * eps may still come in the body's settings member (or is not needed, for k-distance), so its
 * absence is left to the worker's full check.
 */
function checkSettings(settings: Record<string, unknown>): void {
  try {
    resolveSettings({ eps: 'auto', ...settings });
  } catch (err) {
    if (err instanceof SettingsError) throw new HttpProblem('invalid-parameter', err.message, { parameter: err.parameter });
    throw err;
  }
}

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
 * Builds the Roost HTTP application: routes, error handling, load shedding and the worker pool.
 * The caller listens (or injects) and must `close()` it, which also stops the workers.
 */
export async function buildApp(options: AppOptions = {}): Promise<FastifyInstance> {
  const config = options.config ?? { ...DEFAULT_CONFIG };
  const logger = options.logger ?? { level: config.logLevel };
  const app = Fastify({
    logger,
    bodyLimit: config.bodyLimitBytes,
    requestTimeout: config.requestTimeoutMs,
    keepAliveTimeout: config.keepAliveTimeoutMs,
    // the service answers 503 problem+json itself while closing (see the onRequest hook)
    return503OnClosing: false,
    requestIdHeader: false,
    clientErrorHandler: badHttp,
    genReqId: (req) => {
      const given = req.headers['x-request-id'];
      return typeof given === 'string' && REQUEST_ID.test(given) ? given : randomUUID();
    },
  });

  if (options.onRoute) app.addHook('onRoute', options.onRoute);
  const pool = options.pool ?? createWorkPool({ workers: config.workers, queueSize: config.queueSize });
  app.addHook('onClose', async () => {
    await pool.close();
  });
  const openapiBytes = readFileSync(OPENAPI_PATH);

  let closing = false;
  let admitted = 0;
  const capacity = config.workers + config.queueSize;
  const retryAfter = { 'retry-after': String(config.retryAfterS) };

  app.addHook('preClose', async () => {
    closing = true;
  });
  app.addHook('onRequest', async (request, reply) => {
    reply.header('x-request-id', request.id);
    if (closing) {
      reply.header('connection', 'close');
      throw new HttpProblem('overloaded', 'The service is shutting down; retry on another instance or in a moment.', {}, retryAfter);
    }
  });

  app.setErrorHandler((err: FastifyError, request, reply) => {
    const problem = problemFor(err);
    if (problem.status === 503 || problem.status === 504) {
      // load shedding, a full queue, shutting down or a time limit: the service working as meant
      request.log.warn({ code: problem.code, detail: problem.message }, 'request turned away');
    } else if (problem.status >= 500) {
      request.log.error({ err }, 'request failed');
    } else {
      request.log.info({ code: problem.code, detail: problem.message }, 'request refused');
    }
    void reply
      .code(problem.status)
      .headers(problem.headers)
      .type(PROBLEM_MEDIA_TYPE)
      .send(JSON.stringify(problem.body(String(request.id))));
  });
  app.setNotFoundHandler((request) => {
    throw new HttpProblem('not-found', `There is no ${request.method} ${request.url.split('?')[0]}; see /openapi.yaml for the routes.`);
  });

  // Only the raw-bytes parser: bodies are never JSON.parse'd on the main thread.
  app.removeAllContentTypeParsers();
  app.addContentTypeParser(Object.keys(BODY_MEDIA_TYPES), rawBodyParser(config.bodyLimitBytes));

  await app.register(swagger, { mode: 'static', specification: { path: OPENAPI_PATH, baseDir: '' } });
  await app.register(swaggerUi, {
    routePrefix: '/docs',
    staticCSP: true,
    // everything the page needs is served from here: no outside hosts, and no https upgrade
    // (which would break the page on a plain-HTTP address other than localhost)
    transformStaticCSP: (header: string) =>
      header.replace(/\s*upgrade-insecure-requests;/, '').replace(/ validator\.swagger\.io/, '').replace(/ https:/g, ''),
    // no calls to an outside validator: the page works offline
    uiConfig: { validatorUrl: null, deepLinking: true },
  });

  app.get('/healthz', { config: { pressureHandler: () => undefined }, logLevel: 'warn' }, async () => ({
    status: closing ? 'closing' : 'ok',
    service: SERVICE_NAME,
    workers: pool.threads,
    queued: pool.queued,
    in_progress: admitted,
  }));

  app.get('/openapi.yaml', async (_request, reply) => {
    return reply.type('application/yaml').send(openapiBytes);
  });

  const admit = async (request: FastifyRequest): Promise<void> => {
    if (admitted >= capacity) {
      throw new HttpProblem('overloaded', `All ${config.workers} workers are busy and ${config.queueSize} requests wait; retry later.`, {}, retryAfter);
    }
    admitted++;
    (request as Admitted)[ADMITTED] = true;
  };
  const release = async (request: FastifyRequest): Promise<void> => {
    if ((request as Admitted)[ADMITTED]) {
      (request as Admitted)[ADMITTED] = false;
      admitted--;
    }
  };

  const heavy = (op: WorkTask['op']) => ({
    onRequest: [
      admit,
      async (request: FastifyRequest) => {
        checkSettings(readQuery(request, op).settings);
      },
    ],
    onResponse: release,
    onRequestAbort: release,
    handler: async (request: FastifyRequest, reply: FastifyReply) => {
      const body = request.body as Uint8Array | undefined;
      if (!body || body.byteLength === 0) {
        throw new HttpProblem('malformed-body', 'The request body is empty; send a GeoJSON FeatureCollection, CSV, or GeoJSON text sequence.');
      }
      const format = formatOf(request.headers['content-type'])!;
      const { layer, settings } = readQuery(request, op);

      const controller = new AbortController();
      let timedOut = false;
      const timer = setTimeout(() => {
        timedOut = true;
        controller.abort(new Error('time limit'));
      }, config.timeLimitMs);
      let clientGone = false;
      const onClose = (): void => {
        if (reply.raw.writableFinished) return;
        clientGone = true;
        controller.abort(new Error('client went away'));
      };
      reply.raw.once('close', onClose);
      try {
        const result = await pool.run({ op, body, format, query: settings, layer }, controller.signal);
        if (result.ok) {
          return reply.code(200).type(result.contentType).send(Buffer.from(result.body.buffer, result.body.byteOffset, result.body.byteLength));
        }
        if (result.code === 'internal-error') {
          request.log.error({ detail: result.detail, stack: result.stack }, 'worker failed');
          throw new HttpProblem('internal-error', 'The service failed to answer this request. Quote the request_id when reporting it.');
        }
        throw new HttpProblem(result.code, result.detail, result.extensions);
      } catch (err) {
        if (err instanceof HttpProblem) throw err;
        if (err instanceof QueueFullError) {
          throw new HttpProblem('overloaded', 'Every worker is busy and the waiting line is full; retry later.', {}, retryAfter);
        }
        if (clientGone) {
          // nobody to answer; said for the log, where it is not a service failure
          throw new HttpProblem('bad-request', 'The client closed the connection before the answer was ready; the work was cancelled.');
        }
        if (timedOut) {
          throw new HttpProblem(
            'time-limit',
            `The work was stopped after the limit of ${config.timeLimitMs} ms. Send fewer observations, use a smaller eps, or ask the operator to raise --time-limit-ms.`,
            { time_limit_ms: config.timeLimitMs },
          );
        }
        if ((err as { code?: string }).code === 'ERR_WORKER_OUT_OF_MEMORY') {
          throw new HttpProblem('body-too-large', 'This input needs more memory than the service allows; send fewer observations per request.');
        }
        throw err;
      } finally {
        clearTimeout(timer);
        reply.raw.removeListener('close', onClose);
      }
    },
  });

  app.post('/v1/cluster', heavy('cluster'));
  app.post('/v1/k-distance', heavy('k-distance'));

  // Stored datasets: migrations are applied on opening; runs a dead process left running are
  // queued again before this process takes any.
  const memory = !isPostgresUrl(config.databaseUrl) && config.dbPath === ':memory:';
  const storeConfig: StoreConfig | null = options.store
    ? (options.storeConfig ?? null)
    : memory
      ? null
      : { databaseUrl: config.databaseUrl || null, sqlitePath: config.dbPath };
  const store = options.store ?? (await openStore({ databaseUrl: config.databaseUrl || null, sqlitePath: config.dbPath }));
  const jobs = createJobPool(config.runConcurrency);
  const serviceHooks = options.hooks ? null : createRoostHooks({ webhook: { attempts: config.webhookAttempts, timeoutMs: config.webhookTimeoutMs, allowPrivate: config.allowPrivateWebhooks }, publicUrl: config.publicUrl || null, log: app.log });
  const runner = new Runner({
    store,
    hooks: options.hooks ?? serviceHooks!,
    concurrency: config.runConcurrency,
    storeConfig,
    pool: storeConfig === null ? null : jobs,
    heartbeatMs: config.runHeartbeatMs,
    log: app.log,
  });
  app.decorate('datasets', { store, runner, jobs, scheduleMinIntervalMs: config.scheduleMinIntervalS * 1000 } satisfies DatasetServices);
  await runner.recover();
  const scheduler = config.scheduleScanMs > 0 ? new Scheduler({ store, settings: { scanMs: config.scheduleScanMs, minIntervalMs: config.scheduleMinIntervalS * 1000 }, onRun: () => runner.wake(), log: app.log }) : null;
  app.addHook('onReady', async () => {
    runner.start();
    scheduler?.start();
  });
  app.addHook('onClose', async () => {
    await scheduler?.stop();
    await runner.close();
    // notices still waiting for a retry are given up (and logged) rather than holding the shutdown
    await serviceHooks?.close();
    await jobs.close();
    await store.close();
  });
  registerDatasetRoutes(app, app.datasets);
  registerObservationRoutes(app, app.datasets);
  registerRunRoutes(app, app.datasets);
  registerChangeRoutes(app, { store });

  // Registered last so the slow start-up above does not count as event-loop delay.
  await app.register(underPressure, {
    maxEventLoopDelay: config.maxEventLoopDelayMs,
    retryAfter: config.retryAfterS,
    pressureHandler: async (_request: FastifyRequest, _reply: FastifyReply, type: string) => {
      throw new HttpProblem('overloaded', `The service is under pressure (${type}); retry later.`, {}, retryAfter);
    },
  });

  return app;
}
