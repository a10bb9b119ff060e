/**
 * Each plugin of the application stands alone: a bare Fastify instance with only the plugins a
 * route group needs answers through `inject`, with the service's problem bodies.
 */
import Fastify, { type FastifyInstance } from 'fastify';
import { afterEach, describe, expect, it } from 'vitest';
import bodies from '../../src/http/plugins/bodies.js';
import { defaultHooks } from '../../src/jobs/default-hooks.js';
import pools from '../../src/http/plugins/pools.js';
import problems from '../../src/http/plugins/problems.js';
import runQueue from '../../src/http/plugins/run-queue.js';
import schemas from '../../src/http/plugins/schemas.js';
import shutdown from '../../src/http/plugins/shutdown.js';
import storePlugin from '../../src/http/plugins/store.js';
import type { WorkPool } from '../../src/http/pool.js';
import changeRoutes from '../../src/http/routes/changes.js';
import clusterRoutes from '../../src/http/routes/cluster.js';
import datasetRoutes from '../../src/http/routes/datasets.js';
import observationRoutes from '../../src/http/routes/observations.js';
import runRoutes from '../../src/http/routes/runs.js';
import serviceRoutes from '../../src/http/routes/service.js';
import { expectMatchesSpec, pointsCollection } from './helper.js';

const JSON_BODY = { 'content-type': 'application/json' };
let app: FastifyInstance;
afterEach(async () => {
  await app?.close();
});

/** A bare instance with the plugins every route group expects: problems, raw bodies and the route schemas. */
async function bare(): Promise<FastifyInstance> {
  const f = Fastify({ logger: false });
  await f.register(problems);
  await f.register(bodies, { bodyLimitBytes: 1024 * 1024 });
  await f.register(schemas);
  return f;
}

/** A work pool that answers every task with the op and layer it was given, without threads. */
function echoPool(): WorkPool {
  return {
    run: async (task) => ({ ok: true, contentType: 'application/json', body: Buffer.from(JSON.stringify({ op: task.op, layer: task.layer, query: task.query })) }),
    runArriving: async () => ({ ok: false, code: 'read-again' }),
    idle: false,
    threads: 1,
    queued: 0,
    utilization: 0,
    close: async () => undefined,
  };
}

const POOLS = { workers: 1, queueSize: 1, runConcurrency: 1, retryAfterS: 1 };

describe('plugins alone', () => {
  it('problems: an unknown route is a not-found problem with the request id', async () => {
    app = await bare();
    const res = await app.inject({ method: 'GET', url: '/nowhere', headers: { 'x-request-id': 'r1' } });
    expect(res.statusCode).toBe(404);
    expect(res.json()).toMatchObject({ code: 'not-found', status: 404 });
    expect(res.headers['content-type']).toContain('application/problem+json');
  });

  it('datasets: with the store alone, a dataset is created, read and refused twice', async () => {
    app = await bare();
    await app.register(storePlugin, { databaseUrl: '', dbPath: ':memory:' });
    await app.register(datasetRoutes);
    const body = JSON.stringify({ id: 'alone', settings: { eps: 100, min_points: 3 } });
    const created = await app.inject({ method: 'POST', url: '/v1/datasets', headers: JSON_BODY, payload: body });
    expect(created.statusCode).toBe(201);
    expectMatchesSpec(created, '/v1/datasets', 'POST');
    expect((await app.inject({ method: 'GET', url: '/v1/datasets/alone' })).json()).toMatchObject({ id: 'alone', observations: 0 });
    const again = await app.inject({ method: 'POST', url: '/v1/datasets', headers: JSON_BODY, payload: body });
    expect(again.json()).toMatchObject({ status: 409, code: 'dataset-exists' });
  });

  it('observations: with the store and the pools, a batch is stored and listed', async () => {
    app = await bare();
    await app.register(storePlugin, { databaseUrl: '', dbPath: ':memory:' });
    await app.register(pools, { ...POOLS, pool: echoPool() });
    await app.register(datasetRoutes);
    await app.register(observationRoutes);
    await app.inject({ method: 'POST', url: '/v1/datasets', headers: JSON_BODY, payload: JSON.stringify({ id: 'obs', settings: { eps: 100 } }) });
    const posted = await app.inject({ method: 'POST', url: '/v1/datasets/obs/observations', headers: { 'content-type': 'application/geo+json' }, payload: pointsCollection(20) });
    expect(posted.json()).toMatchObject({ stored: true, accepted: 20 });
    const listed = await app.inject({ method: 'GET', url: '/v1/datasets/obs/observations?limit=5' });
    expect(listed.json().features).toHaveLength(5);
  });

  it('cluster: with the pools alone, the task reaches the pool and its bytes come back', async () => {
    app = await bare();
    await app.register(pools, { ...POOLS, pool: echoPool() });
    await app.register(clusterRoutes, { timeLimitMs: 10_000, retryAfterS: 1 });
    const res = await app.inject({ method: 'POST', url: '/v1/cluster?eps=100&layer=centres', headers: { 'content-type': 'application/geo+json' }, payload: '{}' });
    expect(res.json()).toEqual({ op: 'cluster', layer: 'centres', query: { eps: '100' } });
    const bad = await app.inject({ method: 'POST', url: '/v1/k-distance?layer=centres', headers: { 'content-type': 'application/geo+json' }, payload: '{}' });
    expect(bad.json()).toMatchObject({ status: 400, code: 'invalid-parameter', parameter: 'layer' });
  });

  it('runs and changes: with the store, the pools and the run queue, a run is queued and has nothing to compare yet', async () => {
    app = await bare();
    await app.register(storePlugin, { databaseUrl: '', dbPath: ':memory:' });
    await app.register(pools, { ...POOLS, pool: echoPool() });
    await app.register(runQueue, { runConcurrency: 1, scheduleScanMs: 0, webhookAttempts: 1, webhookTimeoutMs: 1000, allowPrivateWebhooks: false, publicUrl: '', hooks: defaultHooks() });
    await app.register(datasetRoutes);
    await app.register(runRoutes);
    await app.register(changeRoutes);
    await app.inject({ method: 'POST', url: '/v1/datasets', headers: JSON_BODY, payload: JSON.stringify({ id: 'runs', settings: { eps: 100 } }) });
    const queued = await app.inject({ method: 'POST', url: '/v1/datasets/runs/runs', headers: JSON_BODY, payload: '{}' });
    expect(queued.statusCode).toBe(202);
    expectMatchesSpec(queued, '/v1/datasets/{id}/runs', 'POST');
    const changes = await app.inject({ method: 'GET', url: '/v1/datasets/runs/changes' });
    expect(changes.json()).toMatchObject({ status: 404, code: 'run-not-found' });
  });

  it('service: /healthz reports the pools and turns to closing when close() begins', async () => {
    app = await bare();
    await app.register(shutdown, { retryAfterS: 1 });
    await app.register(pools, { ...POOLS, pool: echoPool() });
    await app.register(serviceRoutes);
    const res = await app.inject({ method: 'GET', url: '/healthz' });
    expect(res.json()).toEqual({ status: 'ok', service: 'roost', workers: 1, queued: 0, in_progress: 0, uploading: 0, storing: 0 });
    expectMatchesSpec(res, '/healthz', 'GET');
    expect((await app.inject({ method: 'GET', url: '/openapi.yaml' })).statusCode).toBe(200);
  });
});
