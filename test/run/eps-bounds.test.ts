/**
 * eps within the bounds the code can serve, and clear refusals past them: eps above 2 000 km is a
 * 400 naming eps; eps at the bound works; observations chained into a hotspot that reaches round
 * the globe (possible at any eps) are a 400 naming eps, never a 500; a stored run with settings it
 * cannot use fails with a message saying what to change, and a failure inside the service shows
 * users only a message with the run id, its detail going to the log.
 */
import type { FastifyInstance } from 'fastify';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import type { FinishedHotspot, RunContext, RunHooks } from '../../src/jobs/hooks.js';
import { defaultHooks } from '../../src/jobs/default-hooks.js';
import { Runner } from '../../src/jobs/runner.js';
import { clusterInput } from '../../src/run/cluster.js';
import { MAX_EPS_METERS, resolveSettings, SettingsError } from '../../src/run/settings.js';
import { openSqliteStore } from '../../src/storage/sqlite.js';
import { expectMatchesSpec, testApp } from '../http/helper.js';

/** Points every 5° round the equator: at eps 600 km each is a neighbour of the next (5° of arc is 556 km on our sphere). */
const RING = JSON.stringify({
  type: 'FeatureCollection',
  features: Array.from({ length: 72 }, (_, i) => ({ type: 'Feature', id: `r${i}`, geometry: { type: 'Point', coordinates: [-180 + i * 5, i % 2 === 0 ? 0 : 0.5] }, properties: {} })),
});
/** A few points far apart: at the largest eps they form hotspots of one or two, outlined by the largest buffer. */
const SPREAD = JSON.stringify({
  type: 'FeatureCollection',
  features: [[0, 60], [10, 60], [100, 0], [-100, -40], [170, 10]].map((c, i) => ({ type: 'Feature', id: `s${i}`, geometry: { type: 'Point', coordinates: c }, properties: {} })),
});

const settingsError = (f: () => unknown): SettingsError => {
  try {
    f();
  } catch (e) {
    if (e instanceof SettingsError) return e;
    throw e;
  }
  throw new Error('expected a SettingsError');
};

describe('eps bounds', () => {
  it('accept eps up to 2 000 km and refuse more, naming eps', () => {
    expect(MAX_EPS_METERS).toBe(2_000_000);
    expect(resolveSettings({ eps: 2_000_000 }).epsMeters).toBe(2_000_000);
    const e = settingsError(() => resolveSettings({ eps: 2_000_001 }));
    expect(e.parameter).toBe('eps');
    expect(e.message).toMatch(/at most 2000000/);
  });

  it('serve the largest eps, buffers of one and two observations included', () => {
    for (const hull of ['convex', 'concave']) {
      const r = clusterInput(SPREAD, 'geojson', resolveSettings({ eps: MAX_EPS_METERS, min_points: 2, hull }));
      // source: haversine on the IUGG mean radius; [0,60]–[10,60] is 556 km apart, every other pair over 2 000 km
      expect((r.summary.figures as { hotspots: number }).hotspots).toBe(1);
    }
  });

  it('refuse a hotspot reaching round the globe with a message naming eps, at an eps well inside the bound', () => {
    const e = settingsError(() => clusterInput(RING, 'geojson', resolveSettings({ eps: 600_000, min_points: 2 })));
    expect(e.parameter).toBe('eps');
    expect(e.message).toMatch(/hotspot 1 joins 72 observations .*smaller eps/);
    expect(e.message).not.toMatch(/hotspotHull/);
  });
});

describe('eps bounds over HTTP', () => {
  let app: FastifyInstance;
  beforeAll(async () => {
    app = await testApp();
  });
  afterAll(async () => {
    await app.close();
  });

  it('answer 400 naming eps, never 500', async () => {
    const over = await app.inject({ method: 'POST', url: '/v1/cluster?eps=2000001', headers: { 'content-type': 'application/geo+json' }, payload: SPREAD });
    expect(over.statusCode, over.body).toBe(400);
    expect(over.json()).toMatchObject({ code: 'invalid-parameter', parameter: 'eps' });
    expectMatchesSpec(over, '/v1/cluster', 'POST');
    const ring = await app.inject({ method: 'POST', url: '/v1/cluster?eps=600000&min_points=2', headers: { 'content-type': 'application/geo+json' }, payload: RING });
    expect(ring.statusCode, ring.body).toBe(400);
    expect(ring.json()).toMatchObject({ code: 'invalid-parameter', parameter: 'eps' });
    const at = await app.inject({ method: 'POST', url: `/v1/cluster?eps=${MAX_EPS_METERS}&min_points=2`, headers: { 'content-type': 'application/geo+json' }, payload: SPREAD });
    expect(at.statusCode, at.body).toBe(200);
  });
});

describe('stored runs that fail', () => {
  const setup = async (hooks: RunHooks, log: { error(o: object, m: string): void }) => {
    const store = openSqliteStore({ path: ':memory:' });
    await store.migrate();
    await store.createDataset({ id: 'ring', name: 'ring', settings: { eps: 600_000, min_points: 2 }, idProperty: null, window: null, schedule: null, webhook: null });
    const features = (JSON.parse(RING) as { features: { id: string; geometry: { coordinates: [number, number] } }[] }).features;
    await store.ingest(
      'ring',
      features.map((f) => ({ id: f.id, lon: f.geometry.coordinates[0], lat: f.geometry.coordinates[1], observedAt: null, weight: null, feature: JSON.stringify(f), contentHash: f.id })),
      { replace: false, partial: false },
    );
    const runner = new Runner({ store, hooks, concurrency: 1, storeConfig: null, pool: null, log: { info: () => undefined, warn: () => undefined, error: log.error } });
    return { store, runner };
  };

  it('say what to change when the settings cannot serve the data', async () => {
    const { store, runner } = await setup(defaultHooks(), { error: () => undefined });
    const run = await store.createRun({ datasetId: 'ring', settings: { eps: 600_000, min_points: 2 }, trigger: 'request' });
    const old = await store.createRun({ datasetId: 'ring', settings: { eps: 3_000_000 }, trigger: 'request' });
    runner.start();
    await runner.idle();
    await runner.close();
    const failed = (await store.getRun('ring', run.id))!;
    expect(failed.status).toBe('failed');
    expect(failed.error).toMatch(/^the run's settings cannot be used: eps: at 600000 m, hotspot 1 joins 72 observations.*smaller eps.*PATCH/);
    // settings stored before the bound (a dataset from an older version) fail the same way
    expect((await store.getRun('ring', old.id))!.error).toMatch(/^the run's settings cannot be used: eps: must be at most 2000000/);
    await store.close();
  });

  it('show users only the run id when the service itself failed, and log the detail with it', async () => {
    const logged: object[] = [];
    const hooks: RunHooks = { ...defaultHooks(), assignTracks: async (_ctx: RunContext, _h: FinishedHotspot[]) => Promise.reject(new Error('connection to the track table lost: secret detail')) };
    const { store, runner } = await setup(hooks, { error: (o) => logged.push(o) });
    await store.updateDataset('ring', { settings: { eps: 100, min_points: 2 } });
    const run = await store.createRun({ datasetId: 'ring', settings: { eps: 100_000, min_points: 1 }, trigger: 'request' });
    runner.start();
    await runner.idle();
    await runner.close();
    const failed = (await store.getRun('ring', run.id))!;
    expect(failed.status).toBe('failed');
    expect(failed.error).not.toMatch(/secret/);
    expect(failed.error).toContain(run.id);
    expect(failed.error).toMatch(/try it again/);
    expect(logged).toContainEqual(expect.objectContaining({ run: run.id, err: expect.objectContaining({ message: expect.stringMatching(/secret detail/) }) }));
    await store.close();
  });
});
