import { describe, expect, it } from 'vitest';
import geodesic from 'geographiclib-geodesic';
import { EARTH_RADIUS_M } from '../../src/core/haversine.js';
import { cutAtAntimeridian } from '../../src/geometry/antimeridian.js';
import { geometryAreaKm2, ringSignedExcess } from '../../src/geometry/area.js';
import { hotspotHull, hullVertices } from '../../src/geometry/hull.js';
import { destination, rng } from '../reference/seeded.js';

const WGS84 = geodesic.Geodesic.WGS84;
const RAD = Math.PI / 180;

/** Area in km² of a ring on the WGS 84 ellipsoid, geodesic edges. source: GeographicLib PolygonArea (Karney 2013) */
function ellipsoidKm2(ring: number[][]): number {
  const poly = WGS84.Polygon(false);
  const open = ring[0][0] === ring[ring.length - 1][0] && ring[0][1] === ring[ring.length - 1][1] ? ring.slice(0, -1) : ring;
  for (const p of open) poly.AddPoint(p[1], p[0]);
  return Math.abs(poly.Compute(false, true).area ?? NaN) / 1e6;
}

/**
 * Ratio of areas sphere / ellipsoid for a small patch at geodetic latitude φ: the sphere's area
 * element is R1² cos φ dφ dλ, the ellipsoid's M·N cos φ dφ dλ, with meridional radius
 * M = a(1 − e²)/W³ and normal radius N = a/W, W = √(1 − e² sin² φ).
 * source: radii of curvature of the ellipsoid (e.g. Karney 2013 / any geodesy text), WGS 84 a, f
 * from GeographicLib — R1²/(MN) is +0.45 % at the equator and −0.9 % at the poles, which is why
 * raw sphere and ellipsoid areas differ by up to about 1 %.
 */
function sphereOverEllipsoid(latDeg: number): number {
  const a = WGS84.a, f = WGS84.f;
  const e2 = f * (2 - f);
  const s = Math.sin(latDeg * RAD);
  const W = Math.sqrt(1 - e2 * s * s);
  const M = (a * (1 - e2)) / W ** 3;
  const N = a / W;
  return (EARTH_RADIUS_M * EARTH_RADIUS_M) / (M * N);
}

/** A seeded convex hotspot hull (member disc radius radiusM) around (lon, lat). */
function seededHull(seed: number, lon: number, lat: number, radiusM: number): number[][] {
  const r = rng(seed);
  const xs: number[] = [], ys: number[] = [];
  for (let i = 0; i < 200; i++) {
    const [x, y] = destination(lon, lat, r.next() * 2 * Math.PI, radiusM * Math.sqrt(r.next()));
    xs.push(x);
    ys.push(y);
  }
  return hullVertices(xs, ys, { bufferMeters: 50 }).ring;
}

describe('geometryAreaKm2', () => {
  it('gives an octant of the sphere exactly', () => {
    // source: an octant (three quarter great circles) is 1/8 of the sphere's 4πR²
    const octant = { type: 'Polygon' as const, coordinates: [[[0, 0], [90, 0], [0, 90], [0, 0]]] };
    expect(geometryAreaKm2(octant)).toBeCloseTo((Math.PI * EARTH_RADIUS_M ** 2) / 2 / 1e6, 3);
  });

  it('matches GeographicLib on WGS 84 for small hulls at every latitude', () => {
    for (const [k, lat] of [0, 23, 45, -60, 75, 85, -88].entries()) {
      const ring = seededHull(20 + k, 37 * k - 100, lat, 5_000);
      const g = cutAtAntimeridian(ring);
      const ours = geometryAreaKm2(g);
      const ref = ellipsoidKm2(ring);
      // source: GeographicLib PolygonArea (Karney 2013). Sphere against ellipsoid: within 1 %
      // raw (see sphereOverEllipsoid), and within 0.01 % once the local ratio of area elements
      // is applied; what remains is geodesic against great-circle edges over a few kilometres.
      expect(Math.abs(ours / ref - 1)).toBeLessThan(0.01);
      expect(Math.abs(ours / (ref * sphereOverEllipsoid(lat)) - 1)).toBeLessThan(1e-4);
    }
  });

  it('matches GeographicLib for a hull that contains the North Pole', () => {
    const ring = seededHull(30, 0, 90, 40_000);
    const g = cutAtAntimeridian(ring);
    expect(g.type).toBe('Polygon');
    // source: GeographicLib PolygonArea (Karney 2013), which handles polygons around a pole
    const ref = ellipsoidKm2(ring);
    expect(Math.abs(geometryAreaKm2(g) / (ref * sphereOverEllipsoid(90)) - 1)).toBeLessThan(1e-4);
  });

  it('matches GeographicLib for a hull around the South Pole given by hotspotHull', () => {
    const r = rng(31);
    const xs: number[] = [], ys: number[] = [];
    for (let i = 0; i < 200; i++) {
      const [x, y] = destination(0, -90, r.next() * 2 * Math.PI, 20_000 * Math.sqrt(r.next()));
      xs.push(x);
      ys.push(y);
    }
    const g = hotspotHull(xs, ys, { bufferMeters: 50 });
    const ref = ellipsoidKm2(hullVertices(xs, ys, { bufferMeters: 50 }).ring);
    // source: GeographicLib PolygonArea (Karney 2013)
    expect(Math.abs(geometryAreaKm2(g) / (ref * sphereOverEllipsoid(-90)) - 1)).toBeLessThan(1e-4);
  });

  it('adds the parts of a hull cut at the antimeridian up to GeographicLib’s area of the whole', () => {
    const ring = seededHull(32, 180, -40, 6_000);
    const g = cutAtAntimeridian(ring);
    if (g.type !== 'MultiPolygon') throw new Error('expected a MultiPolygon');
    const parts = g.coordinates.map((poly) => geometryAreaKm2({ type: 'Polygon', coordinates: poly }));
    expect(parts.every((a) => a > 0)).toBe(true);
    const sum = parts.reduce((a, b) => a + b, 0);
    expect(geometryAreaKm2(g)).toBeCloseTo(sum, 12);
    // source: GeographicLib PolygonArea (Karney 2013) on the uncut ring
    expect(Math.abs(sum / (ellipsoidKm2(ring) * sphereOverEllipsoid(-40)) - 1)).toBeLessThan(1e-4);
  });

  it('does not depend on orientation, closure or longitude branch', () => {
    const ring = seededHull(33, 10, 50, 3_000);
    const a = Math.abs(ringSignedExcess(ring));
    expect(ringSignedExcess(ring)).toBeGreaterThan(0); // hull rings come counter-clockwise
    expect(Math.abs(ringSignedExcess([...ring].reverse()))).toBeCloseTo(a, 15);
    expect(Math.abs(ringSignedExcess([...ring, ring[0]]))).toBeCloseTo(a, 15);
    expect(Math.abs(ringSignedExcess(ring.map((p) => [p[0] + 360, p[1]])))).toBeCloseTo(a, 15);
  });
});
