/**
 * The requirements of the conformance classes /features declares, one test each, named by the
 * requirement's id: OGC 17-069r4 (OGC API – Features – Part 1: Core) classes core, geojson and
 * html, and OGC 18-058r1 (Part 2: Coordinate Reference Systems by Reference) class crs, where
 * CRS84 is the only CRS offered. The ids and the gist of each requirement are recalled from the
 * standards from memory; the texts here paraphrase them.
 *
 * Not claimed, so not tested: the oas30 class (the API definition is OpenAPI 3.1, not 3.0) and
 * the gmlsf0 / gmlsf2 classes (no GML is served).
 */
import type { FastifyInstance, LightMyRequestResponse } from 'fastify';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { createRequire } from 'node:module';
import { Ajv } from 'ajv';
import { CONFORMANCE } from '../../src/ogc/routes.js';
import { CRS84 } from '../../src/ogc/query.js';
import { wrapLon } from '../reference/seeded.js';
import { expectMatchesSpec, pointsCollection, spec, testApp } from '../http/helper.js';

const GEO = { 'content-type': 'application/geo+json' };
const JSON_TYPE = { 'content-type': 'application/json' };
const HOST = 'roost.example:8443';

type Link = { href: string; rel: string; type?: string };
const rels = (links: Link[], rel: string): Link[] => links.filter((l) => l.rel === rel);

/** Observations straddling the antimeridian near Fiji, with ids and times. */
function acrossAntimeridian(n: number): string {
  const features = Array.from({ length: n }, (_, i) => ({
    type: 'Feature',
    id: `f${i}`,
    geometry: { type: 'Point', coordinates: [Number(wrapLon(179.997 + ((i % 5) - 2) * 0.004 + (i % 7) * 0.0001).toFixed(7)), Number((-17 + (i % 11) * 0.0001).toFixed(7))] },
    properties: { observed_at: `2026-05-${String(1 + (i % 20)).padStart(2, '0')}T08:00:00Z` },
  }));
  return JSON.stringify({ type: 'FeatureCollection', features });
}

describe('OGC API – Features requirements', () => {
  let app: FastifyInstance;
  const get = (url: string, headers: Record<string, string> = {}): Promise<LightMyRequestResponse> => app.inject({ method: 'GET', url, headers: { host: HOST, ...headers } });
  const json = async (url: string): Promise<Record<string, unknown>> => {
    const res = await get(url);
    expect(res.statusCode, `${url}: ${res.body}`).toBe(200);
    return res.json() as Record<string, unknown>;
  };
  const data = pointsCollection(300, 5);
  const input = (JSON.parse(data) as { features: { id: string; geometry: { coordinates: [number, number] }; properties: { observed_at: string } }[] }).features;

  beforeAll(async () => {
    app = await testApp({ allowedHosts: 'roost.example' });
    for (const [id, body] of [['survey', data], ['fiji', acrossAntimeridian(200)]] as const) {
      await app.inject({ method: 'POST', url: '/v1/datasets', headers: JSON_TYPE, payload: JSON.stringify({ id, name: `The ${id} set`, settings: { eps: 60, min_points: 5 } }) });
      await app.inject({ method: 'POST', url: `/v1/datasets/${id}/observations`, headers: GEO, payload: body });
      const run = await app.inject({ method: 'POST', url: `/v1/datasets/${id}/runs` });
      for (;;) {
        const r = (await app.inject({ method: 'GET', url: run.headers.location as string })).json() as { status: string };
        if (r.status === 'succeeded') break;
        if (r.status === 'failed' || r.status === 'cancelled') throw new Error(`run ${r.status}`);
        await new Promise((resolve) => setTimeout(resolve, 20));
      }
    }
    await app.inject({ method: 'POST', url: '/v1/datasets', headers: JSON_TYPE, payload: JSON.stringify({ id: 'empty', settings: { eps: 60 } }) });
  }, 120_000);
  afterAll(async () => {
    await app.close();
  });

  describe('Part 1 core', () => {
    it('/req/core/http: the server speaks HTTP 1.1', async () => {
      await app.listen({ host: '127.0.0.1', port: 0 });
      try {
        const { port } = app.server.address() as { port: number };
        const { request } = await import('node:http');
        const version = await new Promise<string>((resolve, reject) => {
          request({ host: '127.0.0.1', port, path: '/features' }, (res) => {
            res.resume();
            resolve(res.httpVersion);
          })
            .on('error', reject)
            .end();
        });
        expect(version).toBe('1.1');
      } finally {
        await app.server.close();
      }
    });

    it('/req/core/root-op: GET on the landing page answers 200', async () => {
      expect((await get('/features')).statusCode).toBe(200);
    });

    it('/req/core/root-success: the landing page links the API definition, the conformance declaration and the collections', async () => {
      const doc = await json('/features');
      const links = doc.links as Link[];
      expect(rels(links, 'service-desc')).toHaveLength(1);
      expect(rels(links, 'service-doc')[0]!.href).toBe(`http://${HOST}/docs`);
      expect(rels(links, 'conformance')[0]!.href).toBe(`http://${HOST}/features/conformance`);
      expect(rels(links, 'data')[0]!.href).toBe(`http://${HOST}/features/collections`);
      expectMatchesSpec(await get('/features'), '/features', 'GET');
    });

    it('/req/core/api-definition-op: GET on the service-desc link answers 200', async () => {
      const desc = rels((await json('/features')).links as Link[], 'service-desc')[0]!;
      const res = await get(new URL(desc.href).pathname);
      expect(res.statusCode).toBe(200);
    });

    it('/req/core/api-definition-success: the API definition is the OpenAPI document, naming the address it was fetched from', async () => {
      const res = await get('/openapi.json', { accept: 'application/vnd.oai.openapi+json;version=3.1' });
      expect(res.headers['content-type']).toMatch(/^application\/vnd\.oai\.openapi\+json; ?version="?3\.1/);
      const doc = res.json() as typeof spec & { servers: { url: string }[] };
      expect(doc.paths).toEqual(spec.paths);
      expect(doc.servers).toEqual([{ url: `http://${HOST}`, description: 'this service' }]);
      // a client asking for plain JSON is given plain JSON
      expect((await get('/openapi.json', { accept: 'application/json' })).headers['content-type']).toMatch(/^application\/json/);
    });

    it('/req/core/conformance-op: GET /conformance answers 200', async () => {
      expect((await get('/features/conformance')).statusCode).toBe(200);
    });

    it('/req/core/conformance-success: conformsTo lists the classes, core among them', async () => {
      const doc = await json('/features/conformance');
      expect(doc.conformsTo).toEqual([...CONFORMANCE]);
      expect(doc.conformsTo).toContain('http://www.opengis.net/spec/ogcapi-features-1/1.0/conf/core');
      expect(doc.conformsTo).not.toContain('http://www.opengis.net/spec/ogcapi-features-1/1.0/conf/oas30');
      expectMatchesSpec(await get('/features/conformance'), '/features/conformance', 'GET');
    });

    it('/req/core/query-param-unknown: an unknown query parameter is answered 400', async () => {
      for (const url of ['/features?colour=red', '/features/collections?x=1', '/features/collections/survey.hotspots/items?filter=a', '/features/collections/survey.observations/items/p1?limit=3']) {
        const res = await get(url);
        expect(res.statusCode, url).toBe(400);
        expect(res.headers['content-type']).toMatch(/^application\/problem\+json/);
      }
    });

    it('/req/core/query-param-invalid: an invalid value of a known parameter is answered 400', async () => {
      for (const q of ['limit=0', 'limit=abc', 'bbox=1,2,3', 'bbox=0,10,1,0', 'datetime=soon', 'f=xml', 'cursor=%21%21']) {
        for (const c of ['survey.observations', 'survey.points']) {
          const res = await get(`/features/collections/${c}/items?${q}`);
          expect(res.statusCode, `${c} ${q}`).toBe(400);
          expect(res.json().code).toBe('invalid-parameter');
        }
      }
    });

    it('/req/core/fc-md-op: GET /collections answers 200', async () => {
      expect((await get('/features/collections')).statusCode).toBe(200);
    });

    it('/req/core/fc-md-success: the collections document has links and collections', async () => {
      const doc = await json('/features/collections');
      expect(Array.isArray(doc.links)).toBe(true);
      expect(Array.isArray(doc.collections)).toBe(true);
      expectMatchesSpec(await get('/features/collections'), '/features/collections', 'GET');
    });

    it('/req/core/fc-md-links: self and alternate links', async () => {
      const links = (await json('/features/collections')).links as Link[];
      expect(rels(links, 'self')[0]).toMatchObject({ href: `http://${HOST}/features/collections?f=json`, type: 'application/json' });
      expect(rels(links, 'alternate')[0]).toMatchObject({ href: `http://${HOST}/features/collections?f=html`, type: 'text/html' });
    });

    it('/req/core/fc-md-items: one collection per dataset and stored layer; datasets without a run list only their observations', async () => {
      const ids = ((await json('/features/collections')).collections as { id: string }[]).map((c) => c.id);
      const kinds = ['observations', 'hotspots', 'centres', 'noise', 'points'];
      expect(ids).toEqual(['empty.observations', ...kinds.map((k) => `fiji.${k}`), ...kinds.map((k) => `survey.${k}`)]);
    });

    it('/req/core/fc-md-items-links: each collection links its items as GeoJSON', async () => {
      for (const c of (await json('/features/collections')).collections as { id: string; links: Link[] }[]) {
        const items = rels(c.links, 'items').find((l) => l.type === 'application/geo+json');
        expect(items?.href, c.id).toBe(`http://${HOST}/features/collections/${c.id}/items?f=json`);
      }
    });

    it('/req/core/fc-md-extent: each collection states its spatial and temporal extent in CRS84', async () => {
      const cs = (await json('/features/collections')).collections as { id: string; extent?: { spatial: { bbox: number[][]; crs: string }; temporal: { interval: (string | null)[][] } } }[];
      const survey = cs.find((c) => c.id === 'survey.observations')!;
      const lons = input.map((f) => f.geometry.coordinates[0]);
      const lats = input.map((f) => f.geometry.coordinates[1]);
      expect(survey.extent!.spatial).toEqual({ bbox: [[Math.min(...lons), Math.min(...lats), Math.max(...lons), Math.max(...lats)]], crs: CRS84 });
      const times = input.map((f) => Date.parse(f.properties.observed_at)).sort((a, b) => a - b);
      expect(survey.extent!.temporal.interval).toEqual([[new Date(times[0]!).toISOString(), new Date(times.at(-1)!).toISOString()]]);
      // the layer of hotspots straddling ±180 has a box with west > east (RFC 7946 §5.2)
      const fiji = cs.find((c) => c.id === 'fiji.hotspots')!;
      const [w, , e] = fiji.extent!.spatial.bbox[0]!;
      expect(w).toBeGreaterThan(e!);
      // and so has the dataset's observations: the smallest range holding them, across ±180
      const fijiObs = cs.find((c) => c.id === 'fiji.observations')!.extent!.spatial.bbox[0]!;
      expect(fijiObs[0]).toBeGreaterThan(179);
      expect(fijiObs[2]).toBeLessThan(-179);
      expect(cs.find((c) => c.id === 'empty.observations')!.extent).toBeUndefined();
    });

    it('/req/core/sfc-md-op: GET /collections/{collectionId} answers 200, and 404 for an unknown one', async () => {
      expect((await get('/features/collections/survey.centres')).statusCode).toBe(200);
      expect((await get('/features/collections/survey.nothing')).statusCode).toBe(404);
      expect((await get('/features/collections/nobody.hotspots')).statusCode).toBe(404);
      expect((await get('/features/collections/empty.hotspots')).statusCode).toBe(404);
    });

    it('/req/core/sfc-md-success: a collection is described as in the collections document', async () => {
      const listed = ((await json('/features/collections')).collections as { id: string }[]).find((c) => c.id === 'survey.centres');
      expect(await json('/features/collections/survey.centres')).toEqual(listed);
      expectMatchesSpec(await get('/features/collections/survey.centres'), '/features/collections/{collectionId}', 'GET');
    });

    it('/req/core/fc-op: GET /collections/{collectionId}/items answers 200', async () => {
      for (const c of ['survey.observations', 'survey.hotspots', 'survey.points', 'empty.observations']) expect((await get(`/features/collections/${c}/items`)).statusCode, c).toBe(200);
    });

    it('/req/core/fc-limit-definition: limit is an integer from 1, default and maximum stated in the API definition', () => {
      const params = spec.paths['/features/collections/{collectionId}/items']!.get!.parameters as { $ref: string }[];
      const limit = params.map((p) => (spec.components as unknown as { parameters: Record<string, { name: string; schema: Record<string, unknown> }> }).parameters[p.$ref.split('/').pop()!]!).find((p) => p.name === 'limit')!;
      expect(limit.schema).toEqual({ type: 'integer', minimum: 1, default: 100, maximum: 10000 });
    });

    it('/req/core/fc-limit-response-1: no more features than limit; without limit, the default', async () => {
      for (const c of ['survey.observations', 'survey.points']) {
        expect(((await json(`/features/collections/${c}/items?limit=7`)).features as unknown[]).length).toBe(7);
        expect(((await json(`/features/collections/${c}/items`)).features as unknown[]).length).toBe(100);
        expect(((await json(`/features/collections/${c}/items?limit=100000`)).features as unknown[]).length).toBe(300);
      }
    });

    it('/req/core/fc-bbox-definition: bbox takes four numbers (six with heights)', async () => {
      expect((await get('/features/collections/survey.points/items?bbox=8.5,47.3,8.6,47.4')).statusCode).toBe(200);
      expect((await get('/features/collections/survey.points/items?bbox=8.5,47.3,0,8.6,47.4,100')).statusCode).toBe(200);
      expect((await get('/features/collections/survey.points/items?bbox=8.5,47.3,8.6')).statusCode).toBe(400);
    });

    it('/req/core/fc-bbox-response: only features meeting the box, across the antimeridian too', async () => {
      const box = [8.545, 47.365, 8.575, 47.395];
      const want = input.filter((f) => f.geometry.coordinates[0] >= box[0]! && f.geometry.coordinates[0] <= box[2]! && f.geometry.coordinates[1] >= box[1]! && f.geometry.coordinates[1] <= box[3]!).map((f) => f.id);
      expect(want.length).toBeGreaterThan(20);
      for (const c of ['survey.observations', 'survey.points']) {
        const doc = await json(`/features/collections/${c}/items?limit=1000&bbox=${box.join(',')}`);
        expect((doc.features as { id: string }[]).map((f) => f.id).sort(), c).toEqual([...want].sort());
        expect(doc.numberMatched).toBe(want.length);
      }
      // east of 179.995 and west of −179.995: both sides of the antimeridian, and nothing between
      const fiji = (JSON.parse(acrossAntimeridian(200)) as { features: { id: string; geometry: { coordinates: [number, number] } }[] }).features;
      const across = fiji.filter((f) => f.geometry.coordinates[0] >= 179.995 || f.geometry.coordinates[0] <= -179.995).map((f) => f.id);
      expect(across.some((id) => fiji.find((f) => f.id === id)!.geometry.coordinates[0] > 0)).toBe(true);
      expect(across.some((id) => fiji.find((f) => f.id === id)!.geometry.coordinates[0] < 0)).toBe(true);
      for (const c of ['fiji.observations', 'fiji.points']) {
        const doc = await json(`/features/collections/${c}/items?limit=1000&bbox=179.995,-18,-179.995,-16`);
        expect((doc.features as { id: string }[]).map((f) => f.id).sort(), c).toEqual([...across].sort());
      }
      // a hull cut at ±180 meets a box on either side
      for (const side of ['179.99,-18,180,-16', '-180,-18,-179.99,-16']) {
        expect(((await json(`/features/collections/fiji.hotspots/items?bbox=${side}`)).features as unknown[]).length, side).toBeGreaterThan(0);
      }
      expect(((await json('/features/collections/fiji.hotspots/items?bbox=0,-18,10,-16')).features as unknown[]).length).toBe(0);
    });

    it('/req/core/fc-time-definition: datetime takes an instant, or an interval with open ends', async () => {
      for (const d of ['2026-04-03T12:00:00Z', '2026-04-03T00:00:00Z/2026-04-05T00:00:00Z', '2026-04-20T00:00:00Z/..', '../2026-04-02T00:00:00Z']) {
        expect((await get(`/features/collections/survey.observations/items?datetime=${encodeURIComponent(d)}`)).statusCode, d).toBe(200);
      }
      expect((await get('/features/collections/survey.observations/items?datetime=..%2F..')).statusCode).toBe(400);
    });

    it('/req/core/fc-time-response: only features whose time meets the interval, both ends inclusive', async () => {
      const from = Date.parse('2026-04-05T12:00:00Z');
      const to = Date.parse('2026-04-09T12:00:00Z');
      const want = input.filter((f) => Date.parse(f.properties.observed_at) >= from && Date.parse(f.properties.observed_at) <= to).map((f) => f.id);
      expect(want.length).toBeGreaterThan(10);
      for (const c of ['survey.observations', 'survey.points']) {
        const doc = await json(`/features/collections/${c}/items?limit=1000&datetime=2026-04-05T12:00:00Z/2026-04-09T12:00:00Z`);
        expect((doc.features as { id: string }[]).map((f) => f.id).sort(), c).toEqual([...want].sort());
      }
      // hotspots by the span of their members' times
      const hotspots = (await json('/features/collections/survey.hotspots/items')).features as { id: number; properties: { first_observed_at: string; last_observed_at: string } }[];
      const cut = '2026-04-02T00:00:00Z';
      const before = hotspots.filter((h) => Date.parse(h.properties.first_observed_at) <= Date.parse(cut)).map((h) => h.id);
      expect(((await json(`/features/collections/survey.hotspots/items?datetime=../${cut}`)).features as { id: number }[]).map((h) => h.id)).toEqual(before);
    });

    it('/req/core/fc-response: a FeatureCollection of the collection\'s features', async () => {
      const res = await get('/features/collections/survey.hotspots/items');
      expectMatchesSpec(res, '/features/collections/{collectionId}/items', 'GET');
      const doc = res.json() as { type: string; features: unknown[] };
      expect(doc.type).toBe('FeatureCollection');
      const stored = JSON.parse((await get('/v1/datasets/survey/runs/latest/hotspots')).body) as { features: unknown[] };
      expect(doc.features).toEqual(stored.features);
    });

    it('/req/core/fc-links: self, alternate and next links, absolute; following next gives every feature once', async () => {
      for (const c of ['survey.observations', 'survey.points']) {
        const seen: string[] = [];
        let url: string | null = `/features/collections/${c}/items?limit=40&bbox=8.4,47.2,8.7,47.5`;
        let pages = 0;
        while (url !== null) {
          const doc = await json(url);
          const links = doc.links as Link[];
          expect(rels(links, 'self')[0]!.href.startsWith(`http://${HOST}/features/collections/${c}/items?`)).toBe(true);
          expect(rels(links, 'alternate')[0]!.type).toBe('text/html');
          seen.push(...(doc.features as { id: string }[]).map((f) => f.id));
          const next = rels(links, 'next')[0];
          if (next) expect(next.href).toContain('bbox=8.4%2C47.2%2C8.7%2C47.5');
          url = next ? next.href.replace(`http://${HOST}`, '') : null;
          pages++;
        }
        expect(pages).toBe(8);
        expect(seen).toEqual(input.map((f) => f.id));
      }
    });

    it('/req/core/fc-rel-type: links carry their media types', async () => {
      const links = (await json('/features/collections/survey.points/items?limit=10')).links as Link[];
      for (const l of links) expect(l.type, l.rel).toMatch(/^(application\/geo\+json|application\/json|text\/html)$/);
      expect(rels(links, 'next')[0]!.type).toBe('application/geo+json');
    });

    it('/req/core/fc-timeStamp: the page says when it was produced', async () => {
      const before = Date.now();
      const doc = await json('/features/collections/survey.points/items?limit=1');
      expect(Date.parse(doc.timeStamp as string)).toBeGreaterThanOrEqual(Math.floor(before / 1000) * 1000);
      expect(Date.parse(doc.timeStamp as string)).toBeLessThanOrEqual(Date.now());
    });

    it('/req/core/fc-numberMatched: the number of features matching the query', async () => {
      expect((await json('/features/collections/survey.points/items?limit=1')).numberMatched).toBe(300);
      expect((await json('/features/collections/survey.observations/items?limit=1')).numberMatched).toBe(300);
      expect((await json('/features/collections/survey.observations/items?limit=1&datetime=2099-01-01T00:00:00Z')).numberMatched).toBe(0);
    });

    it('/req/core/fc-numberReturned: the number of features in the page', async () => {
      const doc = await json('/features/collections/survey.noise/items?limit=3');
      expect(doc.numberReturned).toBe((doc.features as unknown[]).length);
      expect(doc.numberReturned).toBe(3);
    });

    it('/req/core/f-op: GET /collections/{collectionId}/items/{featureId} answers 200, and 404 for an unknown id', async () => {
      expect((await get('/features/collections/survey.observations/items/p17')).statusCode).toBe(200);
      expect((await get('/features/collections/survey.points/items/p17')).statusCode).toBe(200);
      expect((await get('/features/collections/survey.hotspots/items/1')).statusCode).toBe(200);
      expect((await get('/features/collections/survey.observations/items/nope')).statusCode).toBe(404);
      expect((await get('/features/collections/survey.hotspots/items/999')).statusCode).toBe(404);
    });

    it('/req/core/f-success: the feature, as stored', async () => {
      const res = await get('/features/collections/survey.observations/items/p17');
      expectMatchesSpec(res, '/features/collections/{collectionId}/items/{featureId}', 'GET');
      const { links, ...feature } = res.json() as Record<string, unknown>;
      expect(links).toBeDefined();
      expect(feature).toEqual(input[17]);
    });

    it('/req/core/f-links: self, alternate and collection links', async () => {
      const links = (await json('/features/collections/survey.hotspots/items/2')).links as Link[];
      expect(rels(links, 'self')[0]).toMatchObject({ href: `http://${HOST}/features/collections/survey.hotspots/items/2?f=json`, type: 'application/geo+json' });
      expect(rels(links, 'alternate')[0]!.type).toBe('text/html');
      expect(rels(links, 'collection')[0]!.href).toBe(`http://${HOST}/features/collections/survey.hotspots`);
    });
  });

  describe('Part 1 geojson', () => {
    it('/req/geojson/definition: items as application/geo+json, other resources as application/json', async () => {
      expect((await get('/features/collections/survey.points/items')).headers['content-type']).toMatch(/^application\/geo\+json/);
      expect((await get('/features/collections/survey.points/items/p3')).headers['content-type']).toMatch(/^application\/geo\+json/);
      for (const url of ['/features', '/features/conformance', '/features/collections', '/features/collections/survey.points']) {
        expect((await get(url, { accept: 'application/json' })).headers['content-type'], url).toMatch(/^application\/json/);
      }
    });

    it('/req/geojson/content: valid GeoJSON feature collections and features', async () => {
      // source: the GeoJSON JSON Schemas of the geojson-schema package (geojson.org)
      const load = createRequire(import.meta.url);
      const fc = new Ajv({ strict: false }).compile(load('geojson-schema/FeatureCollection.json') as object);
      const f = new Ajv({ strict: false }).compile(load('geojson-schema/Feature.json') as object);
      for (const c of ['survey.observations', 'survey.hotspots', 'survey.centres', 'survey.noise', 'survey.points', 'fiji.hotspots']) {
        const doc = await json(`/features/collections/${c}/items?limit=50`);
        expect(fc(doc), `${c}: ${JSON.stringify(fc.errors)}`).toBe(true);
      }
      const one = await json('/features/collections/fiji.hotspots/items/1');
      expect(f(one), JSON.stringify(f.errors)).toBe(true);
    });
  });

  describe('Part 1 html', () => {
    it('/req/html/definition: every resource as text/html, by f=html or by Accept', async () => {
      for (const url of ['/features', '/features/conformance', '/features/collections', '/features/collections/survey.hotspots', '/features/collections/survey.hotspots/items', '/features/collections/survey.hotspots/items/1']) {
        expect((await get(`${url}${url.includes('?') ? '&' : '?'}f=html`)).headers['content-type'], url).toMatch(/^text\/html/);
        expect((await get(url, { accept: 'text/html,application/xhtml+xml,*/*;q=0.8' })).headers['content-type'], url).toMatch(/^text\/html/);
      }
    });

    it('/req/html/content: the HTML carries the same content and links, escaped', async () => {
      await app.inject({ method: 'POST', url: '/v1/datasets', headers: JSON_TYPE, payload: JSON.stringify({ id: 'tags', name: '<script>alert(1)</script>', settings: { eps: 60 } }) });
      const list = (await get('/features/collections?f=html')).body;
      expect(list).toContain('&lt;script&gt;alert(1)&lt;/script&gt;');
      expect(list).not.toContain('<script>alert');
      for (const c of ['survey.hotspots', 'survey.points']) expect(list).toContain(`http://${HOST}/features/collections/${c}?f=html`);
      const page = (await get('/features/collections/survey.points/items?f=html&limit=5')).body;
      for (const f of input.slice(0, 5)) expect(page).toContain(`<td>${f.id}</td>`);
      expect(page).toContain('5 features of 300');
      expect(page).toContain('next page');
      await app.inject({ method: 'DELETE', url: '/v1/datasets/tags' });
    });
  });

  describe('Part 2 crs (CRS84 only)', () => {
    it('/req/crs/fc-md-crs-list: the collections list their CRS', async () => {
      const doc = await json('/features/collections');
      expect(doc.crs).toEqual([CRS84]);
      for (const c of doc.collections as { crs: string[] }[]) expect(c.crs).toEqual([CRS84]);
    });

    it('/req/crs/fc-md-storageCrs: each collection states its storage CRS', async () => {
      expect((await json('/features/collections/survey.noise')).storageCrs).toBe(CRS84);
    });

    it('/req/crs/fc-crs-definition: items take crs naming a listed CRS', async () => {
      expect((await get(`/features/collections/survey.points/items?crs=${encodeURIComponent(CRS84)}`)).statusCode).toBe(200);
      expect((await get(`/features/collections/survey.points/items/p1?crs=${encodeURIComponent(CRS84)}`)).statusCode).toBe(200);
    });

    it('/req/crs/fc-crs-valid-value: a CRS not listed is answered 400', async () => {
      const res = await get(`/features/collections/survey.points/items?crs=${encodeURIComponent('http://www.opengis.net/def/crs/EPSG/0/4326')}`);
      expect(res.statusCode).toBe(400);
      expect(res.json().parameter).toBe('crs');
    });

    it('/req/crs/ogc-crs-header: the Content-Crs header names the CRS of the answer', async () => {
      expect((await get('/features/collections/survey.points/items')).headers['content-crs']).toBe(`<${CRS84}>`);
      expect((await get('/features/collections/survey.points/items/p1')).headers['content-crs']).toBe(`<${CRS84}>`);
    });

    it('/req/crs/fc-bbox-crs-definition: bbox-crs naming CRS84 is taken', async () => {
      expect((await get(`/features/collections/survey.points/items?bbox=8.5,47.3,8.6,47.4&bbox-crs=${encodeURIComponent(CRS84)}`)).statusCode).toBe(200);
    });

    it('/req/crs/fc-bbox-crs-valid-value: another bbox-crs is answered 400', async () => {
      const res = await get(`/features/collections/survey.points/items?bbox=1,2,3,4&bbox-crs=${encodeURIComponent('http://www.opengis.net/def/crs/EPSG/0/3857')}`);
      expect(res.statusCode).toBe(400);
      expect(res.json().parameter).toBe('bbox-crs');
    });
  });
  describe('named runs', () => {
    it('any succeeded run\'s layers are collections <dataset>@<run>.<kind>, not listed, with their own links', async () => {
      const first = (await json('/v1/datasets/fiji/runs/latest')).id as string;
      // a second run with other settings: the latest changes, the first stays reachable by name
      const run = await app.inject({ method: 'POST', url: '/v1/datasets/fiji/runs', headers: JSON_TYPE, payload: JSON.stringify({ settings: { eps: 200, min_points: 3 } }) });
      expect(run.statusCode, run.body).toBe(202);
      for (;;) {
        const r = (await app.inject({ method: 'GET', url: run.headers.location as string })).json() as { status: string };
        if (r.status === 'succeeded') break;
        if (r.status === 'failed' || r.status === 'cancelled') throw new Error(`run ${r.status}`);
        await new Promise((resolve) => setTimeout(resolve, 20));
      }
      const second = (await json('/v1/datasets/fiji/runs/latest')).id as string;
      expect(second).not.toBe(first);
      for (const kind of ['hotspots', 'points']) {
        const stored = (await json(`/v1/datasets/fiji/runs/${first}/${kind}`)).features as unknown[];
        const coll = await json(`/features/collections/fiji@${first}.${kind}`);
        expect(coll.id).toBe(`fiji@${first}.${kind}`);
        expect(String(coll.description)).toContain(`run ${first}`);
        const items = await json(`/features/collections/fiji@${first}.${kind}/items?limit=10000`);
        expect(items.features).toEqual(stored);
        expect(rels(items.links as Link[], 'self')[0]!.href).toContain(`/features/collections/fiji@${first}.${kind}/items`);
      }
      // the latest run's collection follows the latest run
      expect((await json('/features/collections/fiji.hotspots')).description).toContain(`run ${second}`);
      const ids = ((await json('/features/collections')).collections as { id: string }[]).map((c) => c.id);
      expect(ids.some((id) => id.includes('@'))).toBe(false);
      for (const bad of [`fiji@r999999.hotspots`, `fiji@${first}.observations`, `@${first}.hotspots`, `fiji@.hotspots`]) {
        const res = await get(`/features/collections/${bad}`);
        expect(res.statusCode, bad).toBe(404);
        expect(res.json().code, bad).toBe('collection-not-found');
      }
    });
  });

  describe('with API keys', () => {
    it('collections are cut to what the caller may read: nothing but public published layers without a key, one dataset for a limited key, everything for a full key', async () => {
      const json = { 'content-type': 'application/json' };
      // fiji is published as public (before keys exist, so no key is needed to say so)
      const patched = await app.inject({ method: 'PATCH', url: '/v1/datasets/fiji', headers: json, payload: { publish: { public: true, generalise_m: 200 } } });
      expect(patched.statusCode, patched.body).toBe(200);
      const admin = (await app.inject({ method: 'POST', url: '/v1/keys', headers: json, payload: { role: 'admin', label: 'ogc' } })).json() as { token: string };
      const bearer = (t: string): Record<string, string> => ({ authorization: `Bearer ${t}` });
      const limited = (await app.inject({ method: 'POST', url: '/v1/keys', headers: { ...json, ...bearer(admin.token) }, payload: { role: 'reader', dataset: 'survey' } })).json() as { token: string };
      const reader = (await app.inject({ method: 'POST', url: '/v1/keys', headers: { ...json, ...bearer(admin.token) }, payload: { role: 'reader' } })).json() as { token: string };
      expect((await get('/features')).statusCode).toBe(200);
      expect((await get('/features/conformance')).statusCode).toBe(200);

      const published = ['fiji.published-hotspots', 'fiji.published-centres', 'fiji.published-noise', 'fiji.published-points'];
      const layers = (d: string): string[] => ['hotspots', 'centres', 'noise', 'points'].map((k) => `${d}.${k}`);
      const listing = async (headers: Record<string, string>): Promise<string[]> => {
        const res = await get('/features/collections', headers);
        expect(res.statusCode, res.body).toBe(200);
        return ((res.json() as { collections: { id: string }[] }).collections.map((c) => c.id)).sort();
      };
      expect(await listing({})).toEqual([...published].sort());
      expect(await listing(bearer(limited.token))).toEqual(['survey.observations', ...layers('survey'), ...published].sort());
      expect(await listing(bearer(reader.token))).toEqual(['empty.observations', 'fiji.observations', ...layers('fiji'), ...published, 'survey.observations', ...layers('survey')].sort());

      // each collection: who reaches it (200), and who does not (401 without a key, 403 with another dataset's key)
      const cases: [string, number, number, number][] = [
        ['/features/collections/survey.hotspots', 401, 200, 200],
        ['/features/collections/survey.points/items', 401, 200, 200],
        ['/features/collections/survey.observations/items/p1', 401, 200, 200],
        ['/features/collections/fiji.hotspots', 401, 403, 200],
        ['/features/collections/fiji.observations/items', 401, 403, 200],
        ['/features/collections/fiji.published-hotspots', 200, 200, 200],
        ['/features/collections/fiji.published-points/items', 200, 200, 200],
        ['/features/collections/fiji.published-centres/schema', 200, 200, 200],
        // survey is not published: its published collections are not there for a key that reads it, and not open without one
        ['/features/collections/survey.published-hotspots', 401, 404, 404],
      ];
      for (const [url, none, one, all] of cases) {
        expect((await get(url)).statusCode, `${url} without a key`).toBe(none);
        expect((await get(url, bearer(limited.token))).statusCode, `${url} with a key for survey`).toBe(one);
        expect((await get(url, bearer(reader.token))).statusCode, `${url} with a reader key`).toBe(all);
      }
      // a bad token is refused even where no key is needed
      expect((await get('/features/collections', bearer('roost_nonsense'))).statusCode).toBe(401);

      // the published collections serve the published layers: the same features as /v1's published addresses
      for (const kind of ['hotspots', 'centres', 'points']) {
        const v1 = await get(`/v1/datasets/fiji/runs/latest/published/${kind}`);
        expect(v1.statusCode, v1.body).toBe(200);
        const want = (v1.json() as { features: unknown[] }).features;
        const items = await get(`/features/collections/fiji.published-${kind}/items?limit=10000`);
        expect(items.statusCode, items.body).toBe(200);
        const got = items.json() as { features: unknown[]; numberMatched: number };
        expect(got.numberMatched).toBe(want.length);
        expect(got.features).toEqual(want);
      }
      expect((await get('/features/collections/fiji.published-points/items?limit=1')).json().features.length).toBeGreaterThan(0);

      // /v1/datasets: a limited key sees its dataset only; without a key, nothing
      expect((await get('/v1/datasets')).statusCode).toBe(401);
      const ids = async (t: string): Promise<string[]> => ((await get('/v1/datasets', bearer(t))).json() as { datasets: { id: string }[] }).datasets.map((d) => d.id).sort();
      expect(await ids(limited.token)).toEqual(['survey']);
      expect(await ids(reader.token)).toEqual(['empty', 'fiji', 'survey']);
    });
  });
});
