import { createRequire } from 'node:module';
import { readFileSync } from 'node:fs';
import type { FastifyInstance } from 'fastify';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { haversineMeters } from '../../src/core/haversine.js';
import { DEMO_DATASET, DEMO_PATH, seedDemo } from '../../src/http/routes/demo.js';
import { expectMatchesSpec, testApp } from './helper.js';

interface DensityDbscan {
  run(data: number[][], eps: number, minPts: number, distance: (a: number[], b: number[]) => number): number[][];
}
const require = createRequire(import.meta.url);
const { DBSCAN: DensityDBSCAN } = require('density-clustering') as { DBSCAN: new () => DensityDbscan };

/** Polls a run until it is over; bounded. */
async function finished(app: FastifyInstance, url: string, timeoutMs = 60_000): Promise<Record<string, unknown>> {
  const end = Date.now() + timeoutMs;
  for (;;) {
    const run = (await app.inject({ method: 'GET', url })).json() as Record<string, unknown>;
    if (run.status === 'succeeded' || run.status === 'failed' || run.status === 'cancelled') return run;
    if (Date.now() > end) throw new Error(`run still ${String(run.status)} after ${timeoutMs} ms`);
    await new Promise((r) => setTimeout(r, 50));
  }
}

describe('the map page and its data', () => {
  let app: FastifyInstance;
  let runId: string;
  beforeAll(async () => {
    app = await testApp({ basemapStyle: 'https://tiles.example.org/style.json' });
    runId = (await seedDemo(app))!;
    const run = await finished(app, `/v1/datasets/${DEMO_DATASET}/runs/${runId}`);
    expect(run.status, String(run.error)).toBe('succeeded');
  });
  afterAll(async () => {
    await app.close();
  });

  it('serves the page at / and /datasets/{id}, with the operator basemap style and its own scripts', async () => {
    for (const url of ['/', `/datasets/${DEMO_DATASET}`]) {
      const res = await app.inject({ method: 'GET', url });
      expect(res.statusCode, url).toBe(200);
      expect(res.headers['content-type']).toMatch(/^text\/html/);
      expect(res.body).toContain('<meta name="roost-basemap-style" content="https://tiles.example.org/style.json" />');
      const scripts = [...res.body.matchAll(/(?:src|href)="([^"]+)"/g)].map((m) => m[1]).filter((u) => !u.startsWith('data:') && u !== '/');
      expect(scripts.length).toBeGreaterThanOrEqual(2);
      for (const asset of scripts) {
        // served by the service itself: no other host
        expect(asset, asset).toMatch(/^\/assets\//);
        const a = await app.inject({ method: 'GET', url: asset });
        expect(a.statusCode, asset).toBe(200);
      }
    }
  });

  it('gives the stored dataset the same k-distance curve and knee as POST /v1/k-distance on the same file', async () => {
    const stored = await app.inject({ method: 'GET', url: `/v1/datasets/${DEMO_DATASET}/k-distance?min_points=10` });
    expect(stored.statusCode).toBe(200);
    expectMatchesSpec(stored, '/v1/datasets/{id}/k-distance', 'GET');
    const posted = await app.inject({ method: 'POST', url: '/v1/k-distance?min_points=10', headers: { 'content-type': 'application/geo+json' }, payload: readFileSync(DEMO_PATH) });
    expect(posted.statusCode).toBe(200);
    const { preview, ...rest } = stored.json() as Record<string, unknown>;
    expect(preview).toBeNull();
    expect(rest).toEqual(posted.json());
    expect(rest.eps_m).toBe(108.2);
  });

  it('previews hotspots and noise at a chosen eps as DBSCAN gives them, and as the stored run has them', async () => {
    const res = await app.inject({ method: 'GET', url: `/v1/datasets/${DEMO_DATASET}/k-distance?min_points=10&eps=75` });
    expect(res.statusCode).toBe(200);
    expectMatchesSpec(res, '/v1/datasets/{id}/k-distance', 'GET');
    const preview = res.json().preview as { hotspots: number; noise: number; clustered: number; observations: number };
    const run = (await app.inject({ method: 'GET', url: `/v1/datasets/${DEMO_DATASET}/runs/${runId}` })).json();
    expect(preview.hotspots).toBe(run.summary.figures.hotspots);
    expect(preview.noise).toBe(run.summary.figures.noise);

    // source: npm density-clustering 1.3.0 DBSCAN with a haversine distance (its minPts counts the
    // point itself, as ours; it compares with a strict <, so no pair may lie within 10 µm of eps)
    const features = (JSON.parse(readFileSync(DEMO_PATH, 'utf8')) as { features: { geometry: { coordinates: number[] } }[] }).features;
    const data = features.map((f) => [f.geometry.coordinates[0], f.geometry.coordinates[1]]);
    const dist = (a: number[], b: number[]): number => haversineMeters(a[0], a[1], b[0], b[1]);
    let nearEps = 0;
    for (let i = 0; i < data.length; i++) for (let j = i + 1; j < data.length; j++) if (Math.abs(dist(data[i], data[j]) - 75) <= 1e-5) nearEps++;
    expect(nearEps).toBe(0);
    const clusters = new DensityDBSCAN().run(data, 75, 10, dist);
    const clustered = new Set(clusters.flat()).size;
    expect(preview.hotspots).toBe(clusters.length);
    expect(preview.noise).toBe(data.length - clustered);
    expect(preview.observations).toBe(data.length);
  });

  it('refuses unknown parameters, bad values and unknown datasets with problems', async () => {
    const cases: [string, number, string | undefined][] = [
      [`/v1/datasets/${DEMO_DATASET}/k-distance?k=3`, 400, 'k'],
      [`/v1/datasets/${DEMO_DATASET}/k-distance?min_points=0`, 400, 'min_points'],
      [`/v1/datasets/${DEMO_DATASET}/k-distance?eps=-5`, 400, 'eps'],
      [`/v1/datasets/${DEMO_DATASET}/k-distance?eps=wide`, 400, 'eps'],
      ['/v1/datasets/no-such/k-distance', 404, undefined],
      [`/v1/datasets/${DEMO_DATASET}/runs/r999999/report`, 404, undefined],
      ['/v1/datasets/no-such/runs/r000001/report', 404, undefined],
    ];
    for (const [url, status, parameter] of cases) {
      const res = await app.inject({ method: 'GET', url });
      expect(res.statusCode, url).toBe(status);
      expect(res.headers['content-type'], url).toMatch(/^application\/problem\+json/);
      if (parameter) expect(res.json().parameter, url).toBe(parameter);
    }
  });

  it('writes a run report as one HTML file that names no other address and allows no network source', async () => {
    const res = await app.inject({ method: 'GET', url: `/v1/datasets/${DEMO_DATASET}/runs/${runId}/report` });
    expect(res.statusCode).toBe(200);
    expect(res.headers['content-type']).toMatch(/^text\/html/);
    expect(res.headers['content-disposition']).toBe(`attachment; filename="report-${DEMO_DATASET}-${runId}.html"`);
    const html = res.body;
    expect(html).toContain(`content="default-src 'none';`);
    // no element loads anything from elsewhere: every src/href is absent, data: or a fragment
    for (const m of html.matchAll(/<(?:script|link|img|iframe|source)\b[^>]*\b(?:src|href)="([^"]*)"/gi)) expect(m[1], m[0]).toMatch(/^(data:|#)/);
    const data = JSON.parse(/<script type="application\/json" id="roost-report-data">(.*?)<\/script>/s.exec(html)![1]) as Record<string, any>;
    expect(data.hotspots.features.length).toBe(11);
    expect(data.summary.figures.hotspots).toBe(11);
    expect(data.kdistance.eps_m).toBe(108.2);
    expect(data.run.id).toBe(runId);
  });
});
