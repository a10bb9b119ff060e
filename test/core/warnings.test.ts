import { describe, expect, it } from 'vitest';
import { dbscan } from '../../src/core/dbscan.js';
import { ROLE_BORDER, ROLE_CORE, ROLE_NOISE, type Clustering } from '../../src/core/types.js';
import { clusteringWarnings } from '../../src/core/warnings.js';
import { midLatitudeSet } from '../reference/seeded.js';

/** A clustering of n points: hotspots of the given sizes first (border unless among the first `coreCount` points), the rest noise. */
function made(n: number, hotspotSizes: number[], coreCount: number): Clustering {
  const labels = new Int32Array(n).fill(-1);
  const roles = new Uint8Array(n).fill(ROLE_NOISE);
  let i = 0;
  hotspotSizes.forEach((size, h) => {
    for (let k = 0; k < size; k++, i++) {
      labels[i] = h;
      roles[i] = ROLE_BORDER;
    }
  });
  for (let k = 0; k < coreCount; k++) roles[k] = ROLE_CORE;
  return { labels, roles, count: hotspotSizes.length };
}

const codes = (c: Clustering): string[] => clusteringWarnings(c).map((w) => w.code);

describe('clusteringWarnings on real runs', () => {
  const p = midLatitudeSet(3);
  it('is quiet at a fitting eps', () => {
    expect(codes(dbscan(p, { epsMeters: 150, minPoints: 5 }))).toEqual([]);
  });
  it('warns of no hotspots when eps is far too small', () => {
    const c = dbscan(p, { epsMeters: 1, minPoints: 5 });
    expect(c.count).toBe(0);
    expect(codes(c)).toEqual(['no-hotspots']);
  });
  it('warns of nearly all core and one giant hotspot when eps is far too large', () => {
    const c = dbscan(p, { epsMeters: 20_000, minPoints: 5 });
    expect(codes(c)).toEqual(['nearly-all-core', 'one-giant-hotspot']);
  });
});

describe('clusteringWarnings thresholds', () => {
  it('few-core-points below 1 % core (common practice, no source)', () => {
    // 1000 points, one hotspot of 50 with 9 core (0.9 %) warns; with 10 core (1 %) it does not
    const w = clusteringWarnings(made(1000, [50], 9));
    expect(w.map((x) => x.code)).toEqual(['few-core-points']);
    expect(w[0].message).toMatch(/larger eps|smaller min_points/);
    expect(codes(made(1000, [50], 10))).toEqual([]);
  });

  it('nearly-all-core above 95 % core, from 20 points on', () => {
    expect(codes(made(100, [50, 50], 96))).toEqual(['nearly-all-core']);
    expect(codes(made(100, [50, 50], 95))).toEqual([]);
    expect(codes(made(19, [10, 9], 19))).toEqual([]);
    expect(clusteringWarnings(made(100, [50, 50], 96))[0].message).toMatch(/smaller eps/);
  });

  it('one-giant-hotspot above 90 % of all points in one hotspot, from 20 points on', () => {
    expect(codes(made(100, [91, 3], 40))).toEqual(['one-giant-hotspot']);
    expect(codes(made(100, [90, 3], 40))).toEqual([]);
    expect(codes(made(19, [19], 10))).toEqual([]);
    const w = clusteringWarnings(made(100, [3, 91], 40));
    // the second hotspot (label 1) is the giant; users know it by its hotspot_id, label + 1
    expect(w[0].message).toMatch(/Hotspot 2 holds 91 %/);
  });

  it('no-hotspots whenever nothing was found, and nothing for an empty set', () => {
    expect(codes(made(5, [], 0))).toEqual(['no-hotspots']);
    expect(clusteringWarnings(made(5, [], 0))[0].message).toMatch(/k-distance/);
    expect(codes(made(0, [], 0))).toEqual([]);
  });
});
