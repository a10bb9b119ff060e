/**
 * Track assignment against stored runs: ids never reused, the previous successful run as the
 * reference, first runs, hull overlap when observation ids change, and comparing any two runs.
 */
import { afterEach, beforeEach, describe, expect, it } from 'vitest';
import { createRoostHooks, type RoostHooks } from '../../src/jobs/run-hooks.js';
import { compareStoredRuns, type ChangesJson } from '../../src/jobs/tracking.js';
import type { Store } from '../../src/storage/store.js';
import { DATASET, grid, runOnce, tempStore } from './helpers.js';

const ORIGIN: [number, number] = [-3.2, 55.95];
const KEEP = { replace: false, partial: false };
const X = grid('X', ORIGIN, 0, 0, 3, 3);
const Y = grid('Y', ORIGIN, 3000, 0, 3, 4);
const Z = grid('Z', ORIGIN, 6000, 0, 4, 3);

describe('track assignment on stored runs', () => {
  let store: Store;
  let dispose: () => Promise<void>;
  let hooks: RoostHooks;
  beforeEach(async () => {
    ({ store, dispose } = await tempStore());
    await store.createDataset(DATASET);
    hooks = createRoostHooks();
  });
  afterEach(async () => {
    await hooks.close();
    await dispose();
  });
  const tracks = async (runId: string): Promise<(string | null)[]> => (await store.getRunHotspots(runId)).map((h) => h.trackId);
  const changes = (run: { summary: Record<string, unknown> | null }): ChangesJson => run.summary!['changes'] as ChangesJson;

  it('never gives an ended track id to a new track, even when the previous run no longer shows it', async () => {
    await store.ingest(DATASET.id, [...X, ...Y], KEEP);
    const r1 = await runOnce(store, DATASET.id, hooks);
    expect(await tracks(r1.id)).toEqual(['t000001', 't000002']);
    for (const r of Y) await store.deleteObservation(DATASET.id, r.id);
    const r2 = await runOnce(store, DATASET.id, hooks);
    expect(await tracks(r2.id)).toEqual(['t000001']);
    expect(changes(r2).counts.disappearance).toBe(1);
    await store.ingest(DATASET.id, Z, KEEP);
    const r3 = await runOnce(store, DATASET.id, hooks);
    // the previous run's largest id is t000001, but t000002 was Y's: Z gets t000003
    expect(await tracks(r3.id)).toEqual(['t000001', 't000003']);
  });

  it('compares with the newest succeeded run created before, skipping failed ones', async () => {
    await store.ingest(DATASET.id, X, KEEP);
    const r1 = await runOnce(store, DATASET.id, hooks);
    const bad = await runOnce(store, DATASET.id, hooks, { eps: 120, min_points: 4, where: 'species=none' });
    expect(bad.status).toBe('failed'); // nothing matches the condition
    const r3 = await runOnce(store, DATASET.id, hooks);
    expect(changes(r3).previous_run).toBe(r1.id);
    expect(await tracks(r3.id)).toEqual(await tracks(r1.id));
  });

  it('a previous run stored without track ids counts as none: new tracks, no changes', async () => {
    await store.ingest(DATASET.id, X, KEEP);
    const r1 = await runOnce(store, DATASET.id, hooks);
    const stored = await store.getRunHotspots(r1.id);
    const layers = Object.fromEntries(await Promise.all((['hotspots', 'centres', 'noise', 'points'] as const).map(async (l) => [l, (await store.getRunLayer(r1.id, l))!])));
    await store.saveRunResult(r1.id, { layers: layers as never, hotspots: stored.map((h) => ({ ...h, trackId: null })) });
    const r2 = await runOnce(store, DATASET.id, hooks);
    expect(r2.summary!['changes']).toBeNull();
    expect(await tracks(r2.id)).toEqual(['t000002']);
  });

  it('when every observation id changed (a sliding window), hull overlap keeps the track', async () => {
    await store.ingest(DATASET.id, X, KEEP);
    const r1 = await runOnce(store, DATASET.id, hooks);
    for (const r of X) await store.deleteObservation(DATASET.id, r.id);
    await store.ingest(DATASET.id, grid('X2', ORIGIN, 0, 0, 3, 3), KEEP);
    const r2 = await runOnce(store, DATASET.id, hooks);
    const c = changes(r2);
    expect(c.member_share).toBe(0);
    expect(c.transitions).toHaveLength(1);
    expect(c.transitions[0]).toMatchObject({ kind: 'survival', basis: 'hull', from: [{ track_id: 't000001' }], to: [{ track_id: 't000001' }] });
    expect(c.transitions[0]!.overlap[0]).toBeCloseTo(1, 6);
    expect(c.transitions[0]!.change!.moved_m).toBe(0);
    expect(await tracks(r2.id)).toEqual(['t000001']);
  });

  it('compares any two stored runs with the track ids they were stored with', async () => {
    await store.ingest(DATASET.id, [...X, ...Y], KEEP);
    const r1 = await runOnce(store, DATASET.id, hooks);
    for (const r of Y) await store.deleteObservation(DATASET.id, r.id);
    await runOnce(store, DATASET.id, hooks);
    await store.ingest(DATASET.id, Z, KEEP);
    const r3 = await runOnce(store, DATASET.id, hooks);
    const c = await compareStoredRuns(store, r1.id, r3.id);
    expect(c.counts).toEqual({ emergence: 1, survival: 1, split: 0, absorption: 0, disappearance: 1 });
    expect(c.transitions.find((t) => t.kind === 'emergence')!.to).toEqual([{ hotspot_id: 2, track_id: 't000003' }]);
    expect(c.transitions.find((t) => t.kind === 'disappearance')!.from).toEqual([{ hotspot_id: 2, track_id: 't000002' }]);
    // the default pair gives what the later run recorded
    const r2 = (await store.latestRun(DATASET.id, 'succeeded', r3.id))!;
    const again = await compareStoredRuns(store, r2.id, r3.id);
    expect({ counts: again.counts, member_share: again.memberShare, transitions: again.transitions }).toEqual({
      counts: changes(r3).counts,
      member_share: changes(r3).member_share,
      transitions: changes(r3).transitions,
    });
  });

  it('uses the given thresholds: with τ above the share kept (and no shrink rule), a shrunken hotspot ends and a new track starts', async () => {
    const strict = createRoostHooks({ trackSettings: { survivalThreshold: 0.9, splitThreshold: 0.5, shrinkSurvival: false } });
    await store.ingest(DATASET.id, Y, KEEP); // 12 points
    await runOnce(store, DATASET.id, strict);
    for (const r of Y.slice(8)) await store.deleteObservation(DATASET.id, r.id); // 8 of 12 stay: overlap 0.67
    const r2 = await runOnce(store, DATASET.id, strict);
    expect(changes(r2).counts).toEqual({ emergence: 1, survival: 0, split: 0, absorption: 0, disappearance: 1 });
    expect(await tracks(r2.id)).toEqual(['t000002']);
    await strict.close();
  });

  it('a hotspot that lost most of its members keeps its track when its remains gather in its place: a survival with a shrink', async () => {
    await store.ingest(DATASET.id, [...X, ...Y], KEEP); // 9 and 12 points
    const r1 = await runOnce(store, DATASET.id, hooks);
    expect(await tracks(r1.id)).toEqual(['t000001', 't000002']);
    // 9 of Y's 12 retracted; its first column (3 points) stays and 2 new sightings join it in Y's outline
    for (const r of Y.slice(3)) await store.deleteObservation(DATASET.id, r.id);
    await store.ingest(DATASET.id, grid('N', ORIGIN, 3010, 10, 1, 2), KEEP);
    const r2 = await runOnce(store, DATASET.id, hooks);
    const c = changes(r2);
    expect(c.member_share).toBeCloseTo(12 / 21, 6); // members judge the run
    expect(c.counts).toEqual({ emergence: 0, survival: 2, split: 0, absorption: 0, disappearance: 0 });
    const shrunk = c.transitions.find((t) => t.from[0]?.track_id === 't000002')!;
    expect(shrunk).toMatchObject({ kind: 'survival', shrink: true, overlap: [0.25], basis: 'members', to: [{ track_id: 't000002' }] });
    expect(shrunk.change!.count_delta).toBe(-7);
    expect(await tracks(r2.id)).toEqual(['t000001', 't000002']);
    // the changes between the two stored runs say the same
    const again = await compareStoredRuns(store, r1.id, r2.id);
    expect(again.transitions).toEqual(c.transitions);
  });
});
