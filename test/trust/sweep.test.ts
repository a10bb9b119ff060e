/**
 * The eps × min_points sweep: its grid rules, its figures against the brute-force DBSCAN oracle
 * and an independent pair-by-pair ARI, and where users meet it (`roost sweep`, POST /v1/sweep).
 */
import { mkdtempSync, rmSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import type { FastifyInstance } from 'fastify';
import { afterAll, beforeAll, describe, expect, it, vi } from 'vitest';
import { run } from '../../src/cli/main.js';
import { MAX_SWEEP_SETTINGS, MAX_SWEEP_VALUES, parseSweepValues, sweep, sweepGrid, SweepError } from '../../src/trust/sweep.js';
import { bruteDbscan } from '../reference/brute-dbscan.js';
import { midLatitudeSet } from '../reference/seeded.js';
import { expectMatchesSpec, pointsCollection, testApp } from '../http/helper.js';

/**
 * ARI straight from Hubert & Arabie (1985), counting every pair one by one: a = together in both,
 * and the expected index from the pairs together in each grouping.
 * source: Hubert & Arabie (1985), ARI = (index − expected) / (max − expected).
 */
function pairwiseAri(x: ArrayLike<number>, y: ArrayLike<number>): number {
  let both = 0, inX = 0, inY = 0;
  const n = x.length;
  for (let i = 0; i < n; i++) {
    for (let j = i + 1; j < n; j++) {
      const sx = x[i] === x[j], sy = y[i] === y[j];
      if (sx) inX++;
      if (sy) inY++;
      if (sx && sy) both++;
    }
  }
  const pairs = (n * (n - 1)) / 2;
  const expected = (inX * inY) / pairs;
  const max = (inX + inY) / 2;
  return max === expected ? 1 : (both - expected) / (max - expected);
}

describe('sweep values', () => {
  it('reads lists and ranges, sorted and distinct', () => {
    expect(parseSweepValues('eps', '250,100,150,100')).toEqual([100, 150, 250]);
    expect(parseSweepValues('eps', '100:300:50')).toEqual([100, 150, 200, 250, 300]);
    expect(parseSweepValues('eps', '0.1:0.5:0.1')).toEqual([0.1, 0.2, 0.3, 0.4, 0.5]);
    expect(parseSweepValues('min_points', ['3', '5,10'])).toEqual([3, 5, 10]);
    expect(parseSweepValues('min_points', '3:12:3')).toEqual([3, 6, 9, 12]);
  });

  it('refuses what cannot be used, naming the parameter', () => {
    expect(() => parseSweepValues('eps', '100,abc')).toThrow(/eps: "abc" is not a number/);
    expect(() => parseSweepValues('eps', '0,100')).toThrow(/eps: values must be greater than 0/);
    expect(() => parseSweepValues('min_points', '2.5')).toThrow(/min_points: must be whole numbers/);
    expect(() => parseSweepValues('eps', '300:100:50')).toThrow(/ends before it starts/);
    expect(() => parseSweepValues('eps', '100:300:0')).toThrow(/step .* above 0/);
    expect(() => parseSweepValues('eps', '')).toThrow(/eps: is required/);
    expect(() => parseSweepValues('eps', `1:${MAX_SWEEP_VALUES + 1}:1`)).toThrow(new RegExp(`at most ${MAX_SWEEP_VALUES} per axis`));
    expect(() => sweepGrid('10:200:10', '1:10:1')).toThrow(new RegExp(`make 200 settings; at most ${MAX_SWEEP_SETTINGS}`));
    expect(() => sweepGrid('10:200:10', '1:10:1')).toThrow(SweepError);
  });
});

describe('sweep figures', () => {
  const points = midLatitudeSet(42);
  const grid = { epsMeters: [80, 120, 200], minPoints: [4, 8] };
  const progress = vi.fn();
  const rows = sweep(points, grid, { onProgress: progress });
  const labels = new Map<string, Int32Array>();
  for (const e of grid.epsMeters) for (const m of grid.minPoints) labels.set(`${e}/${m}`, bruteDbscan(points, e, m).labels);

  it('gives each setting the hotspots and noise of the brute-force DBSCAN', () => {
    expect(rows.map((r) => [r.epsMeters, r.minPoints])).toEqual([[80, 4], [80, 8], [120, 4], [120, 8], [200, 4], [200, 8]]);
    for (const r of rows) {
      // source: brute-force DBSCAN (test/reference/brute-dbscan.ts) after Ester et al. (1996)
      const l = labels.get(`${r.epsMeters}/${r.minPoints}`)!;
      let noise = 0;
      for (const v of l) if (v < 0) noise++;
      expect(r.hotspots).toBe(Math.max(-1, ...l) + 1);
      expect(r.noise).toBe(noise);
      expect(r.noiseShare).toBeCloseTo(noise / points.n, 12);
    }
    expect(rows.some((r) => r.hotspots > 1)).toBe(true);
  });

  it('compares each setting with its neighbours by ARI, noise as one group', () => {
    for (const r of rows) {
      const e = grid.epsMeters.indexOf(r.epsMeters);
      const m = grid.minPoints.indexOf(r.minPoints);
      const here = labels.get(`${r.epsMeters}/${r.minPoints}`)!;
      if (e + 1 < grid.epsMeters.length) expect(r.ariNextEps!).toBeCloseTo(pairwiseAri(here, labels.get(`${grid.epsMeters[e + 1]}/${r.minPoints}`)!), 9);
      else expect(r.ariNextEps).toBeNull();
      if (m + 1 < grid.minPoints.length) expect(r.ariNextMinPoints!).toBeCloseTo(pairwiseAri(here, labels.get(`${r.epsMeters}/${grid.minPoints[m + 1]}`)!), 9);
      else expect(r.ariNextMinPoints).toBeNull();
    }
    expect(rows.some((r) => r.ariNextEps !== null && r.ariNextEps < 1)).toBe(true);
  });

  it('reports progress after each setting', () => {
    expect(progress).toHaveBeenCalledTimes(6);
    expect(progress).toHaveBeenLastCalledWith(6, 6, { epsMeters: 200, minPoints: 8 });
  });

  it('stops when aborted', () => {
    const controller = new AbortController();
    controller.abort(new Error('stop'));
    expect(() => sweep(points, grid, { signal: controller.signal })).toThrow('stop');
  });
});

describe('roost sweep', () => {
  const dir = mkdtempSync(join(tmpdir(), 'roost-sweep-'));
  const file = join(dir, 'points.geojson');
  writeFileSync(file, pointsCollection(300, 3));
  afterAll(() => rmSync(dir, { recursive: true, force: true }));

  const capture = async (argv: string[]): Promise<{ code: number; out: string; err: string }> => {
    let out = '';
    let err = '';
    const o = vi.spyOn(process.stdout, 'write').mockImplementation((c) => ((out += String(c)), true));
    const e = vi.spyOn(process.stderr, 'write').mockImplementation((c) => ((err += String(c)), true));
    try {
      return { code: await run(argv), out, err };
    } finally {
      o.mockRestore();
      e.mockRestore();
    }
  };

  it('prints one line per setting, with progress on stderr when asked', async () => {
    const r = await capture(['sweep', file, '--eps', '40:80:20', '--min-points', '3,6', '--progress']);
    expect(r.code, r.err).toBe(0);
    const lines = r.out.trim().split('\n');
    expect(lines[1]).toBe('eps_m\tmin_points\thotspots\tnoise_share\tari_next_eps\tari_next_min_points');
    expect(lines.slice(2).map((l) => l.split('\t').slice(0, 2).join(' '))).toEqual(['40 3', '40 6', '60 3', '60 6', '80 3', '80 6']);
    expect(r.err).toContain('roost: sweep 6/6 (eps 80 m, min_points 6)');
  });

  it('prints JSON equal to the service\'s answer', async () => {
    const r = await capture(['sweep', file, '--eps', '40,80', '--min-points', '3', '--json']);
    expect(r.code).toBe(0);
    const doc = JSON.parse(r.out) as { settings: { hotspots: number }[]; observations: number };
    expect(doc.observations).toBe(300);
    expect(doc.settings).toHaveLength(2);
  });

  it('refuses a grid that is too large with exit 2 and says why', async () => {
    const r = await capture(['sweep', file, '--eps', '10:200:10', '--min-points', '1:10:1']);
    expect(r.code).toBe(2);
    expect(r.err).toMatch(/make 200 settings; at most 100/);
  });
});

describe('POST /v1/sweep', () => {
  let app: FastifyInstance;
  beforeAll(async () => {
    app = await testApp();
  });
  afterAll(async () => {
    await app.close();
  });
  const GEO = { 'content-type': 'application/geo+json' };
  const data = pointsCollection(300, 3);

  it('answers every setting, matching the contract and the command line', async () => {
    const res = await app.inject({ method: 'POST', url: '/v1/sweep?eps=40,80&min_points=3', headers: GEO, payload: data });
    expect(res.statusCode, res.body).toBe(200);
    expectMatchesSpec(res, '/v1/sweep', 'POST');
    const doc = res.json() as { settings: { eps_m: number; min_points: number; hotspots: number }[] };
    expect(doc.settings.map((s) => [s.eps_m, s.min_points])).toEqual([[40, 3], [80, 3]]);
    expect(doc.settings[0].hotspots).toBeGreaterThan(0);
  });

  it('refuses a grid that is too large with a 400 naming the parameter', async () => {
    const res = await app.inject({ method: 'POST', url: '/v1/sweep?eps=10:200:10&min_points=1:10:1', headers: GEO, payload: data });
    expect(res.statusCode).toBe(400);
    expectMatchesSpec(res, '/v1/sweep', 'POST');
    expect(res.json()).toMatchObject({ code: 'invalid-parameter', parameter: 'eps' });
  });

  it('refuses a setting that does not apply to a sweep', async () => {
    const res = await app.inject({ method: 'POST', url: '/v1/sweep?eps=40&min_points=3&method=optics', headers: GEO, payload: data });
    expect(res.statusCode).toBe(400);
    expect(res.json()).toMatchObject({ code: 'invalid-parameter', parameter: 'method' });
  });

  it('refuses a sweep without min_points once the body has none either', async () => {
    const res = await app.inject({ method: 'POST', url: '/v1/sweep?eps=40', headers: GEO, payload: data });
    expect(res.statusCode).toBe(400);
    expect(res.json()).toMatchObject({ code: 'invalid-parameter', parameter: 'min_points' });
  });

  it('answers bad observations with a 422 listing the feature', async () => {
    const bad = '{"type":"FeatureCollection","features":[{"type":"Feature","geometry":{"type":"Point","coordinates":[200,10]},"properties":{}}]}';
    const res = await app.inject({ method: 'POST', url: '/v1/sweep?eps=40&min_points=3', headers: GEO, payload: bad });
    expect(res.statusCode).toBe(422);
    expect(res.json().problems[0].index).toBe(0);
  });
});

describe('GET /v1/datasets/{id}/sweep', () => {
  let app: FastifyInstance;
  beforeAll(async () => {
    app = await testApp();
  });
  afterAll(async () => {
    await app.close();
  });
  const GEO = { 'content-type': 'application/geo+json' };
  const JSON_TYPE = { 'content-type': 'application/json' };
  const data = pointsCollection(300, 3);

  it('sweeps the stored observations as POST /v1/sweep sweeps the same ones, with the dataset\'s filters and weight, ignoring its other settings', async () => {
    // clustering, OPTICS and Monte Carlo settings of the dataset do not apply to a sweep and are left aside
    const settings = { eps: 60, min_points: 5, method: 'optics', count_by: 'kind', simulations: 19, where: 'kind=a', weight: 'count' };
    expect((await app.inject({ method: 'POST', url: '/v1/datasets', headers: JSON_TYPE, payload: JSON.stringify({ id: 'swept', settings }) })).statusCode).toBe(201);
    expect((await app.inject({ method: 'POST', url: '/v1/datasets/swept/observations', headers: GEO, payload: data })).statusCode).toBe(200);
    const res = await app.inject({ method: 'GET', url: '/v1/datasets/swept/sweep?eps=40,80&min_points=3,6' });
    expect(res.statusCode, res.body).toBe(200);
    expectMatchesSpec(res, '/v1/datasets/{id}/sweep', 'GET');
    const direct = await app.inject({ method: 'POST', url: '/v1/sweep?eps=40,80&min_points=3,6&where=kind=a&weight=count', headers: GEO, payload: data });
    const stored = res.json() as Record<string, unknown>;
    const posted = direct.json() as Record<string, unknown>;
    expect(stored.observations).toBe(150); // every other point has kind=a
    expect(stored.weight).toBe('count');
    expect({ ...stored, left_out_by_filter: null }).toEqual({ ...posted, left_out_by_filter: null });
    // the query overrides the dataset's filter
    const other = await app.inject({ method: 'GET', url: '/v1/datasets/swept/sweep?eps=40&min_points=3&where=count=1' });
    expect(other.statusCode, other.body).toBe(200);
    expect(other.json().observations).toBe(100); // count is 1 + (i mod 3)
  });

  it('refuses a bad grid naming the parameter, and answers 404 for an unknown dataset', async () => {
    const big = await app.inject({ method: 'GET', url: '/v1/datasets/swept/sweep?eps=10:200:10&min_points=1:10:1' });
    expect(big.statusCode).toBe(400);
    expect(big.json()).toMatchObject({ code: 'invalid-parameter', parameter: 'eps' });
    const missing = await app.inject({ method: 'GET', url: '/v1/datasets/swept/sweep?eps=40' });
    expect(missing.statusCode).toBe(400);
    expect(missing.json()).toMatchObject({ code: 'invalid-parameter', parameter: 'min_points' });
    const nowhere = await app.inject({ method: 'GET', url: '/v1/datasets/nowhere/sweep?eps=40&min_points=3' });
    expect(nowhere.statusCode).toBe(404);
    expect(nowhere.json()).toMatchObject({ code: 'dataset-not-found' });
  });
});
