/**
 * Thresholds at their boundaries, the hull fallback, track ids, input order and bad input.
 * Transition rules: MONIC (Spiliopoulou et al., KDD 2006), overlap(X, Y) = |X ∩ Y| / |X| without
 * ageing weights; the cases are our own.
 */
import { describe, expect, it } from 'vitest';
import { DEFAULT_TRACK_SETTINGS, formatTrackId, matchRuns, trackIdsAfter, type RunHotspot } from '../../src/tracks/match.js';
import { rng } from '../reference/seeded.js';
import { ids, kinds, spot, trackOf } from './build.js';

const RAD = Math.PI / 180;
const BOX_A: [number, number, number, number] = [10.0, 50.0, 10.02, 50.01];
const far = (k: number): [number, number, number, number] => [20 + k, 40, 20.01 + k, 40.01];

describe('thresholds at their boundaries', () => {
  it('an overlap of exactly τ survives; just below it the hotspot disappears and the new one emerges', () => {
    const prev = [spot(1, ids('a', 1, 10), BOX_A, 'tA')];
    const at = matchRuns(prev, [spot(1, ids('a', 1, 5), BOX_A)]);
    expect(kinds(at)).toEqual(['survival']);
    expect(at.transitions[0].overlap).toEqual([0.5]);
    expect(trackOf(at, 1)).toBe('tA');
    // Members only: 4 of 10 is below τ (without the shrink rule, which would keep the track of a
    // smaller hotspot in the same place; see 'a survival with a shrink' below).
    const below = matchRuns(prev, [spot(1, ids('a', 1, 4), BOX_A)], { hullOverlapFallback: false, shrinkSurvival: false });
    expect(kinds(below)).toEqual(['disappearance', 'emergence']);
    expect(trackOf(below, 1)).not.toBe('tA');
    // With the defaults, 4 of 10 is also the whole run's member share (0.4 < 0.5): the hulls decide,
    // and the same outline survives.
    const byHull = matchRuns(prev, [spot(1, ids('a', 1, 4), BOX_A)]);
    expect(kinds(byHull)).toEqual(['survival']);
    expect(byHull.transitions[0].basis).toBe('hull');
  });

  it('a custom τ = 0.3 is met by 3 of 10 members', () => {
    const prev = [spot(1, ids('a', 1, 10), BOX_A, 'tA')];
    const settings = { survivalThreshold: 0.3, splitThreshold: 0.1, hullOverlapFallback: false, shrinkSurvival: false };
    expect(kinds(matchRuns(prev, [spot(1, ids('a', 1, 3), BOX_A)], settings))).toEqual(['survival']);
    expect(kinds(matchRuns(prev, [spot(1, ids('a', 1, 2), BOX_A)], settings))).toEqual(['disappearance', 'emergence']);
  });

  it('parts of exactly τ_split covering exactly τ make a split; a part below τ_split does not count', () => {
    const prev = [spot(1, ids('a', 1, 8), BOX_A, 'tA')];
    const split = matchRuns(prev, [spot(1, ids('a', 1, 2), far(0)), spot(2, ids('a', 3, 4), far(1))]);
    expect(kinds(split)).toEqual(['split']);
    expect(split.transitions[0].overlap).toEqual([0.25, 0.25]);
    expect(split.transitions[0].covered).toBe(0.5);
    // Equal parts: the lower new hotspot id continues the track.
    expect(split.tracks).toEqual([{ hotspotId: 1, trackId: 'tA' }, { hotspotId: 2, trackId: 't000001' }]);

    const crumbs = matchRuns(prev, [spot(1, ids('a', 1, 2), far(0)), spot(2, ['a3'], far(1)), spot(3, ['a4'], far(2))]);
    expect(kinds(crumbs)).toEqual(['disappearance', 'emergence', 'emergence', 'emergence']);
  });

  it('parts that together cover less than τ are no split', () => {
    const prev = [spot(1, ids('a', 1, 10), BOX_A, 'tA')];
    const settings = { survivalThreshold: 0.6, splitThreshold: 0.25 };
    expect(kinds(matchRuns(prev, [spot(1, ids('a', 1, 3), far(0)), spot(2, ids('a', 4, 5), far(1))], settings)))
      .toEqual(['disappearance', 'emergence', 'emergence']);
    expect(kinds(matchRuns(prev, [spot(1, ids('a', 1, 3), far(0)), spot(2, ids('a', 4, 6), far(1))], settings)))
      .toEqual(['split']);
  });

  it('two halves of exactly τ each: no single match, so a split', () => {
    const prev = [spot(1, ids('a', 1, 10), BOX_A, 'tA')];
    const r = matchRuns(prev, [spot(1, ids('a', 6, 10), far(0)), spot(2, ids('a', 1, 5), far(1))]);
    expect(kinds(r)).toEqual(['split']);
    expect(r.transitions[0].overlap).toEqual([0.5, 0.5]);
    expect(trackOf(r, 1)).toBe('tA');
  });

  it('two hotspots each with exactly τ of their members in one new hotspot are absorbed; the larger contributor continues', () => {
    const prev = [spot(1, ids('a', 1, 4), BOX_A, 'tA'), spot(2, ids('b', 1, 10), far(0), 'tB')];
    const r = matchRuns(prev, [spot(1, [...ids('a', 1, 2), ...ids('b', 1, 5)], far(0))]);
    expect(kinds(r)).toEqual(['absorption']);
    expect(r.transitions[0].overlap).toEqual([0.5, 0.5]);
    expect(trackOf(r, 1)).toBe('tB');
  });

  it('a new hotspot holding τ of an old one is its match even when a smaller share went elsewhere', () => {
    const prev = [spot(1, ids('a', 1, 4), BOX_A, 'tA'), spot(2, ids('b', 1, 4), far(0), 'tB')];
    const r = matchRuns(prev, [spot(1, [...ids('a', 1, 4), 'b1'], BOX_A), spot(2, ids('b', 2, 3), far(0))]);
    // b: 1/4 in Y1, 2/4 in Y2 → B survives as Y2 (the only one ≥ τ); A survives as Y1.
    expect(kinds(r)).toEqual(['survival', 'survival']);
    expect(r.tracks).toEqual([{ hotspotId: 1, trackId: 'tA' }, { hotspotId: 2, trackId: 'tB' }]);
  });
});

describe('hull overlap when membership changed', () => {
  // source (expected values): area of a latitude–longitude rectangle on a sphere, R² Δλ (sin φ2 − sin φ1);
  // only ratios are used, so the radius cancels.
  const latShare = (s: number, n: number, s0: number, n0: number): number => (Math.sin(n * RAD) - Math.sin(s * RAD)) / (Math.sin(n0 * RAD) - Math.sin(s0 * RAD));

  it('a sliding window with no shared ids still finds the survival through the hulls', () => {
    const prev = [spot(1, ids('o', 1, 10), BOX_A, 'tA')];
    const cur = [spot(1, ids('p', 1, 12), [10.004, 50.002, 10.024, 50.012])];
    const r = matchRuns(prev, cur);
    expect(r.memberShare).toBe(0);
    expect(kinds(r)).toEqual(['survival']);
    const t = r.transitions[0];
    expect(t.basis).toBe('hull');
    expect(t.overlap[0]).toBeCloseTo((0.016 / 0.02) * latShare(50.002, 50.01, 50.0, 50.01), 9);
    expect(t.change!.countDelta).toBe(2);
    expect(trackOf(r, 1)).toBe('tA');
  });

  it('without the fallback the same nights read as a disappearance and an emergence', () => {
    const prev = [spot(1, ids('o', 1, 10), BOX_A, 'tA')];
    const cur = [spot(1, ids('p', 1, 12), [10.004, 50.002, 10.024, 50.012])];
    const r = matchRuns(prev, cur, { hullOverlapFallback: false });
    expect(kinds(r)).toEqual(['disappearance', 'emergence']);
    expect(r.transitions.map((x) => x.basis)).toEqual(['members', 'members']);
  });

  it('a hull covering exactly half of the old one reaches τ = 0.5', () => {
    const prev = [spot(1, ids('o', 1, 10), BOX_A, 'tA')];
    const r = matchRuns(prev, [spot(1, ids('p', 1, 10), [10.01, 50.0, 10.03, 50.01])]);
    // Clipping leaves it a hair below 0.5 (about 7e-13); hullTolerance absorbs that.
    expect(r.transitions[0].overlap[0]).toBeCloseTo(0.5, 9);
    expect(kinds(r)).toEqual(['survival']);
  });

  it('below minMemberOverlapShare every old hotspot is compared by hull; above it only those sharing nothing', () => {
    const prev = [spot(1, ids('a', 1, 10), BOX_A, 'tA'), spot(2, ids('b', 1, 10), far(0), 'tB')];
    // 4 of A's 10 members remain, none of B's: share 4/20 = 0.2.
    const cur = [spot(1, [...ids('a', 1, 4), ...ids('n', 1, 6)], BOX_A), spot(2, ids('m', 1, 9), far(0))];
    const low = matchRuns(prev, cur);
    expect(low.memberShare).toBe(0.2);
    expect(kinds(low)).toEqual(['survival', 'survival']);
    expect(low.transitions.map((t) => t.basis)).toEqual(['hull', 'hull']);
    expect(low.tracks).toEqual([{ hotspotId: 1, trackId: 'tA' }, { hotspotId: 2, trackId: 'tB' }]);

    // With the bar at 0.1, A is judged by its members (4/10 < τ: gone) and B, sharing nothing, by its hull.
    const high = matchRuns(prev, cur, { minMemberOverlapShare: 0.1 });
    expect(kinds(high)).toEqual(['disappearance', 'survival', 'emergence']);
    expect(high.transitions.map((t) => t.basis)).toEqual(['members', 'hull', 'members']);
    expect(trackOf(high, 2)).toBe('tB');
  });

  it('hulls cut at the antimeridian are compared part by part', () => {
    const cut = (west: number, east: number): RunHotspot['hull'] => ({
      type: 'MultiPolygon',
      coordinates: [
        [[[west, 0], [180, 0], [180, 0.01], [west, 0.01], [west, 0]]],
        [[[-180, 0], [east, 0], [east, 0.01], [-180, 0.01], [-180, 0]]],
      ],
    });
    const x: RunHotspot = { ...spot(1, ids('o', 1, 5), BOX_A, 'tX'), hull: cut(179.99, -179.99), centre: [180, 0] };
    const y: RunHotspot = { ...spot(1, ids('p', 1, 5), BOX_A), hull: cut(179.995, -179.985), centre: [-179.995, 0] };
    const r = matchRuns([x], [y]);
    expect(kinds(r)).toEqual(['survival']);
    // (0.005 + 0.01) / 0.02 of the longitude span, the same latitudes.
    expect(r.transitions[0].overlap[0]).toBeCloseTo(0.75, 9);
    expect(r.transitions[0].change!.movedMeters).toBeCloseTo(6_371_008.8 * 0.005 * RAD, 6); // arc length R·Δλ on the equator
  });
});

describe('a survival with a shrink', () => {
  // A hotspot that stays put in every case, so that the run as a whole keeps most of its members
  // (member share ≥ 0.5) and member overlap, not hull overlap, judges the shrinking one.
  const STAY = (track: string | null): RunHotspot => spot(9, ids('z', 1, 10), far(5), track);
  const INNER: [number, number, number, number] = [10.005, 50.002, 10.012, 50.007]; // inside BOX_A

  it('a hotspot of 8 that lost 6 members and keeps 2 in a smaller hotspot in its place survives, with shrink', () => {
    const prev = [spot(1, ids('a', 1, 8), BOX_A, 'tA'), STAY('tZ')];
    const cur = [spot(1, [...ids('a', 1, 2), ...ids('n', 1, 2)], INNER), STAY(null)];
    const r = matchRuns(prev, cur);
    expect(r.memberShare).toBe(12 / 18);
    expect(kinds(r)).toEqual(['survival', 'survival']);
    const t = r.transitions[0];
    expect(t).toMatchObject({ from: [{ hotspotId: 1, trackId: 'tA' }], to: [{ hotspotId: 1, trackId: 'tA' }], overlap: [0.25], basis: 'members', shrink: true });
    expect(t.change!.countDelta).toBe(-4);
    expect(t.change!.areaDeltaKm2).toBeLessThan(0);
    expect(r.transitions[1].shrink).toBeUndefined(); // a survival by overlap says nothing of the kind
    expect(trackOf(r, 1)).toBe('tA');
    // the rule switched off: the disappearance and the emergence it replaces
    const off = matchRuns(prev, cur, { shrinkSurvival: false });
    expect(kinds(off)).toEqual(['disappearance', 'survival', 'emergence']);
    expect(trackOf(off, 1)).not.toBe('tA');
  });

  it('not when the new hotspot is elsewhere, is not smaller, or lies mostly outside the old outline', () => {
    const prev = [spot(1, ids('a', 1, 8), BOX_A, 'tA'), STAY('tZ')];
    const elsewhere = matchRuns(prev, [spot(1, ids('a', 1, 2), far(0)), STAY(null)]);
    expect(kinds(elsewhere)).toEqual(['disappearance', 'survival', 'emergence']);
    const larger = matchRuns(prev, [spot(1, [...ids('a', 1, 2), ...ids('n', 1, 6)], INNER), STAY(null)]);
    expect(kinds(larger)).toEqual(['disappearance', 'survival', 'emergence']);
    // 10.015–10.035 E: a quarter of its area lies in BOX_A (10.00–10.02 E), below τ
    const offset = matchRuns(prev, [spot(1, ids('a', 1, 2), [10.015, 50.0, 10.035, 50.01]), STAY(null)]);
    expect(kinds(offset)).toEqual(['disappearance', 'survival', 'emergence']);
    // 10.01–10.03 E: half of it lies in BOX_A, which reaches τ
    const half = matchRuns(prev, [spot(1, ids('a', 1, 2), [10.01, 50.0, 10.03, 50.01]), STAY(null)]);
    expect(kinds(half)).toEqual(['survival', 'survival']);
    expect(half.transitions[0].shrink).toBe(true);
  });

  it('not when most of what stayed clustered went elsewhere, nor when it went to two hotspots alike', () => {
    const prev = [spot(1, ids('a', 1, 8), BOX_A, 'tA'), STAY('tZ')];
    // 1 of the 4 still clustered is in the place; 3 went to a hotspot far away (3/8 < τ, and no split)
    const scattered = matchRuns(prev, [spot(1, ['a1'], INNER), spot(2, ids('a', 2, 4), far(1)), STAY(null)]);
    expect(kinds(scattered)).toEqual(['disappearance', 'survival', 'emergence', 'emergence']);
    // 1 and 1 in two small hotspots both inside the old outline: no single successor
    const twins = matchRuns(prev, [spot(1, ['a1'], [10.001, 50.001, 10.004, 50.004]), spot(2, ['a2'], [10.015, 50.005, 10.018, 50.008]), STAY(null)]);
    expect(kinds(twins)).toEqual(['disappearance', 'survival', 'emergence', 'emergence']);
  });

  it('by hulls (a sliding window shares no ids): a small hotspot inside the old outline continues it', () => {
    const prev = [spot(1, ids('o', 1, 10), BOX_A, 'tA')];
    const cur = [spot(1, ids('p', 1, 4), INNER)];
    const r = matchRuns(prev, cur);
    expect(r.memberShare).toBe(0);
    expect(kinds(r)).toEqual(['survival']);
    expect(r.transitions[0]).toMatchObject({ basis: 'hull', shrink: true });
    // source (expected value): area of a latitude–longitude rectangle on a sphere; Δλ 0.007° of 0.02°
    const latShare = (Math.sin(50.007 * RAD) - Math.sin(50.002 * RAD)) / (Math.sin(50.01 * RAD) - Math.sin(50.0 * RAD));
    expect(r.transitions[0].overlap[0]).toBeCloseTo((0.007 / 0.02) * latShare, 9);
    expect(kinds(matchRuns(prev, cur, { shrinkSurvival: false }))).toEqual(['disappearance', 'emergence']);
  });

  it('two old hotspots wanting the same new one: the one sharing more members has it', () => {
    const prev = [spot(1, ids('a', 1, 8), BOX_A, 'tA'), spot(2, ids('b', 1, 8), BOX_A, 'tB'), STAY('tZ'), spot(8, ids('y', 1, 10), far(6), 'tY')];
    const cur = [spot(1, [...ids('a', 1, 3), 'b1'], INNER), STAY(null), spot(8, ids('y', 1, 10), far(6))];
    const r = matchRuns(prev, cur);
    expect(r.transitions.map((t) => [t.kind, t.from.map((f) => f.trackId).join(), t.shrink ?? false])).toEqual([
      ['survival', 'tA', true],
      ['disappearance', 'tB', false],
      ['survival', 'tY', false],
      ['survival', 'tZ', false],
    ]);
  });
});

describe('track ids', () => {
  it('formats t + six digits', () => {
    expect(formatTrackId(42)).toBe('t000042');
    expect(() => formatTrackId(0)).toThrow(/≥ 1/);
  });

  it('the default generator continues after the highest t-number of the previous run', () => {
    const gen = trackIdsAfter(['t000007', 'custom', 't000003']);
    expect([gen(1), gen(2)]).toEqual(['t000008', 't000009']);
    const r = matchRuns([spot(1, ids('a', 1, 3), BOX_A, 't000007')], [spot(2, ids('b', 1, 3), far(1)), spot(1, ids('a', 1, 3), BOX_A)]);
    expect(r.tracks).toEqual([{ hotspotId: 1, trackId: 't000007' }, { hotspotId: 2, trackId: 't000008' }]);
  });

  it('a caller generator is asked in new hotspot id order and may not reuse an id', () => {
    const asked: number[] = [];
    const r = matchRuns([], [spot(2, ['b'], far(1)), spot(1, ['a'], far(0))], {}, (seq) => {
      asked.push(seq);
      return `k${100 + seq}`;
    });
    expect(asked).toEqual([1, 2]);
    expect(r.tracks).toEqual([{ hotspotId: 1, trackId: 'k101' }, { hotspotId: 2, trackId: 'k102' }]);
    expect(() => matchRuns([spot(1, ['a'], BOX_A, 'k1')], [spot(1, ['z'], far(3))], { hullOverlapFallback: false }, () => 'k1'))
      .toThrow(/already in use/);
    expect(() => matchRuns([], [spot(1, ['a'], BOX_A), spot(2, ['b'], far(0))], {}, () => 'same')).toThrow(/already in use/);
  });
});

describe('input order does not matter', () => {
  const prev = [
    spot(1, ids('a', 1, 15), [10.0, 50.0, 10.03, 50.012], 'tA'),
    spot(2, ids('b', 1, 8), [10.2, 50.0, 10.21, 50.01], 'tB'),
    spot(3, ids('c', 1, 6), [10.4, 50.0, 10.41, 50.01], 'tC'),
    spot(4, ids('d', 1, 6), [10.5, 50.0, 10.51, 50.01], 'tD'),
    spot(5, ids('e', 1, 6), [10.6, 50.0, 10.61, 50.01], 'tE'),
  ];
  const cur = [
    spot(1, ids('a', 1, 7), [10.0, 50.0, 10.014, 50.012]),
    spot(2, ids('a', 8, 13), [10.016, 50.0, 10.03, 50.012]),
    spot(3, [...ids('b', 1, 8), ...ids('c', 1, 6)], [10.2, 50.0, 10.41, 50.01]),
    spot(4, ids('x', 1, 6), [10.6, 50.0, 10.61, 50.01]), // E by its hull (no shared ids)
    spot(5, ids('y', 1, 6), [11.0, 50.0, 11.01, 50.01]),
  ];
  const shuffled = <T>(a: T[], seed: number): T[] => {
    const r = rng(seed);
    const out = [...a];
    for (let i = out.length - 1; i > 0; i--) {
      const j = r.int(i + 1);
      [out[i], out[j]] = [out[j], out[i]];
    }
    return out;
  };

  it('gives the same tracks and transitions for every order of both runs', () => {
    const base = matchRuns(prev, cur);
    expect(kinds(base)).toEqual(['split', 'absorption', 'disappearance', 'survival', 'emergence']);
    for (let seed = 1; seed <= 12; seed++) {
      expect(matchRuns(shuffled(prev, seed), shuffled(cur, seed + 100))).toEqual(base);
    }
  });
});

describe('bad input is refused with a message that says what to do', () => {
  it('settings', () => {
    expect(() => matchRuns([], [], { splitThreshold: 0.6 })).toThrow(/splitThreshold .* ≤ 0.5/);
    expect(() => matchRuns([], [], { survivalThreshold: 0 })).toThrow(/survivalThreshold must be a number > 0/);
    expect(() => matchRuns([], [], { minMemberOverlapShare: 1.5 })).toThrow(/minMemberOverlapShare/);
    expect(() => matchRuns([], [], { threshold: 0.5 } as never)).toThrow(/Unknown track setting threshold/);
    expect(() => matchRuns([], [], { hullOverlapFallback: 'yes' } as never)).toThrow(/true or false/);
    expect(() => matchRuns([], [], { shrinkSurvival: 1 } as never)).toThrow(/shrinkSurvival must be true or false/);
    expect(DEFAULT_TRACK_SETTINGS).toMatchObject({ survivalThreshold: 0.5, splitThreshold: 0.25, hullOverlapFallback: true, minMemberOverlapShare: 0.5, shrinkSurvival: true });
  });

  it('hotspots', () => {
    expect(() => matchRuns([], [spot(1, ['a'], BOX_A), spot(1, ['b'], far(0))])).toThrow(/hotspotId 1 twice/);
    expect(() => matchRuns([], [spot(0, ['a'], BOX_A)])).toThrow(/integers ≥ 1/);
    expect(() => matchRuns([spot(1, ['a'], BOX_A)], [])).toThrow(/previous hotspot 1 has no trackId/);
    expect(() => matchRuns([spot(1, ['a'], BOX_A, 't'), spot(2, ['b'], far(0), 't')], [])).toThrow(/Track t is on two/);
    expect(() => matchRuns([], [spot(1, ['a', 'b'], BOX_A), spot(2, ['b'], far(0))])).toThrow(/Observation b is a member of new hotspots 1 and 2/);
    expect(() => matchRuns([spot(1, ['a', 'a'], BOX_A, 'tA')], [])).toThrow(/listed twice among the members of previous hotspot 1/);
    // the previous run's members are checked while they are looked up among the new run's: an id
    // listed twice is found whether or not the new run has it, and before a new-run duplicate
    const a1 = spot(1, ['a', 'b'], BOX_A, 'tA');
    const a2 = (m: string[]): RunHotspot => spot(2, m, far(0), 'tB');
    expect(() => matchRuns([a1, a2(['c', 'b'])], [spot(1, ['a', 'b', 'c'], BOX_A)])).toThrow(/Observation b is a member of previous hotspots 1 and 2/);
    expect(() => matchRuns([a1, a2(['c', 'b'])], [spot(1, ['z'], BOX_A)])).toThrow(/Observation b is a member of previous hotspots 1 and 2/);
    expect(() => matchRuns([spot(3, ['a', 'q', 'a'], BOX_A, 'tA')], [spot(1, ['a'], BOX_A)])).toThrow(/Observation a is listed twice among the members of previous hotspot 3/);
    expect(() => matchRuns([spot(3, ['a', 'q', 'q'], BOX_A, 'tA')], [spot(1, ['a'], BOX_A)])).toThrow(/Observation q is listed twice among the members of previous hotspot 3/);
    expect(() => matchRuns([a1, a2(['b'])], [spot(1, ['a', 'a'], BOX_A)])).toThrow(/Observation b is a member of previous hotspots 1 and 2/);
    // a new-run duplicate that the previous run lists once is the new run's error, not the previous run's
    expect(() => matchRuns([a1, a2(['c', 'd'])], [spot(1, ['a', 'b', 'c'], BOX_A), spot(2, ['d', 'b', 'e'], far(0))])).toThrow(/Observation b is a member of new hotspots 1 and 2/);
    expect(() => matchRuns([a1, a2(['c', 'd'])], [spot(4, ['d', 'c', 'd', 'a', 'b'], BOX_A)])).toThrow(/Observation d is listed twice among the members of new hotspot 4/);
    expect(() => matchRuns([], [{ ...spot(1, ['a'], BOX_A), hull: { type: 'Point' } as never }])).toThrow(/Polygon or MultiPolygon/);
  });
});
