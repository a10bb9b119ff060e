/**
 * Scripted nights over the real store and run executor: a hotspot appears, one grows, one splits,
 * two merge, one fades; then the same data again. Each night is one stored run; the transitions
 * in each run's summary and the track ids on the stored hotspots are checked.
 *
 * Layout (eps 120 m, min_points 4, points 20 m apart in grids, groups kilometres apart):
 * - B: B1 (4×3) – a bridge of 7 points 40 m apart – B2 (3×3); the bridge is retracted on night 3.
 * - C (3×3) and D (4×4) 400 m apart; a bridge joins them on night 4.
 * - E (3×3) is retracted on night 5.
 * - A (3×3) is posted on night 2; B2 grows by 4 points the same night.
 */
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { createRoostHooks } from '../../src/jobs/run-hooks.js';
import type { ChangesJson, TransitionJson } from '../../src/jobs/tracking.js';
import type { ObservationRecord, Run, RunHotspot, Store } from '../../src/storage/store.js';
import { DATASET, grid, layerFeatures, runOnce, tempStore } from './helpers.js';

const ORIGIN: [number, number] = [10.0, 50.0];
const KEEP = { replace: false, partial: false };

/** Groups: 2 km apart east–west. */
const B1 = grid('B1', ORIGIN, 0, 0, 4, 3);
const bridgeB = Array.from({ length: 7 }, (_, k) => grid(`Bb${k}`, ORIGIN, 100 + 40 * k, 20, 1, 1)[0]!);
const B2 = grid('B2', ORIGIN, 380, 0, 3, 3);
const B2grow = grid('B2g', ORIGIN, 440, 0, 1, 4);
const C = grid('C', ORIGIN, 2000, 0, 3, 3);
const D = grid('D', ORIGIN, 2440, 0, 4, 4);
const bridgeCD = Array.from({ length: 9 }, (_, k) => grid(`CDb${k}`, ORIGIN, 2040 + 40 * k, 20, 1, 1)[0]!);
const E = grid('E', ORIGIN, 4000, 0, 3, 3);
const A = grid('A', ORIGIN, 6000, 0, 3, 3);

describe('nightly re-clustering keeps hotspot identity', () => {
  let store: Store;
  let dispose: () => Promise<void>;
  const hooks = createRoostHooks();
  const runs: Run[] = [];
  const spots: RunHotspot[][] = [];

  /** The hotspot of night `n` (1-based) holding observation `obsId`. */
  const holding = (n: number, obsId: string): RunHotspot => {
    const h = spots[n - 1]!.find((x) => x.members.includes(obsId));
    if (!h) throw new Error(`no hotspot holds ${obsId} on night ${n}`);
    return h;
  };
  const changes = (n: number): ChangesJson => runs[n - 1]!.summary!['changes'] as ChangesJson;
  const ofKind = (n: number, kind: TransitionJson['kind']): TransitionJson[] => changes(n).transitions.filter((t) => t.kind === kind);

  const night = async (post: ObservationRecord[], retract: ObservationRecord[] = []): Promise<void> => {
    if (post.length > 0) expect((await store.ingest(DATASET.id, post, KEEP)).stored).toBe(true);
    for (const r of retract) expect(await store.deleteObservation(DATASET.id, r.id)).toBe(true);
    const run = await runOnce(store, DATASET.id, hooks);
    expect(run.status, run.error ?? '').toBe('succeeded');
    runs.push(run);
    spots.push(await store.getRunHotspots(run.id));
  };

  beforeAll(async () => {
    ({ store, dispose } = await tempStore());
    await store.createDataset(DATASET);
    await night([...B1, ...bridgeB, ...B2, ...C, ...D, ...E]);
    await night([...A, ...B2grow]);
    await night([], bridgeB);
    await night(bridgeCD);
    await night([], E);
    await night([]);
  });
  afterAll(async () => {
    await hooks.close();
    await dispose();
  });

  it('night 1: every hotspot starts a track, nothing to compare with', () => {
    expect(spots[0]).toHaveLength(4);
    expect(spots[0]!.map((h) => h.trackId)).toEqual(['t000001', 't000002', 't000003', 't000004']);
    expect(runs[0]!.summary!['changes']).toBeNull();
  });

  it('night 2: A appears with a new track; B grows and keeps its track', () => {
    expect(changes(2).previous_run).toBe(runs[0]!.id);
    expect(changes(2).counts).toEqual({ emergence: 1, survival: 4, split: 0, absorption: 0, disappearance: 0 });
    const a = holding(2, 'A-0');
    expect(a.trackId).toBe('t000005');
    expect(ofKind(2, 'emergence')[0]!.to).toEqual([{ hotspot_id: a.hotspotId, track_id: 't000005' }]);
    const b = holding(2, 'B1-0');
    expect(b.trackId).toBe(holding(1, 'B1-0').trackId);
    const grew = ofKind(2, 'survival').find((t) => t.to[0]!.track_id === b.trackId)!;
    expect(grew.change!.count_delta).toBe(4);
    expect(grew.overlap).toEqual([1]); // every old member is still in B
    expect(grew.change!.area_delta_km2).toBeGreaterThan(0);
    expect(grew.change!.moved_m).toBeGreaterThan(0);
    // C, D and E did not change at all
    for (const id of ['C-0', 'D-0', 'E-0']) {
      const t = ofKind(2, 'survival').find((s) => s.to[0]!.track_id === holding(2, id).trackId)!;
      expect(t.change).toEqual({ count_delta: 0, count_ratio: 1, area_delta_km2: 0, density_ratio: 1, moved_m: 0 });
    }
  });

  it('night 3: B splits once its bridge is retracted; the larger part keeps the track', () => {
    expect(changes(3).counts).toEqual({ emergence: 0, survival: 4, split: 1, absorption: 0, disappearance: 0 });
    const split = ofKind(3, 'split')[0]!;
    const oldB = holding(2, 'B1-0');
    expect(split.from).toEqual([{ hotspot_id: oldB.hotspotId, track_id: oldB.trackId }]);
    const b1 = holding(3, 'B1-0');
    const b2 = holding(3, 'B2-0');
    expect(b1.hotspotId).not.toBe(b2.hotspotId);
    expect(split.to.map((e) => e.hotspot_id).sort()).toEqual([b1.hotspotId, b2.hotspotId].sort());
    // B had 12 + 7 + 13 = 32 members; B2 with its growth holds 13, B1 12: B2 continues B's track
    expect(b2.trackId).toBe(oldB.trackId);
    expect(b1.trackId).toBe('t000006');
    expect(split.covered).toBeCloseTo(25 / 32, 6);
  });

  it('night 4: C and D merge; the one giving more members (D) carries on, C ends', () => {
    expect(changes(4).counts).toEqual({ emergence: 0, survival: 4, split: 0, absorption: 1, disappearance: 0 });
    const absorption = ofKind(4, 'absorption')[0]!;
    const c = holding(3, 'C-0');
    const d = holding(3, 'D-0');
    expect(absorption.from.map((e) => e.track_id).sort()).toEqual([c.trackId, d.trackId].sort());
    const cd = holding(4, 'C-0');
    expect(holding(4, 'D-0').hotspotId).toBe(cd.hotspotId);
    expect(cd.trackId).toBe(d.trackId);
    expect(absorption.overlap).toEqual([1, 1]);
  });

  it('night 5: E fades away; its track ends and no other hotspot takes it', () => {
    expect(changes(5).counts).toEqual({ emergence: 0, survival: 4, split: 0, absorption: 0, disappearance: 1 });
    const gone = ofKind(5, 'disappearance')[0]!;
    expect(gone.from[0]!.track_id).toBe(holding(4, 'E-0').trackId);
    expect(gone.to).toEqual([]);
    expect(spots[4]!.map((h) => h.trackId)).not.toContain(holding(4, 'E-0').trackId);
  });

  it('the same data run again: the same tracks and only survivals with zero change', () => {
    expect(spots[5]!.map((h) => [h.hotspotId, h.trackId])).toEqual(spots[4]!.map((h) => [h.hotspotId, h.trackId]));
    expect(changes(6).counts).toEqual({ emergence: 0, survival: 4, split: 0, absorption: 0, disappearance: 0 });
    for (const t of changes(6).transitions) {
      expect(t.from[0]!.track_id).toBe(t.to[0]!.track_id);
      expect(t.change).toEqual({ count_delta: 0, count_ratio: 1, area_delta_km2: 0, density_ratio: 1, moved_m: 0 });
    }
  });

  it('a track id is never given to two tracks across all nights', () => {
    // a track holds one hotspot per run and, once ended, never comes back
    const lastSeen = new Map<string, number>();
    const firstSeen = new Map<string, number>();
    spots.forEach((hs, n) => {
      const ids = hs.map((h) => h.trackId!);
      expect(new Set(ids).size).toBe(ids.length);
      for (const id of ids) {
        if (!firstSeen.has(id)) firstSeen.set(id, n);
        lastSeen.set(id, n);
      }
    });
    for (const [id, first] of firstSeen) {
      for (let n = first; n <= lastSeen.get(id)!; n++) expect(spots[n]!.map((h) => h.trackId)).toContain(id);
    }
    expect([...firstSeen.keys()].sort()).toEqual(['t000001', 't000002', 't000003', 't000004', 't000005', 't000006']);
  });

  it('track_id is on every hotspot and centre feature of every stored run, matching the stored hotspots', async () => {
    for (let n = 0; n < runs.length; n++) {
      const byHotspot = new Map(spots[n]!.map((h) => [h.hotspotId, h.trackId]));
      for (const layer of ['hotspots', 'centres'] as const) {
        const features = await layerFeatures(store, runs[n]!.id, layer);
        expect(features).toHaveLength(spots[n]!.length);
        for (const f of features) {
          expect(typeof f.properties['track_id']).toBe('string');
          expect(f.properties['track_id']).toBe(byHotspot.get(f.properties['hotspot_id'] as number));
        }
      }
    }
  });

  it('the track history lists one hotspot per run, oldest first', async () => {
    const d = holding(1, 'D-0').trackId!;
    const history = await store.getTrack(DATASET.id, d);
    expect(history.map((p) => p.runId)).toEqual(runs.map((r) => r.id));
    expect(history.map((p) => p.memberCount)).toEqual([16, 16, 16, 9 + 16 + 9, 34, 34]);
  });
});
