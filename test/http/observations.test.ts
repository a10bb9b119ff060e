import type { FastifyInstance } from 'fastify';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { buildApp } from '../../src/http/app.js';
import { SMALL_BODY_BYTES } from '../../src/http/routes/observations.js';
import { validateCollection } from '../reference/geojson-schema.js';
import { expectMatchesSpec, pointsCollection, testConfig } from './helper.js';

const GEO = { 'content-type': 'application/geo+json' };
const PATH = '/v1/datasets/{id}/observations';

function feature(id: string | null, lon: number, lat: number, properties: Record<string, unknown> = {}): Record<string, unknown> {
  return { type: 'Feature', ...(id === null ? {} : { id }), geometry: { type: 'Point', coordinates: [lon, lat] }, properties };
}
const collection = (features: unknown[]): string => JSON.stringify({ type: 'FeatureCollection', features });

describe('/v1/datasets/{id}/observations', () => {
  let app: FastifyInstance;
  beforeAll(async () => {
    app = await buildApp({ config: testConfig({ dbPath: ':memory:' }), logger: false });
    await app.ready();
    for (const [id, extra] of [['obs', {}], ['csv', { id_property: 'ref' }], ['weighted', {}]] as const) {
      const settings = id === 'weighted' ? { eps: 50, weight: 'count' } : { eps: 50 };
      const res = await app.inject({ method: 'POST', url: '/v1/datasets', headers: { 'content-type': 'application/json' }, payload: JSON.stringify({ id, settings, ...extra }) });
      expect(res.statusCode).toBe(201);
    }
  });
  afterAll(async () => {
    await app.close();
  });
  const postTo = (dataset: string, payload: string, query = '', headers: Record<string, string> = GEO) =>
    app.inject({ method: 'POST', url: `/v1/datasets/${dataset}/observations${query}`, headers, payload });
  const count = (dataset: string) => app.datasets.store.countObservations(dataset);

  it('stores a batch once: a repeated post reports duplicates and stores nothing twice', async () => {
    const body = collection([feature('a1', 8.5, 47.3, { observed_at: '2026-04-01T10:00:00Z', kind: 'x' }), feature('a2', 8.6, 47.4, { kind: 'y', note: { deep: [1, 2] } })]);
    const first = await postTo('obs', body);
    expect(first.statusCode).toBe(200);
    expectMatchesSpec(first, PATH, 'POST');
    expect(first.json()).toMatchObject({ stored: true, accepted: 2, duplicate: 0, replaced: 0, rejected: 0 });
    const again = await postTo('obs', body);
    expect(again.json()).toMatchObject({ stored: true, accepted: 0, duplicate: 2, duplicates: ['a1', 'a2'] });
    expect(await count('obs')).toBe(2);
    // properties come back untouched
    const list = await app.inject({ method: 'GET', url: '/v1/datasets/obs/observations' });
    expect(list.json().features[1]).toEqual(feature('a2', 8.6, 47.4, { kind: 'y', note: { deep: [1, 2] } }));
  });

  it('the same id with other content is a 409 conflict listing it, nothing stored; replace=true replaces it', async () => {
    const body = collection([feature('a1', 8.51, 47.3, { kind: 'x' }), feature('a3', 8.7, 47.5)]);
    const res = await postTo('obs', body);
    expect(res.statusCode).toBe(409);
    expectMatchesSpec(res, PATH, 'POST');
    expect(res.json()).toMatchObject({ code: 'observation-conflict', problems: [{ index: 0, id: 'a1', code: 'conflict' }], problems_total: 1 });
    expect(await count('obs')).toBe(2);
    const replaced = await postTo('obs', body, '?replace=true');
    expect(replaced.json()).toMatchObject({ accepted: 1, replaced: 1 });
    expect(await count('obs')).toBe(3);
    const partial = await postTo('obs', collection([feature('a1', 8.52, 47.3), feature('a4', 8.7, 47.5)]), '?partial=true');
    expect(partial.json()).toMatchObject({ stored: true, accepted: 1, rejected: 1, rejections: [{ index: 0, id: 'a1', code: 'conflict' }] });
  });

  it('any invalid feature stores nothing (422 listing index and id); partial=true stores the valid ones', async () => {
    const body = collection([feature('b1', 8.5, 47.3), feature('b2', 500, 47.3), feature(null, 8.5, 47.3), feature('b4', 8.5, 47.3)]);
    const before = await count('obs');
    const res = await postTo('obs', body);
    expect(res.statusCode).toBe(422);
    expectMatchesSpec(res, PATH, 'POST');
    expect(await count('obs')).toBe(before);
    const bad = await postTo('obs', collection([feature('b1', 8.5, 47.3), feature(null, 8.5, 47.3)]));
    expect(bad.statusCode).toBe(422);
    expect(bad.json().problems).toEqual([expect.objectContaining({ index: 1, code: 'missing-id' })]);

    const partial = await postTo('obs', body, '?partial=true');
    expect(partial.statusCode).toBe(200);
    expectMatchesSpec(partial, PATH, 'POST');
    expect(partial.json()).toMatchObject({ stored: true, accepted: 2, rejected: 2 });
    expect(partial.json().rejections.map((r: { index: number }) => r.index)).toEqual([1, 2]);
    expect(partial.json().rejections[0]).toMatchObject({ id: 'b2' });
    expect(await count('obs')).toBe(before + 2);
  });

  it('reads CSV with the dataset id property, and text sequences; weights are optional but checked', async () => {
    const csv = 'ref,longitude,latitude,count\nc1,8.5,47.3,2\nc2,8.6,47.31,\n';
    const res = await postTo('csv', csv, '', { 'content-type': 'text/csv' });
    expect(res.json()).toMatchObject({ accepted: 2 });
    const seq = '\x1e' + JSON.stringify(feature('s1', 8.5, 47.3, { ref: 's1' })) + '\n\x1e' + JSON.stringify(feature('s2', 8.5, 47.3, { ref: 's2' })) + '\n';
    const s = await postTo('csv', seq, '', { 'content-type': 'application/geo+json-seq' });
    expect(s.json()).toMatchObject({ accepted: 2 });
    const w = await postTo('weighted', collection([feature('w1', 8.5, 47.3, { count: 3 }), feature('w2', 8.5, 47.3), feature('w3', 8.5, 47.3, { count: 'many' })]), '?partial=true');
    expect(w.json()).toMatchObject({ accepted: 2, rejections: [{ index: 2, id: 'w3', code: 'bad-weight' }] });
    const input = await app.datasets.store.loadForRun('weighted');
    expect(Array.from(input.weight!)).toEqual([3, NaN]);
    const badCsv = await postTo('csv', 'ref,longitude,latitude\nx1,8.5,47.3\nx2,abc,47.3\nx3,8.5,47.3\n', '?partial=true', { 'content-type': 'text/csv' });
    expect(badCsv.json()).toMatchObject({ accepted: 2, rejected: 1, rejections: [{ index: 1 }] });
  });

  it('reads a large batch in a worker thread with the same outcome', async () => {
    const big = pointsCollection(2000, 3);
    expect(Buffer.byteLength(big)).toBeGreaterThan(SMALL_BODY_BYTES);
    await app.inject({ method: 'POST', url: '/v1/datasets', headers: { 'content-type': 'application/json' }, payload: JSON.stringify({ id: 'big', settings: { eps: 50 } }) });
    const res = await postTo('big', big);
    expect(res.json()).toMatchObject({ accepted: 2000 });
    const broken = big.replace('"p7"', 'null');
    const again = await postTo('big', broken);
    expect(again.statusCode).toBe(422);
    expect(again.json().problems[0]).toMatchObject({ index: 7, code: 'missing-id' });
  });

  it('GET filters by bbox, datetime and property, pages with a next link, and DELETE retracts', async () => {
    await app.inject({ method: 'POST', url: '/v1/datasets', headers: { 'content-type': 'application/json' }, payload: JSON.stringify({ id: 'list', settings: { eps: 50 } }) });
    const fs = [];
    for (let i = 0; i < 10; i++) fs.push(feature(`f${i}`, i < 5 ? 8 : 179.5, 47, { observed_at: `2026-04-0${i % 9 + 1}T00:00:00Z`, plant: i % 2 ? 'balsam' : 'knotweed' }));
    await postTo('list', collection(fs));
    const get = async (q: string): Promise<string[]> => {
      const res = await app.inject({ method: 'GET', url: `/v1/datasets/list/observations${q}` });
      expect(res.statusCode, q).toBe(200);
      expect(res.headers['content-type']).toMatch(/^application\/geo\+json/);
      expectMatchesSpec(res, PATH, 'GET');
      return res.json().features.map((f: { id: string }) => f.id);
    };
    expect(await get('?bbox=7,46,9,48')).toEqual(['f0', 'f1', 'f2', 'f3', 'f4']);
    expect(await get('?bbox=179,46,-179,48')).toEqual(['f5', 'f6', 'f7', 'f8', 'f9']);
    expect(await get('?where=plant=balsam')).toEqual(['f1', 'f3', 'f5', 'f7', 'f9']);
    expect(await get('?where=plant=balsam&bbox=7,46,9,48')).toEqual(['f1', 'f3']);
    expect(await get('?datetime=2026-04-03T00:00:00Z')).toEqual(['f2']);
    expect(await get('?datetime=2026-04-08T00:00:00Z/..')).toEqual(['f7', 'f8']);
    expect(await get('?datetime=../2026-04-02T00:00:00Z')).toEqual(['f0', 'f1', 'f9']);
    const page = await app.inject({ method: 'GET', url: '/v1/datasets/list/observations?limit=4&where=plant=knotweed' });
    expect(page.json().numberReturned).toBe(4);
    const next = page.json().links.find((l: { rel: string }) => l.rel === 'next').href as string;
    const rest = await app.inject({ method: 'GET', url: next });
    expect(rest.json().features.map((f: { id: string }) => f.id)).toEqual(['f8']);
    expect(rest.json().links).toEqual([]);

    const del = await app.inject({ method: 'DELETE', url: '/v1/datasets/list/observations/f0' });
    expect(del.statusCode).toBe(204);
    const again = await app.inject({ method: 'DELETE', url: '/v1/datasets/list/observations/f0' });
    expect(again.json().code).toBe('observation-not-found');
    expectMatchesSpec(again, `${PATH}/{obsId}`, 'DELETE');
    expect(await count('list')).toBe(9);
  });

  it('GET gives the page a bbox that holds every listed observation, across the antimeridian too', async () => {
    await app.inject({ method: 'POST', url: '/v1/datasets', headers: { 'content-type': 'application/json' }, payload: JSON.stringify({ id: 'boxes', settings: { eps: 50 } }) });
    const west = [feature('w1', 8.123456789, 46.987654321), feature('w2', 8.2, 47.000000001), feature('w3', 7.99999999, 46.5)];
    const seam = [feature('s1', 179.123456789, -16.5), feature('s2', -179.87654321, -16.999999999), feature('s3', 179.9, -16.1)];
    await postTo('boxes', collection([...west, ...seam]));
    const list = async (q: string): Promise<{ bbox?: number[]; features: { geometry: { coordinates: number[] } }[] }> => {
      const res = await app.inject({ method: 'GET', url: `/v1/datasets/boxes/observations${q}` });
      expectMatchesSpec(res, PATH, 'GET');
      // source: the GeoJSON schema of the geojson-schema package (RFC 7946), bbox included
      expect(validateCollection(res.json()), JSON.stringify(validateCollection.errors)).toBe(true);
      return res.json();
    };
    const inside = (b: number[], [x, y]: number[]): boolean => y! >= b[1]! && y! <= b[3]! && (b[0]! <= b[2]! ? x! >= b[0]! && x! <= b[2]! : x! >= b[0]! || x! <= b[2]!);
    const a = await list('?bbox=0,40,10,50');
    // rounded outwards to 7 decimals
    expect(a.bbox).toEqual([7.9999999, 46.5, 8.2, 47.0000001]);
    for (const f of a.features) expect(inside(a.bbox!, f.geometry.coordinates)).toBe(true);
    const b = await list('?bbox=170,-20,-170,-10');
    // source: RFC 7946 §5.2, a box across the antimeridian has west > east
    expect(b.bbox).toEqual([179.1234567, -17, -179.8765432, -16.1]);
    for (const f of b.features) expect(inside(b.bbox!, f.geometry.coordinates)).toBe(true);
    const none = await list('?bbox=0,0,1,1');
    expect(none.features).toEqual([]);
    expect(none.bbox).toBeUndefined();
  });

  it('refuses bad parameters, an empty body and an unknown dataset', async () => {
    for (const q of ['?bbox=1,2,3', '?datetime=yesterday', '?datetime=../..', '?limit=0', '?cursor=zzz', '?where=novalue', '?colour=red']) {
      const res = await app.inject({ method: 'GET', url: `/v1/datasets/list/observations${q}` });
      expect(res.statusCode, q).toBe(400);
      expect(res.json().code).toBe('invalid-parameter');
      expectMatchesSpec(res, PATH, 'GET');
    }
    const flag = await postTo('obs', collection([feature('z', 1, 1)]), '?replace=maybe');
    expect(flag.json()).toMatchObject({ code: 'invalid-parameter', parameter: 'replace' });
    const empty = await postTo('obs', '');
    expect(empty.json().code).toBe('malformed-body');
    const unknown = await postTo('nope', collection([feature('z', 1, 1)]));
    expect(unknown.statusCode).toBe(404);
    expect(unknown.json().code).toBe('dataset-not-found');
    expectMatchesSpec(unknown, PATH, 'POST');
  });
});
