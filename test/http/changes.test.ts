/**
 * /v1/datasets/{id}/changes, /v1/datasets/{id}/tracks and /v1/datasets/{id}/tracks/{track} through the HTTP app, with runs
 * executed in a worker thread on a SQLite file (track ids asked of the main thread): JSON and
 * GeoJSON answers checked against openapi.yaml, and every refusal.
 */
import { mkdtempSync, rmSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import type { FastifyInstance, LightMyRequestResponse } from 'fastify';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { buildApp } from '../../src/http/app.js';
import type { ObservationRecord } from '../../src/storage/store.js';
import { grid } from '../jobs/helpers.js';
import { expectMatchesSpec, testConfig } from './helper.js';

const ORIGIN: [number, number] = [151.2, -33.87];
const KEEP = grid('K', ORIGIN, 0, 0, 3, 3); // stays and grows
const GROW = grid('G', ORIGIN, 60, 0, 1, 3);
const GONE = grid('X', ORIGIN, 3000, 0, 3, 3); // retracted before the second run
const NEW = grid('N', ORIGIN, 6000, 0, 3, 4); // posted before the second run
const collection = (rs: ObservationRecord[]): string => `{"type":"FeatureCollection","features":[${rs.map((r) => r.feature).join(',')}]}`;
const GEO = { 'content-type': 'application/geo+json' };

describe('changes and track history over HTTP', () => {
  const dir = mkdtempSync(join(tmpdir(), 'roost-changes-'));
  let app: FastifyInstance;
  let r1: string;
  let r2: string;

  const run = async (): Promise<string> => {
    const start = await app.inject({ method: 'POST', url: '/v1/datasets/nests/runs' });
    expect(start.statusCode).toBe(202);
    const location = start.headers.location as string;
    for (let i = 0; i < 600; i++) {
      const r = (await app.inject({ method: 'GET', url: location })).json() as { id: string; status: string; error: string | null };
      if (r.status === 'succeeded') return r.id;
      if (r.status !== 'queued' && r.status !== 'running') throw new Error(`run ${r.status}: ${r.error}`);
      await new Promise((res) => setTimeout(res, 50));
    }
    throw new Error('run did not finish');
  };

  beforeAll(async () => {
    app = await buildApp({ config: testConfig({ dbPath: join(dir, 'roost.db'), scheduleScanMs: 0 }), logger: false });
    await app.ready();
    const created = await app.inject({ method: 'POST', url: '/v1/datasets', headers: { 'content-type': 'application/json' }, payload: JSON.stringify({ id: 'nests', settings: { eps: 120, min_points: 4 } }) });
    expect(created.statusCode).toBe(201);
    expect((await app.inject({ method: 'POST', url: '/v1/datasets/nests/observations', headers: GEO, payload: collection([...KEEP, ...GONE]) })).statusCode).toBe(200);
    r1 = await run();
  }, 60_000);
  afterAll(async () => {
    await app.close();
    rmSync(dir, { recursive: true, force: true });
  });

  it('with one run there is nothing to compare: 404 no-earlier-run', async () => {
    const res = await app.inject({ method: 'GET', url: '/v1/datasets/nests/changes' });
    expect(res.statusCode).toBe(404);
    expect(res.json().code).toBe('no-earlier-run');
    expectMatchesSpec(res, '/v1/datasets/{id}/changes', 'GET');
  });

  describe('after a second run', () => {
    beforeAll(async () => {
      expect((await app.inject({ method: 'POST', url: '/v1/datasets/nests/observations', headers: GEO, payload: collection([...GROW, ...NEW]) })).statusCode).toBe(200);
      for (const r of GONE) expect((await app.inject({ method: 'DELETE', url: `/v1/datasets/nests/observations/${r.id}` })).statusCode).toBe(204);
      r2 = await run();
    }, 60_000);

    it('JSON by default: latest against the one before, with kinds, ends, figures and the survival change', async () => {
      const res = await app.inject({ method: 'GET', url: '/v1/datasets/nests/changes' });
      expect(res.statusCode).toBe(200);
      expectMatchesSpec(res, '/v1/datasets/{id}/changes', 'GET');
      const body = res.json();
      expect(body.from.id).toBe(r1);
      expect(body.to.id).toBe(r2);
      expect(body.counts).toEqual({ emergence: 1, survival: 1, split: 0, absorption: 0, disappearance: 1 });
      const survival = body.transitions.find((t: { kind: string }) => t.kind === 'survival');
      expect(survival.from[0]).toMatchObject({ track_id: 't000001', count: 9 });
      expect(survival.to[0]).toMatchObject({ track_id: 't000001', count: 12 });
      expect(survival.change.count_delta).toBe(3);
      expect(survival.change.moved_m).toBeGreaterThan(5); // grew on the east side
      const emergence = body.transitions.find((t: { kind: string }) => t.kind === 'emergence');
      expect(emergence.to[0]).toMatchObject({ track_id: 't000003', count: 12 });
      const gone = body.transitions.find((t: { kind: string }) => t.kind === 'disappearance');
      expect(gone.from[0]).toMatchObject({ track_id: 't000002', count: 9 });
      // the same as the later run recorded in its summary
      const stored = (await app.inject({ method: 'GET', url: `/v1/datasets/nests/runs/${r2}` })).json().summary.changes;
      expect(stored.counts).toEqual(body.counts);
      expect(stored.transitions.map((t: { kind: string }) => t.kind)).toEqual(body.transitions.map((t: { kind: string }) => t.kind));
      // explicit from and to give the same
      const explicit = await app.inject({ method: 'GET', url: `/v1/datasets/nests/changes?from=${r1}&to=${r2}` });
      expect(explicit.json().transitions).toEqual(body.transitions);
    });

    it('GeoJSON on request: hulls of the later run with their transition, and of what disappeared', async () => {
      for (const req of [
        { url: '/v1/datasets/nests/changes?format=geojson' },
        { url: '/v1/datasets/nests/changes', headers: { accept: 'application/geo+json' } },
      ]) {
        const res = await app.inject({ method: 'GET', ...req });
        expect(res.statusCode).toBe(200);
        expect(res.headers['content-type']).toMatch(/^application\/geo\+json/);
        expectMatchesSpec(res, '/v1/datasets/{id}/changes', 'GET');
        const fc = res.json();
        expect(fc.bbox).toHaveLength(4);
        const props = fc.features.map((f: { properties: Record<string, unknown> }) => f.properties);
        expect(props.map((p: Record<string, unknown>) => [p.transition, p.track_id, p.run_id]).sort()).toEqual(
          [
            ['disappearance', 't000002', r1],
            ['emergence', 't000003', r2],
            ['survival', 't000001', r2],
          ].sort(),
        );
        for (const f of fc.features) expect(['Polygon', 'MultiPolygon']).toContain(f.geometry.type);
        expect(props.find((p: Record<string, unknown>) => p.transition === 'survival').count_delta).toBe(3);
      }
    });

    it('a track history lists size, area, centre and density per run', async () => {
      const res = await app.inject({ method: 'GET', url: '/v1/datasets/nests/tracks/t000001' });
      expect(res.statusCode).toBe(200);
      expectMatchesSpec(res, '/v1/datasets/{id}/tracks/{track}', 'GET');
      const body = res.json();
      expect(body.active).toBe(true);
      expect(body.history.map((h: { run_id: string; count: number; transition: string | null }) => [h.run_id, h.count, h.transition])).toEqual([
        [r1, 9, null],
        [r2, 12, 'survival'],
      ]);
      expect(body.history[1].area_km2).toBeGreaterThan(body.history[0].area_km2);
      expect(body.history[0].centre).toHaveLength(2);
      const ended = (await app.inject({ method: 'GET', url: '/v1/datasets/nests/tracks/t000002' })).json();
      expect(ended.active).toBe(false);
      expect(ended.history).toHaveLength(1);
    });

    it('the dataset\'s tracks are listed a page at a time, with an ETag, the active ones or the ended ones', async () => {
      const res = await app.inject({ method: 'GET', url: '/v1/datasets/nests/tracks' });
      expect(res.statusCode).toBe(200);
      expectMatchesSpec(res, '/v1/datasets/{id}/tracks', 'GET');
      const body = res.json();
      expect(body.latest_run).toBe(r2);
      expect(body.next).toBeNull();
      expect(body.tracks.map((t: { track_id: string; active: boolean; runs: number }) => [t.track_id, t.active, t.runs])).toEqual([
        ['t000001', true, 2],
        ['t000002', false, 1],
        ['t000003', true, 1],
      ]);
      const kept = body.tracks[0];
      expect(kept.first_run.id).toBe(r1);
      expect(kept.last_run.id).toBe(r2);
      // the last hotspot's figures, as the track's history gives them for that run
      const history = (await app.inject({ method: 'GET', url: kept.history })).json().history;
      const lastSeen = history[history.length - 1];
      expect([kept.hotspot_id, kept.count, kept.area_km2, kept.density_per_km2, kept.centre]).toEqual([lastSeen.hotspot_id, lastSeen.count, lastSeen.area_km2, lastSeen.density_per_km2, lastSeen.centre]);
      expect(body.tracks[1].last_run.id).toBe(r1);

      // the same answer again is 304 for a client holding its ETag
      const etag = res.headers.etag as string;
      expect(etag).toMatch(/^"/);
      const again = await app.inject({ method: 'GET', url: '/v1/datasets/nests/tracks', headers: { 'if-none-match': etag } });
      expect(again.statusCode).toBe(304);
      expect(again.body).toBe('');

      // pages of two, following next
      const ids: string[] = [];
      let url: string | null = '/v1/datasets/nests/tracks?limit=2';
      while (url !== null) {
        const page: LightMyRequestResponse = await app.inject({ method: 'GET', url });
        expect(page.statusCode).toBe(200);
        expectMatchesSpec(page, '/v1/datasets/{id}/tracks', 'GET');
        const b = page.json() as { tracks: { track_id: string }[]; next: string | null };
        expect(b.tracks.length).toBeLessThanOrEqual(2);
        ids.push(...b.tracks.map((t) => t.track_id));
        url = b.next;
      }
      expect(ids).toEqual(['t000001', 't000002', 't000003']);

      const active = (await app.inject({ method: 'GET', url: '/v1/datasets/nests/tracks?active=true&limit=1' })).json();
      expect(active.tracks.map((t: { track_id: string }) => t.track_id)).toEqual(['t000001']);
      expect(active.next).toMatch(/active=true/);
      expect((await app.inject({ method: 'GET', url: active.next })).json().tracks.map((t: { track_id: string }) => t.track_id)).toEqual(['t000003']);
      const ended = (await app.inject({ method: 'GET', url: '/v1/datasets/nests/tracks?active=false' })).json();
      expect(ended.tracks.map((t: { track_id: string }) => t.track_id)).toEqual(['t000002']);
    });

    it('refuses a listing of tracks it cannot give, with documented problems', async () => {
      const cases: [string, number, string, string | undefined][] = [
        ['/v1/datasets/nope/tracks', 404, 'dataset-not-found', undefined],
        ['/v1/datasets/nests/tracks?active=yes', 400, 'invalid-parameter', 'active'],
        ['/v1/datasets/nests/tracks?limit=0', 400, 'invalid-parameter', 'limit'],
        ['/v1/datasets/nests/tracks?limit=1001', 400, 'invalid-parameter', 'limit'],
        ['/v1/datasets/nests/tracks?cursor=abc', 400, 'invalid-parameter', 'cursor'],
        ['/v1/datasets/nests/tracks?since=r000001', 400, 'invalid-parameter', 'since'],
      ];
      for (const [url, status, code, parameter] of cases) {
        const res = await app.inject({ method: 'GET', url });
        expect(res.statusCode, url).toBe(status);
        expect(res.headers['content-type'], url).toMatch(/^application\/problem\+json/);
        expect(res.json().code, url).toBe(code);
        if (parameter !== undefined) expect(res.json().parameter, url).toBe(parameter);
        expectMatchesSpec(res, '/v1/datasets/{id}/tracks', 'GET');
      }
    });

    it('every hotspot feature of the stored runs carries its track id', async () => {
      for (const id of [r1, r2]) {
        const fc = (await app.inject({ method: 'GET', url: `/v1/datasets/nests/runs/${id}/hotspots` })).json();
        for (const f of fc.features) expect(f.properties.track_id).toMatch(/^t\d{6}$/);
      }
    });

    it('refuses what it cannot answer, with documented problems', async () => {
      const cases: [string, number, string, string][] = [
        [`/v1/datasets/nests/changes?from=${r2}&to=${r1}`, 400, 'invalid-parameter', '/v1/datasets/{id}/changes'],
        [`/v1/datasets/nests/changes?from=${r1}&to=${r1}`, 400, 'invalid-parameter', '/v1/datasets/{id}/changes'],
        ['/v1/datasets/nests/changes?format=xml', 400, 'invalid-parameter', '/v1/datasets/{id}/changes'],
        ['/v1/datasets/nests/changes?since=yesterday', 400, 'invalid-parameter', '/v1/datasets/{id}/changes'],
        ['/v1/datasets/nests/changes?to=r999999', 404, 'run-not-found', '/v1/datasets/{id}/changes'],
        ['/v1/datasets/nope/changes', 404, 'dataset-not-found', '/v1/datasets/{id}/changes'],
        ['/v1/datasets/nests/tracks/t999999', 404, 'track-not-found', '/v1/datasets/{id}/tracks/{track}'],
        ['/v1/datasets/nope/tracks/t000001', 404, 'dataset-not-found', '/v1/datasets/{id}/tracks/{track}'],
      ];
      for (const [url, status, code, path] of cases) {
        const res = await app.inject({ method: 'GET', url });
        expect(res.statusCode, url).toBe(status);
        expect(res.json().code, url).toBe(code);
        expectMatchesSpec(res, path, 'GET');
      }
    });

    it('a run that did not succeed cannot be compared: 409 run-not-ready', async () => {
      const start = await app.inject({ method: 'POST', url: '/v1/datasets/nests/runs?where=kind%3Dnone' });
      const id = start.json().id as string;
      for (let i = 0; i < 600; i++) {
        const s = (await app.inject({ method: 'GET', url: `/v1/datasets/nests/runs/${id}` })).json().status;
        if (s === 'failed') break;
        await new Promise((res) => setTimeout(res, 50));
      }
      const res = await app.inject({ method: 'GET', url: `/v1/datasets/nests/changes?to=${id}` });
      expect(res.statusCode).toBe(409);
      expect(res.json().code).toBe('run-not-ready');
      expectMatchesSpec(res, '/v1/datasets/{id}/changes', 'GET');
      // the default still names the latest succeeded run
      expect((await app.inject({ method: 'GET', url: '/v1/datasets/nests/changes' })).json().to.id).toBe(r2);
    });
  });
});
