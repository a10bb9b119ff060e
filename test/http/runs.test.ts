/**
 * Runs on stored observations: executed in a worker thread with its own connection to a SQLite
 * file, and (when a server answers) on PostgreSQL. The stored hotspots layer must be the bytes
 * POST /v1/cluster gives for the same observations and settings, track ids aside.
 */
import { mkdtempSync, rmSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import type { FastifyInstance } from 'fastify';
import pg from 'pg';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { buildApp } from '../../src/http/app.js';
import { openStore, type StoreConfig } from '../../src/storage/index.js';
import { postgresSkipReason, TEST_DATABASE_URL } from '../reference/postgres.js';
import { expectMatchesSpec, pointsCollection, testConfig } from './helper.js';

const GEO = { 'content-type': 'application/geo+json' };
const JSON_TYPE = { 'content-type': 'application/json' };
const dir = mkdtempSync(join(tmpdir(), 'roost-runs-'));
const data = pointsCollection(600, 11);
const SETTINGS = { eps: 60, min_points: 5, count_by: 'kind' };

/** Polls a run until it is over; bounded. */
async function finished(app: FastifyInstance, location: string, timeoutMs = 30_000): Promise<Record<string, unknown>> {
  const end = Date.now() + timeoutMs;
  for (;;) {
    const res = await app.inject({ method: 'GET', url: location });
    const run = res.json() as Record<string, unknown>;
    if (run.status === 'succeeded' || run.status === 'failed' || run.status === 'cancelled') return run;
    if (Date.now() > end) throw new Error(`run still ${String(run.status)} after ${timeoutMs} ms`);
    await new Promise((r) => setTimeout(r, 50));
  }
}

/** The stored layer with track ids cleared, as /v1/cluster writes them. */
const withoutTracks = (text: string): string => text.replace(/"track_id":"[^"]*"/g, '"track_id":null');

async function endToEnd(app: FastifyInstance, dataset: string): Promise<void> {
  const created = await app.inject({ method: 'POST', url: '/v1/datasets', headers: JSON_TYPE, payload: JSON.stringify({ id: dataset, settings: SETTINGS }) });
  expect(created.statusCode).toBe(201);
  const posted = await app.inject({ method: 'POST', url: `/v1/datasets/${dataset}/observations`, headers: GEO, payload: data });
  expect(posted.json()).toMatchObject({ accepted: 600 });

  const start = await app.inject({ method: 'POST', url: `/v1/datasets/${dataset}/runs` });
  expect(start.statusCode).toBe(202);
  expectMatchesSpec(start, '/v1/datasets/{id}/runs', 'POST');
  expect(start.json().status).toBe('queued');
  const location = start.headers.location as string;
  expect(location).toBe(`/v1/datasets/${dataset}/runs/${start.json().id}`);
  const run = await finished(app, location);
  expect(run.status, String(run.error)).toBe('succeeded');
  expect(run.progress).toBe(100);
  expect(Object.keys(run.timings_ms as object)).toEqual(expect.arrayContaining(['load', 'cluster', 'save', 'total']));
  const got = await app.inject({ method: 'GET', url: location });
  expectMatchesSpec(got, '/v1/datasets/{id}/runs/{run}', 'GET');

  const cluster = await app.inject({ method: 'POST', url: `/v1/cluster?eps=60&min_points=5&count_by=kind&layer=hotspots`, headers: GEO, payload: data });
  const stored = await app.inject({ method: 'GET', url: `${location}/hotspots` });
  expect(stored.statusCode).toBe(200);
  expect(stored.headers['content-type']).toMatch(/^application\/geo\+json/);
  expectMatchesSpec(stored, '/v1/datasets/{id}/runs/{run}/{layer}', 'GET');
  const hotspots = JSON.parse(stored.body) as { features: { properties: { track_id: string; hotspot_id: number } }[] };
  expect(hotspots.features.length).toBeGreaterThan(0);
  for (const f of hotspots.features) expect(f.properties.track_id).toMatch(/^t\d{6}$/);
  expect(withoutTracks(stored.body)).toBe(cluster.body);
  for (const layer of ['centres', 'noise', 'points']) {
    const c = await app.inject({ method: 'POST', url: `/v1/cluster?eps=60&min_points=5&count_by=kind&layer=${layer}`, headers: GEO, payload: data });
    const s = await app.inject({ method: 'GET', url: `/v1/datasets/${dataset}/runs/latest/${layer}` });
    expectMatchesSpec(s, '/v1/datasets/{id}/runs/latest/{layer}', 'GET');
    expect(withoutTracks(s.body), layer).toBe(c.body);
  }
}

describe('runs on a SQLite file (worker threads)', () => {
  let app: FastifyInstance;
  beforeAll(async () => {
    app = await buildApp({ config: testConfig({ dbPath: join(dir, 'runs.db') }), logger: false });
    await app.ready();
  });
  afterAll(async () => {
    await app.close();
    rmSync(dir, { recursive: true, force: true });
  });

  it('a stored run gives the hotspots, centres, noise and points /v1/cluster gives for the same data', async () => {
    await endToEnd(app, 'same');
  });

  it('latest, listing with paging, and the immediate answer to one posted observation', async () => {
    const latest = await app.inject({ method: 'GET', url: '/v1/datasets/same/runs/latest' });
    expectMatchesSpec(latest, '/v1/datasets/{id}/runs/latest', 'GET');
    const runId = latest.json().id as string;
    const hotspots = JSON.parse((await app.inject({ method: 'GET', url: '/v1/datasets/same/runs/latest/hotspots' })).body);
    const { centre_lon, centre_lat } = hotspots.features[0].properties as { centre_lon: number; centre_lat: number };
    const centre = [centre_lon, centre_lat];
    const inside = await app.inject({
      method: 'POST',
      url: '/v1/datasets/same/observations',
      headers: GEO,
      payload: JSON.stringify({ type: 'Feature', id: 'field-1', geometry: { type: 'Point', coordinates: centre }, properties: { kind: 'a' } }),
    });
    expectMatchesSpec(inside, '/v1/datasets/{id}/observations', 'POST');
    expect(inside.json()).toMatchObject({ observation_id: 'field-1', latest_run: runId, hotspot: { hotspot_id: hotspots.features[0].properties.hotspot_id } });
    expect(inside.json().hotspot.nearest_core_m).toBeLessThanOrEqual(60);
    const far = await app.inject({
      method: 'POST',
      url: '/v1/datasets/same/observations',
      headers: GEO,
      payload: JSON.stringify({ type: 'Feature', id: 'field-2', geometry: { type: 'Point', coordinates: [-70, -30] }, properties: null }),
    });
    expect(far.json()).toMatchObject({ latest_run: runId, hotspot: null });

    const second = await app.inject({ method: 'POST', url: '/v1/datasets/same/runs?eps=40', headers: JSON_TYPE, payload: JSON.stringify({ settings: { min_points: 6 } }) });
    expect(second.json().settings).toMatchObject({ eps: '40', min_points: 6, count_by: 'kind' });
    await finished(app, second.headers.location as string);
    const page1 = await app.inject({ method: 'GET', url: '/v1/datasets/same/runs?limit=1' });
    expectMatchesSpec(page1, '/v1/datasets/{id}/runs', 'GET');
    expect(page1.json().runs[0].id).toBe(second.json().id);
    const page2 = await app.inject({ method: 'GET', url: page1.json().next });
    expect(page2.json().runs.map((r: { id: string }) => r.id)).toEqual([runId]);
    expect(page2.json().next).toBeNull();
  });

  it('cancels a queued run at once; 409 for a finished one; layers of an unfinished run are 409', async () => {
    const store = app.datasets.store;
    // created in the store directly so that the runner is not woken before the cancel
    const queued = await store.createRun({ datasetId: 'same', settings: SETTINGS, trigger: 'request' });
    const res = await app.inject({ method: 'POST', url: `/v1/datasets/same/runs/${queued.id}/cancel` });
    expectMatchesSpec(res, '/v1/datasets/{id}/runs/{run}/cancel', 'POST');
    expect(res.statusCode, res.body).toBe(200);
    expect(res.json()).toMatchObject({ status: 'cancelled', error: 'cancelled on request' });
    const twice = await app.inject({ method: 'POST', url: `/v1/datasets/same/runs/${queued.id}/cancel` });
    expect(twice.statusCode).toBe(409);
    expect(twice.json().code).toBe('run-finished');
    expectMatchesSpec(twice, '/v1/datasets/{id}/runs/{run}/cancel', 'POST');
    const layer = await app.inject({ method: 'GET', url: `/v1/datasets/same/runs/${queued.id}/hotspots` });
    expect(layer.statusCode).toBe(409);
    expect(layer.json().code).toBe('run-not-ready');
    expectMatchesSpec(layer, '/v1/datasets/{id}/runs/{run}/{layer}', 'GET');
  });

  it('refuses bad settings, unknown runs, layers and datasets; a run with nothing to cluster fails with a reason', async () => {
    const bad = await app.inject({ method: 'POST', url: '/v1/datasets/same/runs?eps=-3' });
    expect(bad.json()).toMatchObject({ code: 'invalid-parameter', parameter: 'eps' });
    expectMatchesSpec(bad, '/v1/datasets/{id}/runs', 'POST');
    const unknown = await app.inject({ method: 'GET', url: '/v1/datasets/same/runs/r999999' });
    expect(unknown.json().code).toBe('run-not-found');
    expectMatchesSpec(unknown, '/v1/datasets/{id}/runs/{run}', 'GET');
    const layer = await app.inject({ method: 'GET', url: '/v1/datasets/same/runs/latest/outline' });
    expect(layer.json()).toMatchObject({ code: 'invalid-parameter', parameter: 'layer' });
    const nods = await app.inject({ method: 'POST', url: '/v1/datasets/nope/runs' });
    expect(nods.json().code).toBe('dataset-not-found');

    await app.inject({ method: 'POST', url: '/v1/datasets', headers: JSON_TYPE, payload: JSON.stringify({ id: 'empty', settings: { eps: 10 } }) });
    const none = await app.inject({ method: 'GET', url: '/v1/datasets/empty/runs/latest' });
    expect(none.json().code).toBe('run-not-found');
    const start = await app.inject({ method: 'POST', url: '/v1/datasets/empty/runs' });
    const run = await finished(app, start.headers.location as string);
    expect(run.status).toBe('failed');
    expect(run.error).toMatch(/no observations/);
  });

  it('a window keeps only the observations of that span before the run was asked for', async () => {
    const now = Date.now();
    const f = (id: string, daysAgo: number) => ({ type: 'Feature', id, geometry: { type: 'Point', coordinates: [8, 47 + daysAgo * 1e-6] }, properties: { observed_at: new Date(now - daysAgo * 86_400_000).toISOString() } });
    await app.inject({ method: 'POST', url: '/v1/datasets', headers: JSON_TYPE, payload: JSON.stringify({ id: 'windowed', settings: { eps: 100, min_points: 2 }, window: 'P7D' }) });
    await app.inject({ method: 'POST', url: '/v1/datasets/windowed/observations', headers: GEO, payload: JSON.stringify({ type: 'FeatureCollection', features: [f('old', 30), f('w1', 1), f('w2', 2), f('w3', 3)] }) });
    const start = await app.inject({ method: 'POST', url: '/v1/datasets/windowed/runs' });
    const run = await finished(app, start.headers.location as string);
    expect(run.status).toBe('succeeded');
    const summary = run.summary as { input: { observations: number }; figures: { hotspots: number } };
    expect(summary.input.observations).toBe(3);
    expect(summary.figures.hotspots).toBe(1);
  });
});

const pgReason = await postgresSkipReason();

describe.skipIf(pgReason !== null)(`runs on PostgreSQL${pgReason ? ` (skipped: ${pgReason})` : ''}`, () => {
  const schema = `roost_runs_${process.pid}`;
  let app: FastifyInstance;
  beforeAll(async () => {
    const config: StoreConfig = { databaseUrl: TEST_DATABASE_URL, pgSchema: schema };
    const store = await openStore(config);
    app = await buildApp({ config: testConfig(), logger: false, store, storeConfig: config });
    await app.ready();
  });
  afterAll(async () => {
    await app?.close();
    const c = new pg.Client({ connectionString: TEST_DATABASE_URL });
    await c.connect();
    await c.query(`DROP SCHEMA IF EXISTS ${schema} CASCADE`);
    await c.end();
  });

  it('a stored run gives the layers /v1/cluster gives for the same data', async () => {
    await endToEnd(app, 'same-pg');
  });
});
