/**
 * A stored dataset whose settings ask for the Monte Carlo test and for resampling: its runs carry
 * p_value, significant and stability on every hotspot (summary, stored figures, hotspots and
 * centres layers), the summary's chance and stability blocks, and the changes say whether each
 * hotspot a transition ends in is significant. On SQLite and on PostgreSQL (skipped, with the
 * reason, when no server answers; required under CI), seeded and deterministic; and the same
 * through the service: dataset settings checked, a run's overrides, the changes endpoint.
 */
import type { FastifyInstance } from 'fastify';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { createRoostHooks } from '../../src/jobs/run-hooks.js';
import type { ObservationRecord, Run, Store } from '../../src/storage/store.js';
import { rng } from '../reference/seeded.js';
import { postgresSkipReason, tempPostgresStore } from '../reference/postgres.js';
import { record } from '../storage/fixtures.js';
import { grid, layerFeatures, offset, runOnce, tempStore } from '../jobs/helpers.js';
import { expectMatchesSpec, testApp } from '../http/helper.js';

const GEO = { 'content-type': 'application/geo+json' };
const JSON_TYPE = { 'content-type': 'application/json' };

const ORIGIN: [number, number] = [13.4, 52.5];
const KEEP = { replace: false, partial: false };
const SEED = Number(process.env.ROOST_TEST_SEED ?? 20261203);
console.log(`stored trust runs: data seed ${SEED} (ROOST_TEST_SEED varies it)`);

/** `n` observations uniform over a square `sideM` metres across, south-west corner at the origin. */
function background(n: number, sideM: number, prefix: string, props: Record<string, unknown> = {}): ObservationRecord[] {
  const r = rng(SEED);
  return Array.from({ length: n }, (_, k) => {
    const [lon, lat] = offset(ORIGIN[0], ORIGIN[1], r.next() * sideM, r.next() * sideM);
    return record(`${prefix}${k}`, Math.round(lon * 1e7) / 1e7, Math.round(lat * 1e7) / 1e7, props);
  });
}

/** A planted group of 36 observations 20 m apart, and a small group of 5 in a line 25 m apart (about as dense as chance makes). */
const PLANTED = grid('big-', ORIGIN, 2000, 2000, 6, 6);
const SMALL = grid('small-', ORIGIN, 500, 3500, 1, 5, 25);
const SETTINGS = { eps: 120, min_points: 5, simulations: 19, seed: 7, null_model: 'csr', significance_level: 0.05, resamples: 8, resample_share: 0.8 };

interface HotspotFigures {
  hotspot_id: number;
  count: number;
  p_value: number;
  significant: boolean;
  stability: number;
}

async function succeeded(store: Store, hooks: ReturnType<typeof createRoostHooks>, datasetId: string): Promise<Run> {
  const run = await runOnce(store, datasetId, hooks);
  expect(run.status, String(run.error)).toBe('succeeded');
  return run;
}

function suite(engine: string, open: () => Promise<{ store: Store; dispose: () => Promise<void> }>, skipReason: string | null = null): void {
  describe.skipIf(skipReason !== null)(`stored runs with p-value and stability settings on ${engine}${skipReason ? ` (skipped: ${skipReason})` : ''}`, () => {
    it('carry p_value, significant and stability per hotspot, the summary blocks, and say in the changes whether an emerging hotspot is significant', async () => {
      const { store, dispose } = await open();
      const hooks = createRoostHooks();
      try {
        await store.createDataset({ id: 'trusted', name: 'Trusted', settings: SETTINGS, idProperty: null, window: null, schedule: null, webhook: null });
        await store.ingest('trusted', [...background(400, 5000, 'bg-'), ...PLANTED], KEEP);
        const first = await succeeded(store, hooks, 'trusted');
        const summary = first.summary as { hotspots: HotspotFigures[]; chance: Record<string, unknown>; stability: Record<string, unknown> };
        expect(summary.chance).toMatchObject({ null_model: 'csr', simulations: 19, seed: 7, statistic: 'count', smallest_possible_p: 0.05, significance_level: 0.05 });
        expect(summary.stability).toMatchObject({ resamples: 8, resample_share: 0.8, seed: 7 });
        const planted = summary.hotspots.find((h) => h.count >= 36)!;
        expect(planted).toBeDefined();
        // a 36-point group 100 m across among 400 points over 25 km²: no simulation comes near it
        expect(planted.p_value).toBe(0.05);
        expect(planted.significant).toBe(true);
        expect(planted.stability).toBeGreaterThan(0.75);
        for (const h of summary.hotspots) {
          expect(h.significant).toBe(h.p_value <= 0.05);
          expect(h.stability).toBeGreaterThanOrEqual(0);
          expect(h.stability).toBeLessThanOrEqual(1);
        }
        expect(summary.chance.significant_hotspots).toBe(summary.hotspots.filter((h) => h.significant).length);

        // the same figures in the stored hotspots and in both layers, with fixed types
        const stored = await store.getRunHotspots(first.id);
        expect(stored.map((h) => h.figures?.['p_value'])).toEqual(summary.hotspots.map((h) => h.p_value));
        for (const layer of ['hotspots', 'centres'] as const) {
          const features = await layerFeatures(store, first.id, layer);
          expect(features.map((f) => [f.properties.hotspot_id, f.properties.p_value, f.properties.significant, f.properties.stability])).toEqual(
            summary.hotspots.map((h) => [h.hotspot_id, h.p_value, h.significant, h.stability]),
          );
        }
        const text = (await store.getRunLayer(first.id, 'hotspots'))!;
        expect(text).toMatch(/"p_value":(0|1)\.\d+/); // always a real
        expect(text).toMatch(/"significant":(true|false)/);

        // seeded: the same settings on the same observations give the same p-values and stabilities
        const again = await succeeded(store, hooks, 'trusted');
        expect((again.summary as { hotspots: HotspotFigures[] }).hotspots.map((h) => [h.p_value, h.stability])).toEqual(summary.hotspots.map((h) => [h.p_value, h.stability]));

        // a small group appears: it emerges, and the change says it is not significant
        await store.ingest('trusted', SMALL, KEEP);
        const third = await succeeded(store, hooks, 'trusted');
        const thirdHotspots = (third.summary as { hotspots: HotspotFigures[] }).hotspots;
        const small = thirdHotspots.find((h) => (h as unknown as { medoid_id: string }).medoid_id.startsWith('small-'));
        expect(small, JSON.stringify(thirdHotspots)).toBeDefined();
        expect(small!.significant).toBe(false);
        const changes = (third.summary as { changes: { transitions: { kind: string; to: { hotspot_id: number; significant?: boolean }[] }[] } }).changes;
        const emergence = changes.transitions.find((t) => t.kind === 'emergence' && t.to[0]!.hotspot_id === small!.hotspot_id);
        expect(emergence).toBeDefined();
        expect(emergence!.to[0]!.significant).toBe(false);
        for (const t of changes.transitions) for (const e of t.to) expect(e.significant).toBe(thirdHotspots.find((h) => h.hotspot_id === e.hotspot_id)!.significant);
      } finally {
        await hooks.close();
        await dispose();
      }
    });

    it('split off effort points marked by a property, cluster only the cases and test against random labelling', async () => {
      const { store, dispose } = await open();
      const hooks = createRoostHooks();
      try {
        const settings = { eps: 120, min_points: 5, null_model: 'effort', effort_where: 'kind=visit', simulations: 19, seed: 3 };
        await store.createDataset({ id: 'effort', name: 'Effort', settings, idProperty: null, window: null, schedule: null, webhook: null });
        const visits = background(300, 5000, 'v-', { kind: 'visit' });
        const cases = PLANTED.map((r) => record(r.id, r.lon, r.lat, { kind: 'case' }));
        await store.ingest('effort', [...visits, ...cases], KEEP);
        const run = await succeeded(store, hooks, 'effort');
        const summary = run.summary as { input: Record<string, unknown>; figures: { observations: number }; chance: { effort: Record<string, unknown> }; hotspots: HotspotFigures[] };
        expect(summary.figures.observations).toBe(36);
        expect(summary.input.effort_points).toBe(300);
        expect(summary.chance.effort).toEqual({ source: 'property marker', cases: 36, effort_points: 300 });
        // every case is in the one planted hotspot; 36 cases drawn from 336 places never gather so
        expect(summary.hotspots).toHaveLength(1);
        expect(summary.hotspots[0]!.p_value).toBe(0.05);
        const points = JSON.parse((await store.getRunLayer(run.id, 'points'))!) as { features: { id: string }[] };
        expect(points.features.map((f) => f.id).sort()).toEqual(PLANTED.map((r) => r.id).sort());
        const members = (await store.getRunHotspots(run.id))[0]!.members;
        expect([...members].sort()).toEqual(PLANTED.map((r) => r.id).sort());
      } finally {
        await hooks.close();
        await dispose();
      }
    });
  });
}

suite('SQLite', tempStore);

const pgSkip = await postgresSkipReason();
suite('PostgreSQL', () => tempPostgresStore('roost_test_trust'), pgSkip);

describe('dataset p-value and stability settings over HTTP', () => {
  let app: FastifyInstance;
  beforeAll(async () => {
    app = await testApp();
  });
  afterAll(async () => {
    await app.close();
  });
  const asGeoJson = (records: ObservationRecord[]): string => `{"type":"FeatureCollection","features":[${records.map((r) => r.feature).join(',')}]}`;

  async function finished(location: string): Promise<Record<string, unknown>> {
    let doc: Record<string, unknown> = {};
    for (let i = 0; i < 1200; i++) {
      doc = (await app.inject({ method: 'GET', url: location })).json() as Record<string, unknown>;
      if (doc.status === 'succeeded' || doc.status === 'failed') return doc;
      await new Promise((r) => setTimeout(r, 50));
    }
    return doc;
  }

  it('refuses a bad trust setting in a dataset, naming it, in the validator\'s words', async () => {
    for (const [settings, parameter, words] of [
      [{ eps: 120, simulations: -1 }, 'settings.simulations', /whole number from 0 to 9999/],
      [{ eps: 120, null_model: 'poisson' }, 'settings.null_model', /csr or effort/],
      [{ eps: 120, null_model: 'effort' }, 'settings.null_model', /effort needs effort points/],
      [{ eps: 120, resample_share: 1 }, 'settings.resample_share', /above 0 and below 1/],
    ] as const) {
      const res = await app.inject({ method: 'POST', url: '/v1/datasets', headers: JSON_TYPE, payload: JSON.stringify({ id: 'refused', settings }) });
      expect(res.statusCode, res.body).toBe(400);
      expect(res.json()).toMatchObject({ code: 'invalid-parameter', parameter });
      expect(res.json().detail).toMatch(words);
    }
  });

  it('runs with the dataset\'s settings (and a run\'s overrides), and the changes name the significance of the hotspots they end in', async () => {
    const created = await app.inject({ method: 'POST', url: '/v1/datasets', headers: JSON_TYPE, payload: JSON.stringify({ id: 'nightly', settings: SETTINGS }) });
    expect(created.statusCode, created.body).toBe(201);
    await app.inject({ method: 'POST', url: '/v1/datasets/nightly/observations', headers: GEO, payload: asGeoJson([...background(400, 5000, 'bg-'), ...PLANTED]) });
    const first = await finished((await app.inject({ method: 'POST', url: '/v1/datasets/nightly/runs' })).headers.location as string);
    expect(first.status, String(first.error)).toBe('succeeded');
    expect((first.summary as { chance: { simulations: number } }).chance.simulations).toBe(19);
    const firstHotspots = (first.summary as { hotspots: HotspotFigures[] }).hotspots;
    // a run's query string overrides the dataset's settings: another seed, fewer simulations
    await app.inject({ method: 'POST', url: '/v1/datasets/nightly/observations', headers: GEO, payload: asGeoJson(SMALL) });
    const start = await app.inject({ method: 'POST', url: '/v1/datasets/nightly/runs?simulations=9&seed=11&resamples=0' });
    expect(start.statusCode, start.body).toBe(202);
    const second = await finished(start.headers.location as string);
    expect(second.status, String(second.error)).toBe('succeeded');
    expectMatchesSpec(await app.inject({ method: 'GET', url: start.headers.location as string }), '/v1/datasets/{id}/runs/{run}', 'GET');
    const summary = second.summary as { chance: Record<string, unknown>; stability?: unknown; hotspots: (HotspotFigures & { medoid_id: string })[] };
    expect(summary.chance).toMatchObject({ simulations: 9, seed: 11, smallest_possible_p: 0.1 });
    expect(summary.stability).toBeUndefined();
    // with 9 simulations no p-value can reach 0.05: nothing is significant
    expect(summary.hotspots.every((h) => h.significant === false)).toBe(true);
    expect(firstHotspots.some((h) => h.significant)).toBe(true);

    const changes = await app.inject({ method: 'GET', url: '/v1/datasets/nightly/changes' });
    expect(changes.statusCode, changes.body).toBe(200);
    expectMatchesSpec(changes, '/v1/datasets/{id}/changes', 'GET');
    const doc = changes.json() as { transitions: { kind: string; from: Record<string, unknown>[]; to: Record<string, unknown>[] }[] };
    const small = summary.hotspots.find((h) => h.medoid_id.startsWith('small-'))!;
    const emergence = doc.transitions.find((t) => t.kind === 'emergence' && t.to[0]!.hotspot_id === small.hotspot_id);
    expect(emergence?.to[0]).toMatchObject({ significant: false, p_value: small.p_value });
    for (const t of doc.transitions) {
      for (const e of t.from) expect(e.significant).toBe(firstHotspots.find((h) => h.hotspot_id === e.hotspot_id)!.significant);
      for (const e of t.to) expect(e.significant).toBe(false);
    }
    const geo = await app.inject({ method: 'GET', url: '/v1/datasets/nightly/changes?format=geojson' });
    const features = (geo.json() as { features: { properties: Record<string, unknown> }[] }).features;
    expect(features.find((f) => f.properties.transition === 'emergence' && f.properties.hotspot_id === small.hotspot_id)?.properties.significant).toBe(false);
  });
});
