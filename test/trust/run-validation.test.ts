/**
 * The validation figures where users meet them: the summary and layers of `clusterInput`, the
 * command line (`--reference`, `--validation`), POST /v1/cluster and a stored dataset's run. The
 * figures are checked against those recomputed from the written points layer.
 */
import { mkdtempSync, readFileSync, rmSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import type { FastifyInstance } from 'fastify';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { run } from '../../src/cli/main.js';
import { clusterInput } from '../../src/run/cluster.js';
import { resolveSettings } from '../../src/run/settings.js';
import { agreement } from '../../src/trust/validation.js';
import { expectMatchesSpec, pointsCollection, testApp } from '../http/helper.js';

const DEMO = new URL('../../data/demo/observations.geojson', import.meta.url).pathname;
const GEO = { 'content-type': 'application/geo+json' };
const JSON_TYPE = { 'content-type': 'application/json' };

interface PointsLayer {
  features: { properties: Record<string, unknown> }[];
}

/** Purity, ARI and NMI recomputed from a points layer (hotspot_id, reference property). */
function fromPoints(points: PointsLayer, property: string): { excluded: ReturnType<typeof agreement>; group: ReturnType<typeof agreement> } {
  const ex: [number[], number[]] = [[], []];
  const all: [number[], number[]] = [[], []];
  const code = new Map<string, number>();
  for (const f of points.features) {
    const v = f.properties[property];
    if (v === undefined || v === null) continue;
    const k = code.get(String(v)) ?? code.set(String(v), code.size).get(String(v))!;
    const h = f.properties.hotspot_id as number | null;
    all[0].push(h ?? 0);
    all[1].push(k);
    if (h !== null) {
      ex[0].push(h);
      ex[1].push(k);
    }
  }
  return { excluded: agreement(ex[0], ex[1]), group: agreement(all[0], all[1]) };
}

function expectAgrees(block: Record<string, number>, f: ReturnType<typeof agreement>): void {
  expect(block.observations).toBe(f.observations);
  expect(block.purity).toBeCloseTo(f.purity!, 6);
  expect(block.adjusted_rand_index).toBeCloseTo(f.adjustedRandIndex!, 6);
  expect(block.nmi).toBeCloseTo(f.nmi!, 6);
  expect(block.rand_index).toBeCloseTo(f.randIndex!, 6);
}

describe('clusterInput with reference and validation', () => {
  const demo = readFileSync(DEMO);
  const result = clusterInput(demo, 'geojson', resolveSettings({ eps: 150, min_points: 5, reference: 'plant', validation: true }));
  const summary = result.summary as { validation: { internal: Record<string, unknown>; reference: Record<string, Record<string, number>> }; hotspots: Record<string, unknown>[] };

  it('writes the reference figures as recomputed from the points layer, noise both ways', () => {
    const points = JSON.parse(result.layers.points.text()) as PointsLayer;
    const ref = fromPoints(points, 'plant');
    expect(summary.validation.reference.property).toBe('plant');
    expectAgrees(summary.validation.reference.noise_excluded, ref.excluded);
    expectAgrees(summary.validation.reference.noise_as_group, ref.group);
    expect(ref.group.observations).toBeGreaterThan(ref.excluded.observations);
  });

  it('gives every hotspot its majority value and share, in the summary and in both layers as fixed-type fields', () => {
    const points = JSON.parse(result.layers.points.text()) as PointsLayer;
    for (const h of summary.hotspots) {
      const values = points.features.filter((f) => f.properties.hotspot_id === h.hotspot_id).map((f) => String(f.properties.plant));
      const counts = new Map<string, number>();
      for (const v of values) counts.set(v, (counts.get(v) ?? 0) + 1);
      const top = Math.max(...counts.values());
      const majority = [...counts].filter(([, c]) => c === top).map(([v]) => v).sort()[0];
      expect(h.reference_majority).toBe(majority);
      expect(h.reference_share).toBeCloseTo(top / values.length, 6);
    }
    for (const layer of ['hotspots', 'centres'] as const) {
      const text = result.layers[layer].text();
      const features = (JSON.parse(text) as PointsLayer).features;
      expect(features.map((f) => f.properties.reference_majority)).toEqual(summary.hotspots.map((h) => h.reference_majority));
      // reals keep their decimal point (a share of exactly 1 is written 1.0)
      expect(text).not.toMatch(/"reference_share":1[,}]/);
    }
  });

  it('gives silhouette and DBCV on the stated sample', () => {
    const internal = summary.validation.internal;
    expect(internal.observations).toBe(2000);
    expect(internal.sample).toEqual({ size: 2000, seed: 1987 });
    expect(internal.silhouette as number).toBeGreaterThan(0);
    expect(internal.silhouette as number).toBeLessThanOrEqual(1);
    expect(internal.dbcv as number).toBeGreaterThan(-1);
    expect(internal.dbcv as number).toBeLessThanOrEqual(1);
  });

  it('adds nothing when neither is asked for', () => {
    const plain = clusterInput(demo, 'geojson', resolveSettings({ eps: 150, min_points: 5 }));
    expect(plain.summary.validation).toBeUndefined();
    expect(plain.layers.hotspots.text()).not.toContain('reference_');
  });

  it('refuses a validation value that is not true or false', () => {
    expect(() => resolveSettings({ eps: 150, validation: 'yes' })).toThrow(/validation: must be true or false/);
  });
});

describe('roost cluster --reference --validation', () => {
  const dir = mkdtempSync(join(tmpdir(), 'roost-validation-'));
  afterAll(() => rmSync(dir, { recursive: true, force: true }));

  it('writes the figures to summary.json and the fields to the layers', async () => {
    const out = join(dir, 'out');
    expect(await run(['cluster', DEMO, '--eps', '150', '--reference', 'plant', '--validation', '--out-dir', out])).toBe(0);
    const summary = JSON.parse(readFileSync(join(out, 'summary.json'), 'utf8')) as { parameters: Record<string, unknown>; validation: { reference: Record<string, Record<string, number>>; internal: Record<string, unknown> } };
    expect(summary.parameters.reference).toBe('plant');
    expect(summary.parameters.validation).toBe(true);
    const ref = fromPoints(JSON.parse(readFileSync(join(out, 'points.geojson'), 'utf8')) as PointsLayer, 'plant');
    expectAgrees(summary.validation.reference.noise_excluded, ref.excluded);
    expect(typeof summary.validation.internal.dbcv).toBe('number');
    expect(readFileSync(join(out, 'centres.geojson'), 'utf8')).toContain('"reference_majority":');
  });
});

describe('POST /v1/cluster and a dataset\'s runs', () => {
  let app: FastifyInstance;
  beforeAll(async () => {
    app = await testApp();
  });
  afterAll(async () => {
    await app.close();
  });
  const data = pointsCollection(400, 5);

  it('answers with the figures, matching the contract', async () => {
    const res = await app.inject({ method: 'POST', url: '/v1/cluster?eps=60&min_points=5&reference=kind&validation=true', headers: GEO, payload: data });
    expect(res.statusCode, res.body).toBe(200);
    expectMatchesSpec(res, '/v1/cluster', 'POST');
    const body = res.json() as { summary: { validation: { internal: { silhouette: number; dbcv: number }; reference: Record<string, Record<string, number>> } }; hotspots: PointsLayer };
    expect(body.summary.validation.internal.silhouette).toBeGreaterThan(0.5); // five tight groups 50 m across, 1 km apart
    expect(body.summary.validation.reference.noise_excluded.observations).toBeGreaterThan(0);
    for (const f of body.hotspots.features) expect(['a', 'b']).toContain(f.properties.reference_majority);
  });

  it('refuses a bad validation value with a 400 naming the parameter, before the upload', async () => {
    const res = await app.inject({ method: 'POST', url: '/v1/cluster?eps=60&validation=maybe', headers: GEO, payload: data });
    expect(res.statusCode).toBe(400);
    expect(res.json()).toMatchObject({ code: 'invalid-parameter', parameter: 'validation' });
    expect(res.json().detail).toMatch(/true or false/);
  });

  it('gives a nightly run the figures from the dataset\'s settings, with the fields in its layers', async () => {
    const created = await app.inject({ method: 'POST', url: '/v1/datasets', headers: JSON_TYPE, payload: JSON.stringify({ id: 'scored', settings: { eps: 60, min_points: 5, reference: 'kind', validation: true } }) });
    expect(created.statusCode, created.body).toBe(201);
    await app.inject({ method: 'POST', url: '/v1/datasets/scored/observations', headers: GEO, payload: data });
    const start = await app.inject({ method: 'POST', url: '/v1/datasets/scored/runs' });
    expect(start.statusCode).toBe(202);
    const location = start.headers.location as string;
    let runDoc: Record<string, unknown> = {};
    for (let i = 0; i < 600; i++) {
      runDoc = (await app.inject({ method: 'GET', url: location })).json() as Record<string, unknown>;
      if (runDoc.status === 'succeeded' || runDoc.status === 'failed') break;
      await new Promise((r) => setTimeout(r, 50));
    }
    expect(runDoc.status, String(runDoc.error)).toBe('succeeded');
    const summary = runDoc.summary as { validation: { reference: Record<string, Record<string, number>>; internal: Record<string, unknown> } };
    const direct = await app.inject({ method: 'POST', url: '/v1/cluster?eps=60&min_points=5&reference=kind&validation=true', headers: GEO, payload: data });
    expect(summary.validation).toEqual((direct.json() as { summary: { validation: unknown } }).summary.validation);
    const hotspots = await app.inject({ method: 'GET', url: `${location}/hotspots` });
    expect(hotspots.body).toContain('"reference_share":');
    const schema = await app.inject({ method: 'GET', url: '/features/collections/scored.hotspots/schema' });
    expect(schema.statusCode).toBe(200);
    const props = (JSON.parse(schema.body) as { properties: Record<string, { type: unknown }> }).properties;
    expect(props.reference_share.type).toEqual(['number', 'null']);
  });
});
