import { readFileSync } from 'node:fs';
import { Readable } from 'node:stream';
import type { FastifyInstance } from 'fastify';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { buildApp, OPENAPI_PATH } from '../../src/http/app.js';
import { MAX_LISTED_PROBLEMS } from '../../src/http/errors.js';
import type { WorkPool } from '../../src/http/pool.js';
import { expectMatchesSpec, pointsCollection, spec, testApp, testConfig } from './helper.js';

const GEOJSON = { 'content-type': 'application/geo+json' };
const small = pointsCollection(60, 7);

describe('service routes', () => {
  let app: FastifyInstance;
  const routes: { method: string; url: string }[] = [];
  beforeAll(async () => {
    const onRoute = (r: { method: string | string[]; url: string }): void => {
      // HEAD routes are added by Fastify beside every GET
      for (const method of [r.method].flat()) if (method !== 'HEAD') routes.push({ method, url: r.url });
    };
    app = await buildApp({ config: testConfig(), logger: false, onRoute });
    await app.ready();
  });
  afterAll(async () => {
    await app.close();
  });

  it('GET /healthz answers with the documented shape and a request id', async () => {
    const res = await app.inject({ method: 'GET', url: '/healthz' });
    expect(res.statusCode).toBe(200);
    expect(res.json()).toMatchObject({ status: 'ok', service: 'roost', workers: 1 });
    expect(res.headers['x-request-id']).toMatch(/^[0-9a-f-]{36}$/);
    expectMatchesSpec(res, '/healthz', 'GET');
  });

  it('keeps a plain client request id and replaces an unusable one', async () => {
    const kept = await app.inject({ method: 'GET', url: '/healthz', headers: { 'x-request-id': 'survey-app:42' } });
    expect(kept.headers['x-request-id']).toBe('survey-app:42');
    const replaced = await app.inject({ method: 'GET', url: '/healthz', headers: { 'x-request-id': 'bad id\twith spaces' } });
    expect(replaced.headers['x-request-id']).not.toBe('bad id\twith spaces');
    const err = await app.inject({ method: 'GET', url: '/nowhere', headers: { 'x-request-id': 'trace-7' } });
    expect(err.json().request_id).toBe('trace-7');
  });

  it('GET /openapi.yaml serves the repository file byte for byte', async () => {
    const res = await app.inject({ method: 'GET', url: '/openapi.yaml' });
    expect(res.statusCode).toBe(200);
    expect(res.headers['content-type']).toMatch(/^application\/yaml/);
    expect(res.rawPayload.equals(readFileSync(OPENAPI_PATH))).toBe(true);
  });

  it('GET /docs is an HTML page whose scripts and styles are all served here', async () => {
    const res = await app.inject({ method: 'GET', url: '/docs' });
    expect(res.statusCode).toBe(200);
    expect(res.headers['content-type']).toMatch(/^text\/html/);
    const assets = [...res.body.matchAll(/(?:src|href)="([^"]+)"/g)].map((m) => m[1]!);
    expect(assets.length).toBeGreaterThan(2);
    for (const url of assets) {
      expect(url.startsWith('/docs/'), url).toBe(true);
      const asset = await app.inject({ method: 'GET', url });
      expect(asset.statusCode, url).toBe(200);
      expect(asset.body).not.toMatch(/https?:\/\/(unpkg|cdn|cdnjs|jsdelivr)/);
    }
    expect(String(res.headers['content-security-policy'])).not.toMatch(/https:|upgrade-insecure-requests|validator\.swagger\.io/);
    // the page documents this very contract
    const json = await app.inject({ method: 'GET', url: '/docs/json' });
    expect(json.json().paths).toEqual(spec.paths);
  });

  it('every route is in the spec and every spec operation is served', async () => {
    const documented = new Set<string>();
    for (const [path, item] of Object.entries(spec.paths)) for (const m of Object.keys(item)) documented.add(`${m.toUpperCase()} ${path}`);
    // the documentation page's own helpers (/docs/json, /docs/static/…) and the map page's files
    // (/assets/…) belong to the pages, not the API
    // Fastify writes path parameters as :name, OpenAPI as {name}
    const served = routes.filter((r) => !r.url.startsWith('/docs/') && !r.url.startsWith('/assets/')).map((r) => `${r.method} ${r.url.replace(/:(\w+)/g, '{$1}')}`);
    expect(new Set(served)).toEqual(documented);
    for (const key of documented) {
      const [method, template] = key.split(' ') as ['GET' | 'POST' | 'PATCH' | 'DELETE', string];
      // templated paths are asked for with made-up ids: a not-found problem naming the missing
      // resource is a served route; the router's own not-found is not
      const url = template.replace(/\{(\w+)\}/g, (_m, name: string) => (name === 'layer' ? 'hotspots' : `no-such-${name}`));
      const res = await app.inject({ method, url, headers: method === 'POST' ? GEOJSON : {}, payload: method === 'POST' ? small : undefined });
      if (res.statusCode === 404) expect(res.json().code, key).not.toBe('not-found');
    }
  });

  it('an unknown path or method is a not-found problem', async () => {
    for (const [method, url] of [['GET', '/v2/cluster'], ['GET', '/v1/cluster'], ['DELETE', '/healthz']] as const) {
      const res = await app.inject({ method, url });
      expect(res.statusCode).toBe(404);
      expect(res.json().code).toBe('not-found');
      expectMatchesSpec(res, url, method);
    }
  });

  it('415 for a media type the endpoint does not read, or none', async () => {
    for (const headers of [{ 'content-type': 'text/plain' }, { 'content-type': 'application/xml' }, { 'content-type': 'multipart/form-data; boundary=x' }, {}]) {
      const res = await app.inject({ method: 'POST', url: '/v1/cluster?eps=100', headers, payload: small });
      expect(res.statusCode, JSON.stringify(headers)).toBe(415);
      expect(res.json().code).toBe('unsupported-media-type');
      expectMatchesSpec(res, '/v1/cluster', 'POST');
    }
  });

  it('accepts a charset parameter on the media type', async () => {
    const res = await app.inject({ method: 'POST', url: '/v1/cluster?eps=100', headers: { 'content-type': 'application/geo+json; charset=utf-8' }, payload: small });
    expect(res.statusCode).toBe(200);
  });

  it('400 malformed-body for an empty body, broken JSON and a JSON document that is not GeoJSON', async () => {
    for (const payload of ['', '{"type":"FeatureCollection","features":[', '[1,2,3]', '"text"']) {
      const res = await app.inject({ method: 'POST', url: '/v1/cluster?eps=100', headers: GEOJSON, payload });
      expect(res.statusCode, payload).toBe(400);
      expect(res.json().code, payload).toBe('malformed-body');
      expectMatchesSpec(res, '/v1/cluster', 'POST');
    }
  });

  it('400 invalid-parameter names the parameter: unknown, bad value, missing eps, bad layer', async () => {
    const cases: [string, string][] = [
      ['/v1/cluster?eps=100&epss=3', 'epss'],
      ['/v1/cluster?eps=-5', 'eps'],
      ['/v1/cluster?min_points=5', 'eps'],
      ['/v1/cluster?eps=100&method=kmeans', 'method'],
      ['/v1/cluster?eps=100&layer=everything', 'layer'],
      ['/v1/k-distance?layer=points', 'layer'],
      ['/v1/k-distance?min_points=zero', 'min_points'],
    ];
    for (const [url, parameter] of cases) {
      const res = await app.inject({ method: 'POST', url, headers: GEOJSON, payload: small });
      expect(res.statusCode, url).toBe(400);
      expect(res.json(), url).toMatchObject({ code: 'invalid-parameter', parameter });
      expectMatchesSpec(res, url.split('?')[0]!, 'POST');
    }
  });

  it('settings may come in the body; the query string wins parameter by parameter', async () => {
    const withSettings = small.replace('{"type":"FeatureCollection",', '{"type":"FeatureCollection","settings":{"eps":150,"min_points":4},');
    const fromBody = await app.inject({ method: 'POST', url: '/v1/cluster', headers: GEOJSON, payload: withSettings });
    expect(fromBody.statusCode, fromBody.body).toBe(200);
    expect(fromBody.json().summary.parameters).toMatchObject({ eps: 150, min_points: 4 });
    const overridden = await app.inject({ method: 'POST', url: '/v1/cluster?eps=90', headers: GEOJSON, payload: withSettings });
    expect(overridden.json().summary.parameters).toMatchObject({ eps: 90, min_points: 4 });
    const bad = await app.inject({
      method: 'POST',
      url: '/v1/cluster',
      headers: GEOJSON,
      payload: small.replace('{"type":"FeatureCollection",', '{"type":"FeatureCollection","settings":{"eps":"wide"},'),
    });
    expect(bad.statusCode).toBe(400);
    expect(bad.json()).toMatchObject({ code: 'invalid-parameter', parameter: 'eps' });
    const notObject = await app.inject({
      method: 'POST',
      url: '/v1/cluster?eps=100',
      headers: GEOJSON,
      payload: small.replace('{"type":"FeatureCollection",', '{"type":"FeatureCollection","settings":[1],'),
    });
    expect(notObject.json()).toMatchObject({ code: 'invalid-parameter', parameter: 'settings' });
    expectMatchesSpec(notObject, '/v1/cluster', 'POST');
  });

  it('422 lists each offending feature by index and id, capped, with the total', async () => {
    const features = [];
    for (let i = 0; i < MAX_LISTED_PROBLEMS + 50; i++) {
      features.push({ type: 'Feature', id: `bad-${i}`, geometry: { type: 'Point', coordinates: [200 + i, 10] }, properties: {} });
    }
    features.splice(3, 0, { type: 'Feature', id: 'fine', geometry: { type: 'Point', coordinates: [1, 2] }, properties: {} });
    const res = await app.inject({ method: 'POST', url: '/v1/cluster?eps=100', headers: GEOJSON, payload: { type: 'FeatureCollection', features } });
    expect(res.statusCode).toBe(422);
    const body = res.json();
    expect(body.code).toBe('invalid-observations');
    expect(body.problems).toHaveLength(MAX_LISTED_PROBLEMS);
    expect(body.problems_total).toBe(MAX_LISTED_PROBLEMS + 50);
    expect(body.problems[0]).toMatchObject({ index: 0, id: 'bad-0', code: 'out-of-range' });
    // the valid feature at index 3 is not listed; the one after it keeps its input position
    expect(body.problems[3]).toMatchObject({ index: 4, id: 'bad-3' });
    expectMatchesSpec(res, '/v1/cluster', 'POST');
  });

  it('POST /v1/k-distance answers with the curve and a suggestion', async () => {
    const res = await app.inject({ method: 'POST', url: '/v1/k-distance?min_points=4', headers: GEOJSON, payload: small });
    expect(res.statusCode, res.body).toBe(200);
    const body = res.json();
    expect(body.min_points).toBe(4);
    expect(body.curve.rank.length).toBe(body.curve.meters.length);
    expectMatchesSpec(res, '/v1/k-distance', 'POST');
  });
});

describe('size limit', () => {
  let app: FastifyInstance;
  beforeAll(async () => {
    app = await testApp({ bodyLimitBytes: 2000 });
  });
  afterAll(async () => {
    await app.close();
  });

  it('413 when Content-Length says the body is too large', async () => {
    const res = await app.inject({ method: 'POST', url: '/v1/cluster?eps=100', headers: GEOJSON, payload: small });
    expect(small.length).toBeGreaterThan(2000);
    expect(res.statusCode).toBe(413);
    expect(res.json()).toMatchObject({ code: 'body-too-large', limit_bytes: 2000 });
    expectMatchesSpec(res, '/v1/cluster', 'POST');
  });

  it('413 when a body of undeclared length grows past the limit', async () => {
    const chunks = [Buffer.from(small.slice(0, 1500)), Buffer.from(small.slice(1500, 3000))];
    const res = await app.inject({ method: 'POST', url: '/v1/cluster?eps=100', headers: GEOJSON, payload: Readable.from(chunks) });
    expect(res.statusCode).toBe(413);
  });

  it('a body of undeclared length within the limit is read whole', async () => {
    const body = pointsCollection(8, 3);
    expect(body.length).toBeLessThan(2000);
    const chunks = [Buffer.from(body.slice(0, 700)), Buffer.from(body.slice(700))];
    const res = await app.inject({ method: 'POST', url: '/v1/cluster?eps=100&min_points=2&layer=points', headers: GEOJSON, payload: Readable.from(chunks) });
    expect(res.statusCode, res.body).toBe(200);
    expect(res.json().features).toHaveLength(8);
  });
});

/** A pool that fails as a broken service would, to see what the client is told. */
function failingPool(fail: () => Promise<never>): WorkPool {
  return { run: fail, runArriving: fail, idle: false, threads: 1, queued: 0, utilization: 0, close: async () => undefined };
}

describe('service failures', () => {
  it('500 hides the cause and carries the request id', async () => {
    const secret = 'TypeError: cannot read x of undefined at /srv/roost/secret.js:12';
    for (const pool of [
      failingPool(async () => {
        throw new Error(secret);
      }),
      {
        ...failingPool(async () => {
          throw new Error('unused');
        }),
        run: async () => ({ ok: false as const, code: 'internal-error' as const, detail: secret, stack: secret }),
      },
    ]) {
      const app = await buildApp({ config: testConfig(), logger: false, pool });
      const res = await app.inject({ method: 'POST', url: '/v1/cluster?eps=100', headers: { ...GEOJSON, 'x-request-id': 'r-500' }, payload: small });
      expect(res.statusCode).toBe(500);
      expect(res.body).not.toContain('secret');
      expect(res.body).not.toContain('TypeError');
      expect(res.json()).toMatchObject({ code: 'internal-error', request_id: 'r-500' });
      expectMatchesSpec(res, '/v1/cluster', 'POST');
      await app.close();
    }
  });
});
