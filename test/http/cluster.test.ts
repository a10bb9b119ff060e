import { readFileSync } from 'node:fs';
import { fileURLToPath } from 'node:url';
import type { FastifyInstance } from 'fastify';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { clusterInput, resultDocument, suggestEpsInput, type InputFormat } from '../../src/run/cluster.js';
import { resolveSettings } from '../../src/run/settings.js';
import { expectMatchesSpec, testApp } from './helper.js';

const demoGeoJson = readFileSync(fileURLToPath(new URL('../../data/demo/observations.geojson', import.meta.url)));
const demoCsv = readFileSync(fileURLToPath(new URL('../../data/demo/observations.csv', import.meta.url)));
const QUERY = { eps: '250', min_points: '5', count_by: 'plant' };
const query = new URLSearchParams(QUERY).toString();

/** What the command line would write for this input: the same pipeline, called directly. */
function direct(input: Buffer, format: InputFormat) {
  return clusterInput(input, format, resolveSettings(QUERY));
}

describe('the service gives the command line\'s bytes', () => {
  let app: FastifyInstance;
  beforeAll(async () => {
    app = await testApp();
  });
  afterAll(async () => {
    await app.close();
  });

  for (const [name, body, mediaType, format] of [
    ['GeoJSON', demoGeoJson, 'application/geo+json', 'geojson'],
    ['CSV', demoCsv, 'text/csv', 'csv'],
  ] as const) {
    it(`demo data as ${name}: every layer is byte-identical to clusterInput's`, async () => {
      const expected = direct(body, format);
      expect(expected.summary.figures).toMatchObject({ observations: expect.any(Number) });
      for (const layer of ['hotspots', 'centres', 'noise', 'points'] as const) {
        const res = await app.inject({ method: 'POST', url: `/v1/cluster?${query}&layer=${layer}`, headers: { 'content-type': mediaType }, payload: body });
        expect(res.statusCode, res.body.slice(0, 300)).toBe(200);
        expect(res.headers['content-type']).toBe('application/geo+json');
        expect(res.body === expected.layers[layer].text(), `${layer} differs`).toBe(true);
        if (layer !== 'points') expectMatchesSpec(res, '/v1/cluster', 'POST');
      }
    });
  }

  it('the whole document holds the same layers and the same summary apart from timings', async () => {
    const expected = direct(demoGeoJson, 'geojson');
    const res = await app.inject({ method: 'POST', url: `/v1/cluster?${query}`, headers: { 'content-type': 'application/json' }, payload: demoGeoJson });
    expect(res.statusCode).toBe(200);
    expect(res.headers['content-type']).toMatch(/^application\/json/);
    expect(res.body).toContain(`"hotspots":${expected.layers.hotspots.text()},"centres":${expected.layers.centres.text()},"noise":${expected.layers.noise.text()}}`);
    const doc = res.json();
    const reference = JSON.parse(resultDocument(expected));
    delete doc.summary.timings_ms;
    delete reference.summary.timings_ms;
    expect(doc.summary).toEqual(reference.summary);
    expect(doc.summary.figures.hotspots).toBeGreaterThan(0);
    expectMatchesSpec(res, '/v1/cluster', 'POST');
  });

  it('a GeoJSON text sequence (RFC 8142) of the demo gives the same points layer', async () => {
    const features = JSON.parse(demoGeoJson.toString('utf8')).features as unknown[];
    const seq = features.map((f) => `\u001e${JSON.stringify(f)}\n`).join('');
    const res = await app.inject({ method: 'POST', url: `/v1/cluster?${query}&layer=points`, headers: { 'content-type': 'application/geo+json-seq' }, payload: seq });
    expect(res.statusCode, res.body.slice(0, 300)).toBe(200);
    expect(res.body === direct(demoGeoJson, 'geojson').layers.points.text()).toBe(true);
  });

  it('a feature whose id is null is answered with its point, without an id, not with an error', async () => {
    const features = [
      { type: 'Feature', id: null, geometry: { type: 'Point', coordinates: [10, 50] }, properties: {} },
      { type: 'Feature', id: 'a', geometry: { type: 'Point', coordinates: [10.0001, 50] }, properties: {} },
      { type: 'Feature', geometry: { type: 'Point', coordinates: [10.0002, 50] }, properties: {} },
    ];
    const res = await app.inject({ method: 'POST', url: '/v1/cluster?eps=250&min_points=3&layer=points', headers: { 'content-type': 'application/geo+json' }, payload: { type: 'FeatureCollection', features } });
    expect(res.statusCode, res.body.slice(0, 300)).toBe(200);
    const points = JSON.parse(res.body) as { features: Record<string, unknown>[] };
    expect(points.features.map((f) => f.id)).toEqual([undefined, 'a', undefined]);
    expect(points.features.map((f) => (f.properties as { role: string }).role)).toEqual(['core', 'core', 'core']);
  });

  it('k-distance of the demo equals the pipeline\'s suggestion', async () => {
    const res = await app.inject({ method: 'POST', url: '/v1/k-distance?min_points=5', headers: { 'content-type': 'application/geo+json' }, payload: demoGeoJson });
    expect(res.statusCode).toBe(200);
    expect(res.json()).toEqual(suggestEpsInput(demoGeoJson, 'geojson', resolveSettings({ eps: 'auto', min_points: 5 })));
    expectMatchesSpec(res, '/v1/k-distance', 'POST');
  });

  it('CSV columns named in the query are used', async () => {
    const renamed = Buffer.from(demoCsv.toString('utf8').replace(/^id,longitude,latitude,/, 'id,east,north,'));
    const plain = await app.inject({ method: 'POST', url: `/v1/cluster?${query}&layer=points`, headers: { 'content-type': 'text/csv' }, payload: renamed });
    expect(plain.statusCode).toBe(422);
    const named = await app.inject({
      method: 'POST',
      url: `/v1/cluster?${query}&layer=hotspots&lon_column=east&lat_column=north`,
      headers: { 'content-type': 'text/csv' },
      payload: renamed,
    });
    expect(named.statusCode, named.body.slice(0, 300)).toBe(200);
    expect(named.body === direct(demoCsv, 'csv').layers.hotspots.text()).toBe(true);
  });
});
