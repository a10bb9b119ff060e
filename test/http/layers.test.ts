/**
 * The result-layer addresses: bbox, datetime, limit and cursor; unknown parameters refused; ETag and
 * Last-Modified answered 304 (RFC 9110 §13.1.1, §13.1.3); and the listings' ETags.
 */
import type { FastifyInstance } from 'fastify';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { expectMatchesSpec, pointsCollection, testApp } from './helper.js';

const GEO = { 'content-type': 'application/geo+json' };

describe('result layers by address', () => {
  let app: FastifyInstance;
  const data = pointsCollection(200, 21);
  const input = (JSON.parse(data) as { features: { id: string; geometry: { coordinates: [number, number] } }[] }).features;
  beforeAll(async () => {
    app = await testApp({ allowedHosts: 'survey.example' });
    await app.inject({ method: 'POST', url: '/v1/datasets', headers: { 'content-type': 'application/json' }, payload: JSON.stringify({ id: 'd', settings: { eps: 60, min_points: 5 } }) });
    await app.inject({ method: 'POST', url: '/v1/datasets/d/observations', headers: GEO, payload: data });
    const run = await app.inject({ method: 'POST', url: '/v1/datasets/d/runs' });
    for (;;) {
      const r = (await app.inject({ method: 'GET', url: run.headers.location as string })).json() as { status: string };
      if (r.status === 'succeeded') break;
      if (r.status !== 'queued' && r.status !== 'running') throw new Error(r.status);
      await new Promise((resolve) => setTimeout(resolve, 20));
    }
  }, 60_000);
  afterAll(async () => {
    await app.close();
  });

  it('pages a layer with limit and cursor, and filters it by bbox', async () => {
    const whole = JSON.parse((await app.inject({ method: 'GET', url: '/v1/datasets/d/runs/latest/points' })).body) as { features: { id: string }[] };
    const seen: string[] = [];
    let url: string | null = '/v1/datasets/d/runs/latest/points?limit=30';
    while (url !== null) {
      const res = await app.inject({ method: 'GET', url });
      expectMatchesSpec(res, '/v1/datasets/{id}/runs/latest/{layer}', 'GET');
      const doc = res.json() as { features: { id: string }[]; numberMatched: number; links: { rel: string; href: string }[] };
      expect(doc.numberMatched).toBe(200);
      seen.push(...doc.features.map((f) => f.id));
      url = doc.links.find((l) => l.rel === 'next')?.href ?? null;
    }
    expect(seen).toEqual(whole.features.map((f) => f.id));
    const box = [8.535, 47.365, 8.555, 47.385];
    const inside = input.filter((f) => f.geometry.coordinates[0] >= box[0]! && f.geometry.coordinates[0] <= box[2]! && f.geometry.coordinates[1] >= box[1]! && f.geometry.coordinates[1] <= box[3]!).map((f) => f.id);
    expect(inside.length).toBeGreaterThan(10);
    const got = (await app.inject({ method: 'GET', url: `/v1/datasets/d/runs/latest/points?bbox=${box.join(',')}` })).json() as { features: { id: string }[] };
    expect(got.features.map((f) => f.id)).toEqual(inside);
  });

  it('refuses unknown parameters and bad values', async () => {
    for (const q of ['foo=bar', 'limit=0', 'bbox=1,2', 'cursor=abc', 'format=csv']) {
      const res = await app.inject({ method: 'GET', url: `/v1/datasets/d/runs/latest/hotspots?${q}` });
      expect(res.statusCode, q).toBe(400);
      expect(res.json().code).toBe('invalid-parameter');
    }
  });

  it('answers 304 to If-None-Match and If-Modified-Since while the layer is the same', async () => {
    const first = await app.inject({ method: 'GET', url: '/v1/datasets/d/runs/latest/hotspots' });
    const etag = first.headers.etag as string;
    const modified = first.headers['last-modified'] as string;
    expect(etag).toMatch(/^"r\d+\.hotspots"$/);
    expect(new Date(modified).toUTCString()).toBe(modified);
    expect((await app.inject({ method: 'GET', url: '/v1/datasets/d/runs/latest/hotspots', headers: { 'if-none-match': etag } })).statusCode).toBe(304);
    expect((await app.inject({ method: 'GET', url: '/v1/datasets/d/runs/latest/hotspots', headers: { 'if-none-match': `"other", W/${etag}` } })).statusCode).toBe(304);
    expect((await app.inject({ method: 'GET', url: '/v1/datasets/d/runs/latest/hotspots', headers: { 'if-modified-since': modified } })).statusCode).toBe(304);
    const earlier = new Date(Date.parse(modified) - 1000).toUTCString();
    expect((await app.inject({ method: 'GET', url: '/v1/datasets/d/runs/latest/hotspots', headers: { 'if-modified-since': earlier } })).statusCode).toBe(200);
    expect((await app.inject({ method: 'GET', url: '/v1/datasets/d/runs/latest/hotspots', headers: { 'if-none-match': '"other"' } })).statusCode).toBe(200);
    // a page has its own tag
    const page = await app.inject({ method: 'GET', url: '/v1/datasets/d/runs/latest/points?limit=5' });
    expect(page.headers.etag).not.toBe(etag);
    expect((await app.inject({ method: 'GET', url: '/v1/datasets/d/runs/latest/points?limit=5', headers: { 'if-none-match': page.headers.etag as string } })).statusCode).toBe(304);
  });

  it('sends a whole layer as the exact bytes stored, characters beyond ASCII included', async () => {
    const named = JSON.stringify({
      type: 'FeatureCollection',
      features: Array.from({ length: 12 }, (_, i) => ({ type: 'Feature', id: `ü${i}`, geometry: { type: 'Point', coordinates: [8.54 + i * 1e-5, 47.37] }, properties: { place: 'Zürich 😀', note: 'ä\u2028é' } })),
    });
    await app.inject({ method: 'POST', url: '/v1/datasets', headers: { 'content-type': 'application/json' }, payload: JSON.stringify({ id: 'u', settings: { eps: 60, min_points: 3 } }) });
    await app.inject({ method: 'POST', url: '/v1/datasets/u/observations', headers: GEO, payload: named });
    const run = await app.inject({ method: 'POST', url: '/v1/datasets/u/runs' });
    const runId = (run.json() as { id: string }).id;
    for (;;) {
      const r = (await app.inject({ method: 'GET', url: run.headers.location as string })).json() as { status: string };
      if (r.status === 'succeeded') break;
      if (r.status !== 'queued' && r.status !== 'running') throw new Error(r.status);
      await new Promise((resolve) => setTimeout(resolve, 20));
    }
    const store = (app as unknown as { store: { getRunLayer(id: string, l: string): Promise<string | null> } }).store;
    for (const layer of ['points', 'hotspots', 'centres', 'noise']) {
      const res = await app.inject({ method: 'GET', url: `/v1/datasets/u/runs/latest/${layer}` });
      expect(res.statusCode).toBe(200);
      expect(res.headers['content-type']).toMatch(/^application\/geo\+json/);
      expect(res.rawPayload.equals(Buffer.from((await store.getRunLayer(runId, layer))!, 'utf8'))).toBe(true);
    }
    const points = (await app.inject({ method: 'GET', url: '/v1/datasets/u/runs/latest/points' })).json() as { features: { id: string; properties: { place: string } }[] };
    expect(points.features.map((f) => f.id).sort()).toEqual(Array.from({ length: 12 }, (_, i) => `ü${i}`).sort());
    expect(points.features.every((f) => f.properties.place === 'Zürich 😀')).toBe(true);
  });

  it('tags the observation listing by its content: a new observation changes the tag', async () => {
    const first = await app.inject({ method: 'GET', url: '/v1/datasets/d/observations?limit=500' });
    const etag = first.headers.etag as string;
    expect((await app.inject({ method: 'GET', url: '/v1/datasets/d/observations?limit=500', headers: { 'if-none-match': etag } })).statusCode).toBe(304);
    await app.inject({ method: 'POST', url: '/v1/datasets/d/observations', headers: GEO, payload: JSON.stringify({ type: 'Feature', id: 'new', geometry: { type: 'Point', coordinates: [8.5, 47.3] }, properties: {} }) });
    const after = await app.inject({ method: 'GET', url: '/v1/datasets/d/observations?limit=500', headers: { 'if-none-match': etag } });
    expect(after.statusCode).toBe(200);
    expect(after.headers.etag).not.toBe(etag);
  });

  it('/docs calls the service at the address the page was loaded from', async () => {
    const spec = (await app.inject({ method: 'GET', url: '/docs/json', headers: { host: 'survey.example:9000' } })).json() as { servers: { url: string }[] };
    expect(spec.servers).toEqual([{ url: 'http://survey.example:9000', description: 'this service' }]);
  });
});
