/**
 * POST /v1/cluster with a Monte Carlo test and resampling: the same p-values and stabilities as
 * the command line's pipeline for the same seed, the answer matching openapi.yaml, and bad test
 * settings refused as problems before the body is read.
 */
import type { FastifyInstance } from 'fastify';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { resolveSettings } from '../../src/run/settings.js';
import { assessHere, clusterCases } from '../../src/trust/assess.js';
import { resolveTrustSettings } from '../../src/trust/options.js';
import { expectMatchesSpec, testApp } from '../http/helper.js';
import { discPositions, rng } from '../reference/seeded.js';

const SEED = Number(process.env.ROOST_TEST_SEED ?? 20261203);

function body(): string {
  const r = rng(SEED);
  const features: unknown[] = [];
  const add = (lon: number, lat: number, kind: string, id: string): void => {
    features.push({ type: 'Feature', id, geometry: { type: 'Point', coordinates: [lon, lat] }, properties: { kind } });
  };
  for (let i = 0; i < 150; i++) add(8 + 0.14 * r.next(), 50 + 0.09 * r.next(), 'sighting', `s${i}`);
  const a = discPositions(SEED + 1, 30, 8.03, 50.03, 120);
  for (let i = 0; i < 30; i++) add(a.lon[i], a.lat[i], 'sighting', `a${i}`);
  for (let i = 0; i < 200; i++) add(8 + 0.14 * r.next(), 50 + 0.09 * r.next(), 'visit', `v${i}`);
  return JSON.stringify({ type: 'FeatureCollection', features });
}

describe('POST /v1/cluster with null_model and resamples', () => {
  let app: FastifyInstance;
  const payload = body();
  beforeAll(async () => {
    app = await testApp();
  });
  afterAll(async () => {
    await app.close();
  });

  it('answers with p_value, significant and stability, as the pipeline gives them for the same seed', async () => {
    const q = { eps: '300', min_points: '5', null_model: 'csr', simulations: '19', seed: '5', resamples: '8', where: 'kind=sighting' };
    const res = await app.inject({ method: 'POST', url: `/v1/cluster?${new URLSearchParams(q)}`, headers: { 'content-type': 'application/geo+json' }, payload });
    expect(res.statusCode, res.body.slice(0, 300)).toBe(200);
    expectMatchesSpec(res, '/v1/cluster', 'POST');
    const doc = res.json();
    const { eps, min_points, where, ...trustQuery } = q;
    const settings = resolveSettings({ eps, min_points, where });
    const trust = resolveTrustSettings(trustQuery);
    const { result } = clusterCases(payload, 'geojson', settings, trust);
    assessHere(result, settings, { settings: trust });
    expect(doc.hotspots).toEqual(JSON.parse(result.layers.hotspots.text()));
    expect(doc.summary.chance).toEqual(result.summary.chance);
    expect(doc.summary.chance).toMatchObject({ null_model: 'csr', simulations: 19, seed: 5 });
    expect(doc.summary.stability).toMatchObject({ resamples: 8, seed: 5 });
    const planted = doc.summary.hotspots.filter((h: { count: number }) => h.count >= 25);
    expect(planted.length).toBe(1);
    expect(planted[0]).toMatchObject({ p_value: 0.05, significant: true });
  });

  it('takes effort points marked by effort_where and a study area from the body', async () => {
    const res = await app.inject({
      method: 'POST',
      url: '/v1/cluster?eps=300&min_points=5&effort_where=kind%3Dvisit&simulations=9',
      headers: { 'content-type': 'application/geo+json' },
      payload,
    });
    expect(res.statusCode, res.body.slice(0, 300)).toBe(200);
    expect(res.json().summary.chance).toMatchObject({ null_model: 'effort', effort: { source: 'property marker', cases: 180, effort_points: 200 } });
    const withArea = JSON.parse(payload);
    withArea.settings = { study_area: { type: 'Polygon', coordinates: [[[7.99, 49.99], [8.15, 49.99], [8.15, 50.1], [7.99, 50.1], [7.99, 49.99]]] } };
    const res2 = await app.inject({ method: 'POST', url: '/v1/cluster?eps=300&null_model=csr&simulations=9', headers: { 'content-type': 'application/json' }, payload: JSON.stringify(withArea) });
    expect(res2.statusCode, res2.body.slice(0, 300)).toBe(200);
    expect(res2.json().summary.chance.study_area.kind).toBe('polygon given');
  });

  it('refuses bad test settings with a problem naming the parameter', async () => {
    for (const [qs, parameter, message] of [
      ['null_model=poisson', 'null_model', /^null_model: must be csr or effort, got "poisson"$/],
      ['simulations=lots', 'simulations', /whole number/],
      ['resample_share=0', 'resample_share', /^resample_share: must be a number above 0 and below 1, got 0$/],
      ['significance_level=1', 'significance_level', /^significance_level: must be a number above 0 and below 1, got 1$/],
      ['simulations=-3', 'simulations', /^simulations: must be a whole number from 0 to 9999, got -3$/],
      ['null_model=effort', 'null_model', /effort needs effort points/],
    ] as const) {
      const res = await app.inject({ method: 'POST', url: `/v1/cluster?eps=300&${qs}`, headers: { 'content-type': 'application/geo+json' }, payload });
      expect(res.statusCode, qs).toBe(400);
      expect(res.headers['content-type']).toMatch(/problem\+json/);
      expect(res.json(), qs).toMatchObject({ parameter });
      expect(res.json().detail).toMatch(message);
    }
  });
});
