/**
 * Published layers over HTTP: a dataset's publish settings, the public addresses a map points at,
 * withheld hotspots and noise, allowed properties only, and keys still reading the exact layers.
 */
import { mkdtempSync, rmSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { afterEach, describe, expect, it } from 'vitest';
import type { FastifyInstance } from 'fastify';
import { publishLayerTexts, resolvePublishOptions } from '../../src/publish/publish.js';
import { midLatitudeSet, rng } from '../reference/seeded.js';
import { testApp } from './helper.js';

let app: FastifyInstance;
afterEach(async () => {
  await app?.close();
});

const json = { 'content-type': 'application/json' };
const bearer = (t: string) => ({ authorization: `Bearer ${t}` });

function observations(): string {
  const set = midLatitudeSet(9);
  const r = rng(9);
  return JSON.stringify({
    type: 'FeatureCollection',
    features: Array.from({ length: set.n }, (_, i) => ({ type: 'Feature', id: `case-${i}`, geometry: { type: 'Point', coordinates: [set.lon[i], set.lat[i]] }, properties: { species: ['heron', 'egret'][r.int(2)], note: `PRIVATE${i}` } })),
  });
}

async function runToEnd(app: FastifyInstance, token: string): Promise<string> {
  const started = (await app.inject({ method: 'POST', url: '/v1/datasets/cases/runs', headers: { ...json, ...bearer(token) } })).json();
  await app.runner.idle();
  const run = (await app.inject({ method: 'GET', url: `/v1/datasets/cases/runs/${started.id}`, headers: bearer(token) })).json();
  expect(run.status).toBe('succeeded');
  return run.id;
}

describe('published layers', () => {
  it('are served to anyone when the dataset is public, generalised and withheld as its settings say', async () => {
    app = await testApp();
    const admin = (await app.inject({ method: 'POST', url: '/v1/keys', headers: json, payload: { role: 'admin' } })).json().token as string;
    const created = await app.inject({
      method: 'POST',
      url: '/v1/datasets',
      headers: { ...json, ...bearer(admin) },
      payload: { id: 'cases', settings: { eps: 200, min_points: 8 }, publish: { public: true, generalise_m: 100, min_count: 62, properties: ['species'] } },
    });
    expect(created.statusCode, created.body).toBe(201);
    expect(created.json().publish).toEqual({ public: true, generalise_m: 100, min_count: 62, noise: 'withhold', properties: ['species'] });
    await app.inject({ method: 'POST', url: '/v1/datasets/cases/observations', headers: { 'content-type': 'application/geo+json', ...bearer(admin) }, payload: observations() });
    const runId = await runToEnd(app, admin);

    const pub = await app.inject({ method: 'GET', url: '/v1/datasets/cases/runs/latest/published/hotspots' });
    expect(pub.statusCode).toBe(200);
    expect(pub.headers['content-type']).toMatch(/^application\/geo\+json/);
    const layer = pub.json();
    expect(layer.published.hotspots.withheld).toBeGreaterThan(0);
    expect(layer.published.observations.published + layer.published.observations.withheld_in_small_hotspots + layer.published.observations.withheld_noise).toBe(layer.published.observations.total);
    expect(layer.features.every((f: { properties: { count: number } }) => f.properties.count >= 62)).toBe(true);
    const points = await app.inject({ method: 'GET', url: `/v1/datasets/cases/runs/${runId}/published/points` });
    expect(points.statusCode).toBe(200);
    for (const body of [pub.body, points.body]) {
      expect(body).not.toContain('PRIVATE');
      expect(body).not.toContain('case-');
      expect(body).not.toContain('medoid');
    }
    expect(points.body).toContain('"species"');
    // the exact layers still need a key
    expect((await app.inject({ method: 'GET', url: '/v1/datasets/cases/runs/latest/hotspots' })).statusCode).toBe(401);
    expect((await app.inject({ method: 'GET', url: '/v1/datasets/cases/runs/latest/hotspots', headers: bearer(admin) })).body).toContain('medoid_id');

    // not public: the published layers need a key too
    await app.inject({ method: 'PATCH', url: '/v1/datasets/cases', headers: { ...json, ...bearer(admin) }, payload: { publish: { public: false, generalise_m: 100 } } });
    expect((await app.inject({ method: 'GET', url: '/v1/datasets/cases/runs/latest/published/hotspots' })).statusCode).toBe(401);
    expect((await app.inject({ method: 'GET', url: '/v1/datasets/cases/runs/latest/published/hotspots', headers: bearer(admin) })).statusCode).toBe(200);
    // no publishing settings: no published layers
    await app.inject({ method: 'PATCH', url: '/v1/datasets/cases', headers: { ...json, ...bearer(admin) }, payload: { publish: null } });
    const none = await app.inject({ method: 'GET', url: '/v1/datasets/cases/runs/latest/published/hotspots', headers: bearer(admin) });
    expect(none.statusCode).toBe(404);
    expect(none.json().code).toBe('not-published');
  });

  it('refuses unusable publishing settings, naming the member', async () => {
    app = await testApp();
    for (const [publish, member] of [
      [{ generalise_m: 0 }, 'publish.generalise_m'],
      [{ public: true }, 'publish.generalise_m'],
      [{ generalise_m: 100, noise: 'show' }, 'publish.noise'],
      [{ generalise_m: 100, public: 'yes' }, 'publish.public'],
      [{ generalise_m: 100, colour: 'red' }, 'publish.colour'],
      ['everything', 'publish'],
    ] as const) {
      const res = await app.inject({ method: 'POST', url: '/v1/datasets', headers: json, payload: { id: 'x', settings: { eps: 10 }, publish } });
      expect(res.statusCode, JSON.stringify(publish)).toBe(400);
      expect(res.json().parameter, JSON.stringify(publish)).toBe(member);
    }
  });

  it('are made in a job thread on a database file, the same as made directly, and concurrent requests all get them', async () => {
    const dir = mkdtempSync(join(tmpdir(), 'roost-published-'));
    try {
      app = await testApp({ dbPath: join(dir, 'roost.db'), scheduleScanMs: 0 });
      expect(app.storeConfig).not.toBeNull();
      const publish = { public: true, generalise_m: 100, min_count: 62, noise: 'publish', properties: ['species'] };
      expect((await app.inject({ method: 'POST', url: '/v1/datasets', headers: json, payload: { id: 'cases', settings: { eps: 200, min_points: 8 }, publish } })).statusCode).toBe(201);
      expect((await app.inject({ method: 'POST', url: '/v1/datasets/cases/observations', headers: { 'content-type': 'application/geo+json' }, payload: observations() })).statusCode).toBe(200);
      const started = (await app.inject({ method: 'POST', url: '/v1/datasets/cases/runs', headers: json })).json();
      await app.runner.idle();
      const runId = started.id as string;
      expect((await app.inject({ method: 'GET', url: `/v1/datasets/cases/runs/${runId}` })).json().status).toBe('succeeded');
      // made directly on this thread from the stored layers
      const direct = publishLayerTexts((await app.store.getRunLayer(runId, 'points'))!, (await app.store.getRunLayer(runId, 'hotspots'))!, resolvePublishOptions(publish));
      const layers = ['hotspots', 'centres', 'noise', 'points'] as const;
      const answers = await Promise.all(layers.flatMap((layer) => [0, 1].map(() => app.inject({ method: 'GET', url: `/v1/datasets/cases/runs/latest/published/${layer}` }).then((res) => ({ layer, res })))));
      for (const { layer, res } of answers) {
        expect(res.statusCode, layer).toBe(200);
        expect(res.headers['x-roost-run']).toBe(runId);
        expect(res.body, layer).toBe(direct[layer]);
      }
      expect(JSON.parse(direct.noise).features.length).toBeGreaterThan(0);
    } finally {
      await app?.close();
      rmSync(dir, { recursive: true, force: true });
    }
  }, 60_000);
});
