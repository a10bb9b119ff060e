/**
 * The shared-member counts of a match against counts made the plain way (a set per new hotspot),
 * on seeded runs whose members partly stay, partly move to another hotspot and partly leave, with
 * previous members missing from the new run and new members the previous run did not have.
 * The counts are our own definition (MONIC's overlap without ageing weights, src/tracks/overlap.ts).
 * Seed: ROOST_SEED (printed).
 */
import { describe, expect, it } from 'vitest';
import { matchRuns, type RunHotspot } from '../../src/tracks/match.js';
import { memberOwners, memberPairs, checkMembers } from '../../src/tracks/overlap.js';
import { rng } from '../reference/seeded.js';
import { spot } from './build.js';

const SEED = Number(process.env.ROOST_SEED ?? 16);

/** Two runs: previous hotspots of random sizes; each member stays, moves or leaves; new ids join. */
function runs(seed: number): { prev: RunHotspot[]; cur: RunHotspot[] } {
  const r = rng(seed);
  const nPrev = 1 + r.int(12);
  const nCur = 1 + r.int(12);
  const box = (k: number): [number, number, number, number] => [10 + k * 0.1, 50, 10.02 + k * 0.1, 50.01];
  const prevMembers: string[][] = [];
  const curMembers: string[][] = Array.from({ length: nCur }, () => []);
  let fresh = 0;
  for (let i = 0; i < nPrev; i++) {
    const m: string[] = [];
    const size = r.int(40);
    for (let k = 0; k < size; k++) {
      const id = `o${i}-${k}`;
      m.push(id);
      const fate = r.next();
      if (fate < 0.6) curMembers[i % nCur].push(id);
      else if (fate < 0.85) curMembers[r.int(nCur)].push(id);
      // else: the observation is in no new hotspot
    }
    prevMembers.push(m);
  }
  for (const m of curMembers) for (let k = r.int(10); k > 0; k--) m.push(`n${fresh++}`);
  // list the members in a random order, as a store may return them
  for (const m of [...prevMembers, ...curMembers]) {
    for (let k = m.length - 1; k > 0; k--) {
      const j = r.int(k + 1);
      [m[k], m[j]] = [m[j], m[k]];
    }
  }
  // hotspot ids out of order and with gaps, so that ids and indexes differ
  const prev = prevMembers.map((m, i) => spot(3 * (nPrev - i) + 1, m, box(i), `t${i}`));
  const cur = curMembers.map((m, i) => spot(2 * (nCur - i) + 5, m, box(i)));
  return { prev, cur };
}

describe('shared members', () => {
  it(`equal the counts made with a set per new hotspot (seed ${SEED})`, () => {
    console.info(`member overlap seed ${SEED} (ROOST_SEED)`);
    for (let c = 0; c < 200; c++) {
      const { prev, cur } = runs(SEED * 1000 + c);
      const owners = memberOwners(cur, 'new');
      const counts = new Int32Array(cur.length);
      const sets = cur.map((y) => new Set(y.members));
      for (let i = 0; i < prev.length; i++) {
        const got = memberPairs(prev[i].members, i, owners, counts, (k) => prev[k].hotspotId);
        const want = sets
          .map((set, h) => ({ cur: h, shared: prev[i].members.filter((id) => set.has(id)).length }))
          .filter((p) => p.shared > 0)
          .map((p) => ({ ...p, overlap: p.shared / prev[i].members.length }));
        expect(got.pairs).toEqual(want);
        expect(got.sharedTotal).toBe(want.reduce((s, p) => s + p.shared, 0));
        expect(got.size).toBe(prev[i].members.length);
        expect([...counts].every((x) => x === 0)).toBe(true);
      }
      expect(() => checkMembers(owners)).not.toThrow();
    }
  });

  it(`give a run's member share as the plain count does, with non-default thresholds (seed ${SEED})`, () => {
    const settings = { survivalThreshold: 0.4, splitThreshold: 0.15, hullOverlapFallback: false, shrinkSurvival: false };
    for (let c = 0; c < 100; c++) {
      const { prev, cur } = runs(SEED * 7919 + c);
      const inCur = new Set(cur.flatMap((y) => y.members));
      const all = prev.flatMap((x) => x.members);
      const share = all.length === 0 ? null : all.filter((id) => inCur.has(id)).length / all.length;
      const m = matchRuns(prev, cur, settings);
      expect(m.memberShare).toBe(share);
      expect(m.tracks.length).toBe(cur.length);
    }
  });
});
