/**
 * Stability by resampling: each resample's best Jaccard checked against a set-based computation
 * straight from the definition (Jaccard 1901: |A ∩ B| / |A ∪ B|), and the scores ordered as they
 * must be: well separated planted hotspots near 1, hotspots found in uniform noise well below.
 */
import { describe, expect, it } from 'vitest';
import { pointSet, type PointSet } from '../../src/core/types.js';
import { clusterPoints } from '../../src/run/cluster.js';
import { resolveSettings } from '../../src/run/settings.js';
import { meanJaccards, resampleIndices, resampleJaccard, resampleJaccards, type StabilitySpec } from '../../src/trust/stability.js';
import { discPositions, rng } from '../reference/seeded.js';

const SEED = Number(process.env.ROOST_TEST_SEED ?? 20261203);
console.log(`stability tests: seed ${SEED} (set ROOST_TEST_SEED to vary)`);

function uniform(n: number, seed: number): { lon: number[]; lat: number[] } {
  const r = rng(seed);
  const lon: number[] = [];
  const lat: number[] = [];
  for (let i = 0; i < n; i++) {
    lon.push(8 + 0.14 * r.next());
    lat.push(50 + 0.09 * r.next());
  }
  return { lon, lat };
}

function spec(points: PointSet, eps: number, minPoints: number, share = 0.8): StabilitySpec {
  const settings = resolveSettings({ eps, min_points: minPoints });
  const c = clusterPoints(points, eps, settings);
  return { settings, seed: SEED, lon: points.lon, lat: points.lat, weight: null, labels: c.labels, hotspots: c.count, share };
}

describe('stability', () => {
  it('agrees with Jaccard computed from sets, resample by resample', () => {
    const u = uniform(400, SEED);
    const s = spec(pointSet(u.lon, u.lat), 500, 4);
    expect(s.hotspots).toBeGreaterThan(3);
    for (let j = 0; j < 5; j++) {
      const keep = resampleIndices(s, j);
      expect(keep.length).toBe(320);
      expect(new Set(keep).size).toBe(320); // without replacement
      const sub = clusterPoints(pointSet(Array.from(keep, (i) => s.lon[i]), Array.from(keep, (i) => s.lat[i])), 500, s.settings);
      const got = resampleJaccard(s, j);
      for (let h = 0; h < s.hotspots; h++) {
        const a = new Set([...keep].filter((i) => s.labels[i] === h));
        let best = 0;
        for (let d = 0; d < sub.count; d++) {
          const b = new Set([...keep].filter((_, k) => sub.labels[k] === d));
          const inter = [...a].filter((i) => b.has(i)).length;
          const union = new Set([...a, ...b]).size;
          best = Math.max(best, union === 0 ? 0 : inter / union);
        }
        expect(got[h]).toBeCloseTo(best, 12);
      }
    }
  });

  it('scores well separated planted hotspots near 1 and hotspots of uniform noise lower', () => {
    const u = uniform(1500, SEED + 1);
    const a = discPositions(SEED + 2, 40, 8.03, 50.03, 150);
    const b = discPositions(SEED + 3, 40, 8.1, 50.06, 150);
    const points = pointSet([...a.lon, ...b.lon, ...u.lon], [...a.lat, ...b.lat, ...u.lat]);
    const s = spec(points, 250, 6);
    const mean = meanJaccards(resampleJaccards(s, 0, 30), s.hotspots);
    const planted = [s.labels[0], s.labels[40]];
    expect(planted[0]).not.toBe(planted[1]);
    for (const h of planted) expect(mean[h]).toBeGreaterThan(0.85);
    const others = [...mean.keys()].filter((h) => !planted.includes(h));
    expect(others.length).toBeGreaterThan(0);
    const meanOthers = others.reduce((t, h) => t + mean[h], 0) / others.length;
    console.log(`planted ${planted.map((h) => mean[h].toFixed(3)).join(', ')}; ${others.length} noise hotspots, mean ${meanOthers.toFixed(3)}`);
    expect(meanOthers).toBeLessThan(0.6);
  });

  it('gives the same scores for the same seed and other scores for another', () => {
    const u = uniform(300, SEED + 4);
    const s = spec(pointSet(u.lon, u.lat), 500, 4);
    expect(Array.from(resampleJaccards(s, 0, 5))).toEqual(Array.from(resampleJaccards(s, 0, 5)));
    expect(Array.from(resampleJaccards({ ...s, seed: s.seed + 1 }, 0, 5))).not.toEqual(Array.from(resampleJaccards(s, 0, 5)));
    // trial j is the same alone or in a batch: what makes thread counts irrelevant
    expect(Array.from(resampleJaccards(s, 3, 4))).toEqual(Array.from(resampleJaccards(s, 0, 5).subarray(3 * s.hotspots, 4 * s.hotspots)));
  });
});
