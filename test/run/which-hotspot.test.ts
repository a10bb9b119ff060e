/**
 * Which hotspot a position falls in, against a brute-force reference over every core member,
 * at mid latitudes, around a pole and across ±180°.
 */
import { booleanPointInPolygon } from '@turf/turf';
import { describe, expect, it } from 'vitest';
import { haversineMeters } from '../../src/core/haversine.js';
import { hotspotHull } from '../../src/geometry/hull.js';
import { WhichHotspot, type LookupHotspot } from '../../src/run/which-hotspot.js';
import { destination, discPositions, rng } from '../reference/seeded.js';

const EPS = 200;

/** Three hotspots of core members scattered over discs, with their hulls. */
function hotspotsAround(centres: [number, number][]): LookupHotspot[] {
  return centres.map(([lon, lat], k) => {
    const d = discPositions(100 + k, 40, lon, lat, 600);
    const hull = hotspotHull(Float64Array.from(d.lon), Float64Array.from(d.lat), { kind: 'convex', bufferMeters: EPS / 2 });
    return { hotspotId: k + 1, trackId: `t00000${k + 1}`, hull, count: 40 + k, areaKm2: 1 + k, coreLon: d.lon, coreLat: d.lat };
  });
}

/** The reference: every core member of every hotspot, by the haversine formula. */
function brute(hotspots: LookupHotspot[], lon: number, lat: number): { hotspot: number; meters: number } {
  let best = { hotspot: -1, meters: Infinity };
  for (const h of hotspots) {
    for (let i = 0; i < h.coreLon.length; i++) {
      const m = haversineMeters(lon, lat, h.coreLon[i]!, h.coreLat[i]!);
      if (m < best.meters) best = { hotspot: h.hotspotId, meters: m };
    }
  }
  return best;
}

describe('WhichHotspot', () => {
  const places: [string, [number, number][]][] = [
    ['mid latitudes', [[8.5, 47.2], [8.52, 47.2], [8.5, 47.215]]],
    ['around the North Pole', [[0, 89.995], [120, 89.99], [-100, 89.99]]],
    ['across ±180°', [[179.998, -17], [-179.99, -17.01], [179.99, -16.99]]],
  ];
  for (const [name, centres] of places) {
    it(`places positions as a brute-force search over core members does (${name})`, () => {
      const hotspots = hotspotsAround(centres);
      const which = new WhichHotspot(hotspots, EPS);
      const r = rng(7);
      let inside = 0;
      let outside = 0;
      for (let q = 0; q < 400; q++) {
        const [c0, c1] = centres[r.int(centres.length)]!;
        const [lon, lat] = destination(c0, c1, r.next() * 2 * Math.PI, r.next() * 2000);
        const want = brute(hotspots, lon, lat);
        const got = which.place(lon, lat);
        if (want.meters <= EPS) {
          inside++;
          expect(got.hotspot?.hotspot_id).toBe(want.hotspot);
          expect(Math.abs(got.hotspot!.nearest_core_m - want.meters)).toBeLessThanOrEqual(0.05);
          const hull = hotspots[want.hotspot - 1]!.hull;
          // Turf's point-in-polygon is also what the lookup uses: this checks it is asked about the right hull
          expect(got.hotspot!.inside_hull).toBe(booleanPointInPolygon([lon, lat], hull));
          expect(got.nearest_hotspot).toBeNull();
        } else {
          outside++;
          expect(got.hotspot).toBeNull();
          expect(got.nearest_hotspot?.hotspot_id).toBe(want.hotspot);
          expect(Math.abs(got.nearest_hotspot!.distance_m - want.meters)).toBeLessThanOrEqual(0.05);
        }
      }
      expect(inside).toBeGreaterThan(50);
      expect(outside).toBeGreaterThan(50);
    });
  }

  it('finds every core member inside its own hull (a hull holds all its members)', () => {
    const hotspots = hotspotsAround([[8.5, 47.2], [179.99, -16.99]]);
    const which = new WhichHotspot(hotspots, EPS);
    for (const h of hotspots) {
      for (let i = 0; i < h.coreLon.length; i++) expect(which.place(h.coreLon[i]!, h.coreLat[i]!).hotspot).toMatchObject({ hotspot_id: h.hotspotId, inside_hull: true });
    }
  });

  it('reports the hotspot\'s size, and answers plainly for a run without hotspots', () => {
    const hotspots = hotspotsAround([[8.5, 47.2]]);
    const got = new WhichHotspot(hotspots, EPS).place(hotspots[0]!.coreLon[0]!, hotspots[0]!.coreLat[0]!);
    expect(got.hotspot).toMatchObject({ hotspot_id: 1, track_id: 't000001', count: 40, area_km2: 1, nearest_core_m: 0, inside_hull: true });
    expect(new WhichHotspot([], EPS).place(8.5, 47.2)).toEqual({ hotspot: null, nearest_hotspot: null });
    expect(() => new WhichHotspot([], 0)).toThrow(/eps/);
  });
});
