/**
 * Properties of track matching on random pairs of runs (fast-check): whatever the membership and
 * the outlines, every new hotspot gets exactly one track, no track goes to two new hotspots, and
 * every old hotspot is in exactly one transition. Transition rules: MONIC (Spiliopoulou et al.,
 * KDD 2006).
 */
import { describe, expect, it } from 'vitest';
import fc from 'fast-check';
import { matchRuns, type RunHotspot, type TrackSettings } from '../../src/tracks/match.js';
import { spot } from './build.js';

/** Hotspots from labels (−1 = noise); label k sits in grid cell cells[k], rectangles overlap their neighbours. */
function run(labels: number[], cells: number[], prefix: string, withTracks: boolean): RunHotspot[] {
  const members = new Map<number, string[]>();
  labels.forEach((label, i) => {
    if (label < 0) return;
    if (!members.has(label)) members.set(label, []);
    members.get(label)!.push(`${prefix}${i}`);
  });
  const used = [...members.keys()].sort((a, b) => a - b);
  return used.map((label, k) => {
    const c = cells[label];
    const west = 5 + (c % 3) * 0.01;
    const south = 45 + Math.floor(c / 3) * 0.01;
    return spot(k + 1, members.get(label)!, [west, south, west + 0.015, south + 0.012], withTracks ? `old${label}` : null);
  });
}

const settingsArb = fc
  .record({
    survivalThreshold: fc.double({ min: 0.2, max: 1, noNaN: true }),
    splitShare: fc.double({ min: 0.05, max: 1, noNaN: true }),
    hullOverlapFallback: fc.boolean(),
    minMemberOverlapShare: fc.double({ min: 0, max: 1, noNaN: true }),
  })
  .map(({ splitShare, survivalThreshold, ...rest }): Partial<TrackSettings> => ({
    ...rest, survivalThreshold, splitThreshold: survivalThreshold * splitShare,
  }));

const caseArb = fc.record({
  prevLabels: fc.array(fc.integer({ min: -1, max: 4 }), { minLength: 0, maxLength: 30 }),
  curLabels: fc.array(fc.integer({ min: -1, max: 4 }), { minLength: 0, maxLength: 30 }),
  prevCells: fc.array(fc.integer({ min: 0, max: 5 }), { minLength: 5, maxLength: 5 }),
  curCells: fc.array(fc.integer({ min: 0, max: 5 }), { minLength: 5, maxLength: 5 }),
  slidingWindow: fc.boolean(),
  settings: settingsArb,
});

describe('track matching properties', () => {
  it('one track per new hotspot, no track twice, every old hotspot in exactly one transition', () => {
    fc.assert(
      fc.property(caseArb, ({ prevLabels, curLabels, prevCells, curCells, slidingWindow, settings }) => {
        const prev = run(prevLabels, prevCells, 'o', true);
        const cur = run(curLabels, curCells, slidingWindow ? 'p' : 'o', false);
        const r = matchRuns(prev, cur, settings);
        const prevTracks = new Set(prev.map((h) => h.trackId));

        // every new hotspot exactly once, in hotspotId order, and no track id on two of them
        expect(r.tracks.map((t) => t.hotspotId)).toEqual(cur.map((h) => h.hotspotId));
        expect(new Set(r.tracks.map((t) => t.trackId)).size).toBe(cur.length);

        // every old hotspot in exactly one transition's `from`
        const fromCount = new Map<number, number>();
        for (const t of r.transitions) for (const f of t.from) fromCount.set(f.hotspotId, (fromCount.get(f.hotspotId) ?? 0) + 1);
        for (const x of prev) expect(fromCount.get(x.hotspotId)).toBe(1);
        expect(fromCount.size).toBe(prev.length);

        // every new hotspot in at least one transition's `to`, with the track it was given
        const given = new Map(r.tracks.map((t) => [t.hotspotId, t.trackId]));
        const inTo = new Set<number>();
        for (const t of r.transitions) {
          for (const e of t.to) {
            inTo.add(e.hotspotId);
            expect(e.trackId).toBe(given.get(e.hotspotId));
          }
          for (const o of t.overlap) expect(o >= 0 && o <= 1).toBe(true);
          // [from, to] sizes per kind; 2 means "two or more"
          const [nFrom, nTo] = { survival: [1, 1], absorption: [2, 1], split: [1, 2], disappearance: [1, 0], emergence: [0, 1] }[t.kind];
          if (nFrom === 2) expect(t.from.length).toBeGreaterThanOrEqual(2); else expect(t.from).toHaveLength(nFrom);
          if (nTo === 2) expect(t.to.length).toBeGreaterThanOrEqual(2); else expect(t.to).toHaveLength(nTo);
          if (t.kind === 'survival') expect(t.to[0].trackId).toBe(t.from[0].trackId);
          if (t.kind === 'absorption') expect(t.from.map((f) => f.trackId)).toContain(t.to[0].trackId);
          if (t.kind === 'emergence') expect(prevTracks.has(t.to[0].trackId)).toBe(false);
        }
        expect(inTo.size).toBe(cur.length);

        // a new hotspot that carries an old track is named in that old hotspot's transition
        for (const [hotspotId, trackId] of given) {
          if (!prevTracks.has(trackId)) continue;
          const t = r.transitions.find((tr) => tr.from.some((f) => f.trackId === trackId))!;
          expect(['survival', 'absorption', 'split']).toContain(t.kind);
          expect(t.to.map((e) => e.hotspotId)).toContain(hotspotId);
        }

        // the order of the inputs does not matter
        expect(matchRuns([...prev].reverse(), [...cur].reverse(), settings)).toEqual(r);
      }),
      { numRuns: 200, seed: 20240605 },
    );
  }, 60_000); // hull clipping makes each case a few milliseconds; the machine may be shared
});
