/**
 * Scripted nights of one survey season. Transition rules: MONIC (Spiliopoulou, Ntoutsi, Theodoridis,
 * Schult, KDD 2006) with overlap(X, Y) = |X ∩ Y| / |X|; the scenarios themselves are our own.
 */
import { describe, expect, it } from 'vitest';
import geodesic from 'geographiclib-geodesic';
import { EARTH_RADIUS_M } from '../../src/core/haversine.js';
import { matchRuns, type RunHotspot, type MatchResult } from '../../src/tracks/match.js';
import { carry, ids, kinds, rectKm2, spot, trackOf } from './build.js';

/** Great-circle distance on the sphere of radius R. source: GeographicLib geodesic inverse with flattening 0 */
const SPHERE = new geodesic.Geodesic.Geodesic(EARTH_RADIUS_M, 0);
const sphereMeters = (a: readonly number[], b: readonly number[]): number => SPHERE.Inverse(a[1], a[0], b[1], b[0]).s12 ?? NaN;

describe('a season of nights', () => {
  // Night 1: hotspot A appears.
  const night1: RunHotspot[] = [spot(1, ids('a', 1, 10), [10.0, 50.0, 10.02, 50.01])];
  // Night 2: A grows (5 more sightings, larger outline); B appears far to the east.
  const night2: RunHotspot[] = [
    spot(1, ids('a', 1, 15), [10.0, 50.0, 10.03, 50.012]),
    spot(2, ids('b', 1, 8), [10.2, 50.0, 10.21, 50.01]),
  ];
  // Night 3: A splits into A1 (7 of its 15) and A2 (6 of 15), 2 sightings become noise; B stays as is.
  const night3: RunHotspot[] = [
    spot(1, ids('a', 1, 7), [10.0, 50.0, 10.014, 50.012]),
    spot(2, ids('a', 8, 13), [10.016, 50.0, 10.03, 50.012]),
    spot(3, ids('b', 1, 8), [10.2, 50.0, 10.21, 50.01]),
  ];
  // Night 4: A2 and B merge into one hotspot with 3 new sightings; A1's sightings no longer gather (it fades).
  const night4: RunHotspot[] = [
    spot(1, [...ids('a', 8, 13), ...ids('b', 1, 8), ...ids('c', 1, 3)], [10.016, 50.0, 10.21, 50.012]),
  ];

  const r1 = matchRuns([], night1);
  const r2 = matchRuns(carry(night1, r1), night2);
  const r3 = matchRuns(carry(night2, r2), night3);
  const r4 = matchRuns(carry(night3, r3), night4);

  it('night 1: a hotspot appears (emergence) and gets the first track', () => {
    expect(r1.transitions).toEqual([{ kind: 'emergence', from: [], to: [{ hotspotId: 1, trackId: 't000001' }], overlap: [], basis: 'members' }]);
    expect(r1.tracks).toEqual([{ hotspotId: 1, trackId: 't000001' }]);
    expect(r1.memberShare).toBeNull();
  });

  it('night 2: A persists and grows (survival with its change), B appears', () => {
    expect(kinds(r2)).toEqual(['survival', 'emergence']);
    const survival = r2.transitions[0];
    expect(survival.from).toEqual([{ hotspotId: 1, trackId: 't000001' }]);
    expect(survival.to).toEqual([{ hotspotId: 1, trackId: 't000001' }]);
    expect(survival.overlap).toEqual([1]); // all 10 old members are in the new hotspot
    expect(survival.basis).toBe('members');
    const oldKm2 = rectKm2(10.0, 50.0, 10.02, 50.01);
    const newKm2 = rectKm2(10.0, 50.0, 10.03, 50.012);
    const change = survival.change!;
    expect(change.countDelta).toBe(5);
    expect(change.countRatio).toBe(1.5);
    expect(change.areaDeltaKm2).toBeCloseTo(newKm2 - oldKm2, 9);
    expect(change.areaDeltaKm2).toBeGreaterThan(0);
    expect(change.densityRatio).toBeCloseTo((15 / newKm2) / (10 / oldKm2), 12);
    expect(change.movedMeters).toBeCloseTo(sphereMeters([10.01, 50.005], [10.015, 50.006]), 6);
    expect(r2.transitions[1].to).toEqual([{ hotspotId: 2, trackId: 't000002' }]);
    expect(r2.memberShare).toBe(1);
  });

  it('night 3: A splits, the larger part keeps its track; B survives unchanged', () => {
    expect(kinds(r3)).toEqual(['split', 'survival']);
    const split = r3.transitions[0];
    expect(split.from).toEqual([{ hotspotId: 1, trackId: 't000001' }]);
    expect(split.to).toEqual([{ hotspotId: 1, trackId: 't000001' }, { hotspotId: 2, trackId: 't000003' }]);
    expect(split.overlap).toEqual([7 / 15, 6 / 15]);
    expect(split.covered).toBe(13 / 15);
    expect(split.basis).toBe('members');
    const b = r3.transitions[1];
    expect(b.to).toEqual([{ hotspotId: 3, trackId: 't000002' }]);
    expect(b.change).toEqual({ countDelta: 0, countRatio: 1, areaDeltaKm2: 0, densityRatio: 1, movedMeters: 0 });
  });

  it('night 4: two merge (absorption, the larger contributor continues) and one fades (disappearance)', () => {
    expect(kinds(r4)).toEqual(['disappearance', 'absorption']);
    // A1 shares no member with the new run, so its hull was compared instead: it overlaps nothing.
    expect(r4.transitions[0]).toEqual({ kind: 'disappearance', from: [{ hotspotId: 1, trackId: 't000001' }], to: [], overlap: [], basis: 'hull' });
    const merge = r4.transitions[1];
    expect(merge.from).toEqual([{ hotspotId: 2, trackId: 't000003' }, { hotspotId: 3, trackId: 't000002' }]);
    expect(merge.overlap).toEqual([1, 1]);
    // B brought 8 members, A2 brought 6: B's track goes on, A2's ends.
    expect(merge.to).toEqual([{ hotspotId: 1, trackId: 't000002' }]);
    expect(merge.basis).toBe('members');
    expect(r4.tracks).toEqual([{ hotspotId: 1, trackId: 't000002' }]);
    expect(r4.memberShare).toBe(14 / 21);
  });

  it('the same run twice gives only survivals with zero change and the same tracks', () => {
    const runs: [RunHotspot[], MatchResult][] = [[night2, r2], [night3, r3], [night4, r4]];
    for (const [night, result] of runs) {
      const prev = carry(night, result);
      const again = matchRuns(prev, night);
      expect(again.tracks).toEqual(result.tracks);
      expect(again.transitions.every((t) => t.kind === 'survival')).toBe(true);
      expect(again.transitions).toHaveLength(night.length);
      for (const t of again.transitions) {
        expect(t.overlap).toEqual([1]);
        expect(t.from[0].trackId).toBe(t.to[0].trackId);
        expect(t.change).toEqual({ countDelta: 0, countRatio: 1, areaDeltaKm2: 0, densityRatio: 1, movedMeters: 0 });
      }
    }
  });

  it('a split part already continuing another track leaves the splitting track to its next part', () => {
    // X1 (15 members) splits 7/6; X2's members all go into the 7-part Y1, so Y1 continues X2.
    const prev = [
      spot(1, ids('a', 1, 15), [10.0, 50.0, 10.03, 50.012], 'tA'),
      spot(2, ids('d', 1, 10), [10.0, 50.02, 10.01, 50.03], 'tD'),
    ];
    const cur = [
      spot(1, [...ids('a', 1, 7), ...ids('d', 1, 10)], [10.0, 50.0, 10.014, 50.03]),
      spot(2, ids('a', 8, 13), [10.016, 50.0, 10.03, 50.012]),
    ];
    const r = matchRuns(prev, cur, {}, (seq) => `n${seq}`);
    expect(kinds(r)).toEqual(['split', 'survival']);
    expect(r.transitions[0].to).toEqual([{ hotspotId: 1, trackId: 'tD' }, { hotspotId: 2, trackId: 'tA' }]);
    expect(r.transitions[1].from).toEqual([{ hotspotId: 2, trackId: 'tD' }]);
    expect(r.tracks).toEqual([{ hotspotId: 1, trackId: 'tD' }, { hotspotId: 2, trackId: 'tA' }]);
  });

  it('absorption ties go to the lower old hotspot id', () => {
    const prev = [
      spot(1, ids('a', 1, 4), [10.0, 50.0, 10.01, 50.01], 'tA'),
      spot(2, ids('b', 1, 4), [10.02, 50.0, 10.03, 50.01], 'tB'),
    ];
    const cur = [spot(1, [...ids('b', 1, 4), ...ids('a', 1, 4)], [10.0, 50.0, 10.03, 50.01])];
    const r = matchRuns(prev, cur);
    expect(kinds(r)).toEqual(['absorption']);
    expect(trackOf(r, 1)).toBe('tA');
  });
});
