/**
 * The answer to an observation post: where each posted observation stands against the latest
 * succeeded run (hotspot, inside its hull or not, its size; or the nearest hotspot), for one
 * Feature and per feature for a collection.
 */
import type { FastifyInstance } from 'fastify';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { buildApp } from '../../src/http/app.js';
import { expectMatchesSpec, pointsCollection, testConfig } from './helper.js';

const GEO = { 'content-type': 'application/geo+json' };
const PATH = '/v1/datasets/{id}/observations';

describe('placements in the answer to an observation post', () => {
  let app: FastifyInstance;
  let runId = '';
  let first: { hotspot_id: number; count: number; area_km2: number; centre: [number, number] };
  beforeAll(async () => {
    app = await buildApp({ config: testConfig({ dbPath: ':memory:', workers: 1 }), logger: false });
    await app.ready();
    const json = { 'content-type': 'application/json' };
    expect((await app.inject({ method: 'POST', url: '/v1/datasets', headers: json, payload: JSON.stringify({ id: 'p', settings: { eps: 60, min_points: 5 } }) })).statusCode).toBe(201);
    expect((await app.inject({ method: 'POST', url: '/v1/datasets/p/observations', headers: GEO, payload: pointsCollection(400, 3) })).statusCode).toBe(200);
    const run = await app.inject({ method: 'POST', url: '/v1/datasets/p/runs', headers: json, payload: '{}' });
    runId = run.json().id as string;
    // bounded poll of the run's status (the run executes in the service's own queue)
    const end = Date.now() + 60_000;
    for (;;) {
      const status = (await app.inject({ method: 'GET', url: `/v1/datasets/p/runs/${runId}` })).json().status as string;
      if (status === 'succeeded') break;
      if (status !== 'queued' && status !== 'running') throw new Error(`run ${status}`);
      if (Date.now() > end) throw new Error('run not finished in 60 s');
      await new Promise((r) => setTimeout(r, 50));
    }
    const props = JSON.parse((await app.inject({ method: 'GET', url: '/v1/datasets/p/runs/latest/hotspots' })).body).features[0].properties;
    first = { ...props, centre: [props.centre_lon, props.centre_lat] };
  });
  afterAll(async () => {
    await app.close();
  });
  const feature = (id: string, c: [number, number]) => ({ type: 'Feature', id, geometry: { type: 'Point', coordinates: c }, properties: {} });

  it('says for one observation whether it lies inside the hull, and the hotspot\'s size', async () => {
    const res = await app.inject({ method: 'POST', url: '/v1/datasets/p/observations', headers: GEO, payload: JSON.stringify(feature('in-1', first.centre)) });
    expectMatchesSpec(res, PATH, 'POST');
    expect(res.json()).toMatchObject({
      latest_run: runId,
      hotspot: { hotspot_id: first.hotspot_id, count: first.count, area_km2: first.area_km2, inside_hull: true },
      nearest_hotspot: null,
    });
  });

  it('names the nearest hotspot and its distance for an observation in none', async () => {
    // 1 km north of the first hotspot's centre: beyond eps of every core member
    const c: [number, number] = [first.centre[0], first.centre[1] + 0.009];
    const res = await app.inject({ method: 'POST', url: '/v1/datasets/p/observations', headers: GEO, payload: JSON.stringify(feature('out-1', c)) });
    expectMatchesSpec(res, PATH, 'POST');
    const body = res.json();
    expect(body.hotspot).toBeNull();
    expect(body.nearest_hotspot.distance_m).toBeGreaterThan(60);
    expect(body.nearest_hotspot.distance_m).toBeLessThan(1100);
  });

  it('answers per feature, in input order, when a collection is posted', async () => {
    const payload = JSON.stringify({ type: 'FeatureCollection', features: [feature('c-1', first.centre), feature('c-2', [-70, -30])] });
    const res = await app.inject({ method: 'POST', url: '/v1/datasets/p/observations', headers: GEO, payload });
    expectMatchesSpec(res, PATH, 'POST');
    const body = res.json();
    expect(body.latest_run).toBe(runId);
    expect(body.placements_total).toBe(2);
    expect(body.placements[0]).toMatchObject({ index: 0, observation_id: 'c-1', hotspot: { hotspot_id: first.hotspot_id }, nearest_hotspot: null });
    expect(body.placements[1]).toMatchObject({ index: 1, observation_id: 'c-2', hotspot: null });
    expect(body.placements[1].nearest_hotspot.distance_m).toBeGreaterThan(1e6);
  });
});
