import { describe, expect, it } from 'vitest';
import geodesic from 'geographiclib-geodesic';
import { EARTH_RADIUS_M, chordForMeters, haversineMeters, metersForChord2, unitVectors } from '../../src/core/haversine.js';
import { destination, rng } from '../reference/seeded.js';

const WGS84 = geodesic.Geodesic.WGS84;

describe('haversineMeters', () => {
  it('gives arc length R·θ for arcs along the equator and a meridian', () => {
    // source: arc length on a sphere, s = R·θ (θ in radians), with R = IUGG mean radius R1
    expect(haversineMeters(0, 0, 1, 0)).toBeCloseTo((EARTH_RADIUS_M * Math.PI) / 180, 6);
    expect(haversineMeters(30, 0, 30, 90)).toBeCloseTo((EARTH_RADIUS_M * Math.PI) / 2, 6);
    expect(haversineMeters(0, 0, 180, 0)).toBeCloseTo(EARTH_RADIUS_M * Math.PI, 6);
    expect(haversineMeters(-179.5, 10, 179.5, 10)).toBeCloseTo(haversineMeters(-0.5, 10, 0.5, 10), 6);
  });

  it('is symmetric and zero for identical positions', () => {
    const r = rng(11);
    for (let k = 0; k < 200; k++) {
      const a = [r.next() * 360 - 180, r.next() * 180 - 90];
      const b = [r.next() * 360 - 180, r.next() * 180 - 90];
      expect(haversineMeters(a[0], a[1], b[0], b[1])).toBe(haversineMeters(b[0], b[1], a[0], a[1]));
      expect(haversineMeters(a[0], a[1], a[0], a[1])).toBe(0);
    }
  });

  it('stays within 0.6 % of the WGS 84 geodesic on seeded short and long pairs', () => {
    // source: geographiclib-geodesic (Karney 2013) WGS 84 inverse solution; the 0.6 % bound
    // follows from the ellipsoid's radii of curvature (6 335 km at the equator along the
    // meridian, 6 400 km at the poles) against R1 = 6 371 km
    const r = rng(7);
    let worst = 0;
    for (let k = 0; k < 3000; k++) {
      const lon1 = r.next() * 360 - 180;
      const lat1 = (Math.asin(2 * r.next() - 1) * 180) / Math.PI;
      // distances from 1 m to 19 000 km, log-uniform
      const meters = Math.exp(r.next() * Math.log(1.9e7));
      const [lon2, lat2] = destination(lon1, lat1, r.next() * 2 * Math.PI, meters);
      const ours = haversineMeters(lon1, lat1, lon2, lat2);
      const ref = WGS84.Inverse(lat1, lon1, lat2, lon2).s12!;
      const rel = Math.abs(ours - ref) / ref;
      worst = Math.max(worst, rel);
    }
    expect(worst).toBeLessThan(0.006);
    // the spread must be real: a sphere differs from the ellipsoid by a few tenths of a percent
    expect(worst).toBeGreaterThan(0.002);
  });

  it('agrees with the inverse example of Karney (2013) to within 0.6 %', () => {
    // source: C. F. F. Karney (2013), "Algorithms for geodesics", J. Geodesy 87:43–55, worked
    // inverse example φ1 = −30°, φ2 = 29.9°, λ12 = 179.8° on WGS 84:
    // s12 = 19 989 832.827 61 m, α1 = 161.890 524 736°, α2 = 18.090 737 246° (from memory)
    const paperS12 = 19_989_832.82761;
    const inv = WGS84.Inverse(-30, 0, 29.9, 179.8);
    // source: geographiclib-geodesic reproduces the paper's figures
    expect(inv.s12!).toBeCloseTo(paperS12, 3);
    expect(inv.azi1!).toBeCloseTo(161.890524736, 8);
    expect(inv.azi2!).toBeCloseTo(18.090737246, 8);
    const ours = haversineMeters(0, -30, 179.8, 29.9);
    expect(Math.abs(ours - paperS12) / paperS12).toBeLessThan(0.006);
  });

  it('agrees with the JFK–CDG case of the GeographicLib test suite to within 0.6 %', () => {
    // source: geographiclib-geodesic test/geodesictest.js "GeodSolve0":
    // Inverse(40.6, −73.8, 49.01666667, 2.55) gives s12 = 5 853 226 m
    const ours = haversineMeters(-73.8, 40.6, 2.55, 49.01666667);
    expect(Math.abs(ours - 5_853_226) / 5_853_226).toBeLessThan(0.006);
  });
});

describe('chord conversions', () => {
  it('round-trips metres through the chord and matches unit-vector chords', () => {
    const r = rng(3);
    for (let k = 0; k < 500; k++) {
      const lon1 = r.next() * 360 - 180, lat1 = r.next() * 180 - 90;
      const lon2 = r.next() * 360 - 180, lat2 = r.next() * 180 - 90;
      const m = haversineMeters(lon1, lat1, lon2, lat2);
      const v = unitVectors(Float64Array.of(lon1, lon2), Float64Array.of(lat1, lat2));
      const c2 = (v[0] - v[3]) ** 2 + (v[1] - v[4]) ** 2 + (v[2] - v[5]) ** 2;
      // source: chord = 2·sin(θ/2) on the unit sphere
      expect(Math.abs(metersForChord2(c2) - m)).toBeLessThan(1e-3);
      expect(chordForMeters(m) ** 2).toBeCloseTo(c2, 12);
    }
    expect(chordForMeters(EARTH_RADIUS_M * Math.PI * 2)).toBe(2);
  });
});
