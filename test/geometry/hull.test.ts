import { readdirSync, readFileSync, writeFileSync } from 'node:fs';
import { join } from 'node:path';
import { fileURLToPath } from 'node:url';
import { describe, expect, it } from 'vitest';
import { booleanPointInPolygon } from '@turf/turf';
import { EARTH_RADIUS_M, haversineMeters } from '../../src/core/haversine.js';
import { cutAtAntimeridian, ringTurns, unwrapLongitudes, wrapDelta, wrapLongitude } from '../../src/geometry/antimeridian.js';
import { geometryAreaKm2, ringSignedExcess } from '../../src/geometry/area.js';
import { bboxOf, featureCollectionString, featureString, type GeometryLike } from '../../src/geometry/geojson.js';
import { hotspotHull, hullVertices, MIN_WIDTH_M, type HullGeometry } from '../../src/geometry/hull.js';
import { destination, discPositions, rng } from '../reference/seeded.js';

const RAD = Math.PI / 180;


const polygonsOf = (g: HullGeometry): number[][][][] => (g.type === 'Polygon' ? [g.coordinates] : g.coordinates);

function shoelace(ring: number[][]): number {
  let s = 0;
  for (let i = 0; i + 1 < ring.length; i++) s += ring[i][0] * ring[i + 1][1] - ring[i + 1][0] * ring[i][1];
  return s / 2;
}

/** RFC 7946 ring rules on every ring of g. */
function expectRfcRings(g: HullGeometry): void {
  for (const rings of polygonsOf(g)) {
    for (const ring of rings) {
      expect(ring.length).toBeGreaterThanOrEqual(4);
      // source: RFC 7946 §3.1.6 — closed: first and last positions equivalent
      expect(ring[ring.length - 1]).toEqual(ring[0]);
      // source: RFC 7946 §3.1.6 — exterior rings counter-clockwise (right-hand rule)
      expect(shoelace(ring)).toBeGreaterThan(0);
      for (let i = 0; i + 1 < ring.length; i++) {
        expect(ring[i][0] === ring[i + 1][0] && ring[i][1] === ring[i + 1][1]).toBe(false);
        // source: RFC 7946 §3.1.9 — longitudes within [−180, 180] after cutting
        expect(Math.abs(ring[i][0])).toBeLessThanOrEqual(180);
        expect(Math.abs(ring[i][1])).toBeLessThanOrEqual(90);
      }
    }
  }
}

/** Distance in metres from a position to the nearest edge of g (local flat approximation). */
function metersToBoundary(g: HullGeometry, lon: number, lat: number): number {
  let best = Infinity;
  const kx = Math.cos(lat * RAD) * RAD * EARTH_RADIUS_M;
  const ky = RAD * EARTH_RADIUS_M;
  for (const rings of polygonsOf(g)) {
    for (const ring of rings) {
      for (let i = 0; i + 1 < ring.length; i++) {
        const ax = wrapDelta(ring[i][0] - lon) * kx, ay = (ring[i][1] - lat) * ky;
        const bx = wrapDelta(ring[i + 1][0] - lon) * kx, by = (ring[i + 1][1] - lat) * ky;
        const dx = bx - ax, dy = by - ay;
        const len2 = dx * dx + dy * dy;
        const t = len2 > 0 ? Math.max(0, Math.min(1, -(ax * dx + ay * dy) / len2)) : 0;
        best = Math.min(best, Math.hypot(ax + t * dx, ay + t * dy));
      }
    }
  }
  return best;
}

/** Every member lies inside g (turf point-in-polygon), or within toleranceM of its boundary. */
function expectContainsAll(g: HullGeometry, lon: ArrayLike<number>, lat: ArrayLike<number>, toleranceM = 0.1): void {
  let outside = 0;
  for (let i = 0; i < lon.length; i++) {
    const x = wrapLongitude(lon[i]);
    const candidates = x === -180 ? [-180, 180] : [x];
    // source: @turf/boolean-point-in-polygon (ray casting), boundary counted as inside
    const inside = candidates.some((c) => booleanPointInPolygon([c, lat[i]], g));
    if (!inside && metersToBoundary(g, lon[i], lat[i]) > toleranceM) outside++;
  }
  expect(outside).toBe(0);
}

/**
 * Every member on the inner side of every great-circle edge of the spherical hull: the triple
 * product (a × b) · p ≥ 0 for a counter-clockwise ring seen from outside the sphere.
 * source: definition of a convex spherical polygon as an intersection of hemispheres
 */
function expectSphericalConvexHull(ring: number[][], lon: ArrayLike<number>, lat: ArrayLike<number>): void {
  const v = (x: number, y: number): number[] => [Math.cos(y * RAD) * Math.cos(x * RAD), Math.cos(y * RAD) * Math.sin(x * RAD), Math.sin(y * RAD)];
  const verts = ring.map((p) => v(p[0], p[1]));
  let worst = Infinity;
  for (let i = 0; i < lon.length; i++) {
    const p = v(lon[i], lat[i]);
    for (let k = 0; k < verts.length; k++) {
      const a = verts[k], b = verts[(k + 1) % verts.length];
      const n = [a[1] * b[2] - a[2] * b[1], a[2] * b[0] - a[0] * b[2], a[0] * b[1] - a[1] * b[0]];
      const len = Math.hypot(n[0], n[1], n[2]);
      worst = Math.min(worst, (n[0] * p[0] + n[1] * p[1] + n[2] * p[2]) / len);
    }
  }
  // Signed distance to the nearest edge plane, in metres on the ground: none beyond 1 mm outside.
  expect(worst * EARTH_RADIUS_M).toBeGreaterThan(-1e-3);
}

function expectVerticesAreMembers(ring: number[][], lon: ArrayLike<number>, lat: ArrayLike<number>): void {
  const members = new Set<string>();
  for (let i = 0; i < lon.length; i++) members.add(`${lon[i]},${lat[i]}`);
  for (const p of ring) expect(members.has(`${p[0]},${p[1]}`)).toBe(true);
}

/** Planar area ratio of a regular m-gon inscribed in its circle: (m / 2π)·sin(2π / m). */
const inscribed = (m: number): number => (m / (2 * Math.PI)) * Math.sin((2 * Math.PI) / m);
/** source: spherical cap formula, A = 2πR²(1 − cos(r/R)), in km² */
const capKm2 = (r: number): number => (2 * Math.PI * EARTH_RADIUS_M ** 2 * (1 - Math.cos(r / EARTH_RADIUS_M))) / 1e6;

const CASES = [
  { name: 'mid-latitude', seed: 1, n: 400, lon: 10.5, lat: 47.3, radiusM: 2_000, polar: false, cut: false },
  { name: 'near 85° north', seed: 2, n: 400, lon: -40, lat: 85, radiusM: 40_000, polar: false, cut: false },
  { name: 'around the North Pole', seed: 3, n: 300, lon: 0, lat: 90, radiusM: 30_000, polar: true, cut: false },
  { name: 'around the South Pole', seed: 4, n: 300, lon: 0, lat: -90, radiusM: 30_000, polar: true, cut: false },
  { name: 'straddling ±180°', seed: 5, n: 400, lon: 180, lat: -17, radiusM: 5_000, polar: false, cut: true },
  { name: 'straddling ±180° near 80° north', seed: 6, n: 400, lon: -180, lat: 80, radiusM: 20_000, polar: false, cut: true },
] as const;

describe('hotspotHull (convex)', () => {
  for (const c of CASES) {
    it(`is a valid RFC 7946 hull containing every member — ${c.name}`, () => {
      const m = discPositions(c.seed, c.n, c.lon, c.lat, c.radiusM);
      const g = hotspotHull(m.lon, m.lat, { bufferMeters: 50 });
      expectRfcRings(g);
      expectContainsAll(g, m.lon, m.lat);
      expect(g.type).toBe(c.cut ? 'MultiPolygon' : 'Polygon');
      const lats = polygonsOf(g).flat(2).map((p) => p[1]);
      if (c.polar) expect(lats).toContain(c.lat);
      else expect(lats.some((y) => Math.abs(y) === 90)).toBe(false);
      // A disc of the given radius, sampled densely: the hull's area approaches the cap's.
      const ratio = geometryAreaKm2(g) / capKm2(c.radiusM);
      expect(ratio).toBeGreaterThan(0.85);
      expect(ratio).toBeLessThan(1);
    });

    it(`is the spherical convex hull, with members as vertices — ${c.name}`, () => {
      const m = discPositions(c.seed, c.n, c.lon, c.lat, c.radiusM);
      const { ring, buffered } = hullVertices(m.lon, m.lat, { bufferMeters: 50 });
      expect(buffered).toBe(false);
      expectVerticesAreMembers(ring, m.lon, m.lat);
      expectSphericalConvexHull(ring, m.lon, m.lat);
      // Without edge splitting, output vertices are members or cut points on ±180.
      const g = hotspotHull(m.lon, m.lat, { bufferMeters: 50, edgeToleranceMeters: Infinity });
      const inner = polygonsOf(g).flat(2).filter((p) => Math.abs(p[0]) !== 180);
      expectVerticesAreMembers(inner, m.lon, m.lat);
    });
  }

  it('cuts a hull across ±180° into parts within [−180, 180] that both touch ±180', () => {
    const m = discPositions(5, 400, 180, -17, 5_000);
    const g = hotspotHull(m.lon, m.lat, { bufferMeters: 50 });
    if (g.type !== 'MultiPolygon') throw new Error('expected a MultiPolygon');
    expect(g.coordinates.length).toBe(2);
    const sides = g.coordinates.map((poly) => {
      const xs = poly[0].map((p) => p[0]);
      return { min: Math.min(...xs), max: Math.max(...xs) };
    });
    // source: RFC 7946 §3.1.9 — parts on each side, the cut edge on the antimeridian
    expect(sides.some((s) => s.max === 180 && s.min > 170)).toBe(true);
    expect(sides.some((s) => s.min === -180 && s.max < -170)).toBe(true);
  });

  it('gives the same figures wherever the same shape sits in longitude', () => {
    // The same patch moved across ±180° keeps its area (the cut parts add up).
    const a = discPositions(7, 200, 179.99, 30, 3_000);
    const b = { lon: a.lon.map((x) => x - 100), lat: a.lat };
    const ga = hotspotHull(a.lon, a.lat, { bufferMeters: 50 });
    const gb = hotspotHull(b.lon, b.lat, { bufferMeters: 50 });
    expect(ga.type).toBe('MultiPolygon');
    expect(gb.type).toBe('Polygon');
    expect(geometryAreaKm2(ga)).toBeCloseTo(geometryAreaKm2(gb), 9);
  });

  it('is deterministic and independent of the order of members', () => {
    const m = discPositions(8, 500, 3, 51, 1_000);
    const a = hotspotHull(m.lon, m.lat, { bufferMeters: 50 });
    expect(JSON.stringify(hotspotHull(m.lon, m.lat, { bufferMeters: 50 }))).toBe(JSON.stringify(a));
    const order = m.lon.map((_, i) => i).reverse();
    const b = hotspotHull(order.map((i) => m.lon[i]), order.map((i) => m.lat[i]), { bufferMeters: 50 });
    expect(geometryAreaKm2(b)).toBeCloseTo(geometryAreaKm2(a), 9);
  });

  it('handles 20 000 members, most of them inside', () => {
    const m = discPositions(9, 20_000, -73.9, 40.7, 10_000);
    const g = hotspotHull(m.lon, m.lat, { bufferMeters: 50 });
    expectRfcRings(g);
    const { ring } = hullVertices(m.lon, m.lat, { bufferMeters: 50 });
    expectSphericalConvexHull(ring, m.lon.slice(0, 2000), m.lat.slice(0, 2000));
    expectVerticesAreMembers(ring, m.lon, m.lat);
  });
});

describe('hotspotHull (degenerate hotspots get a buffer)', () => {
  const r = 125; // bufferMeters = eps / 2 for eps = 250 m

  it('draws a circle of bufferMeters around a single member', () => {
    for (const [lon, lat] of [[10, 50], [179.9995, 0], [0, 90], [-60, -90]]) {
      const g = hotspotHull([lon], [lat], { bufferMeters: r });
      expectRfcRings(g);
      expectContainsAll(g, [lon], [lat]);
      // source: spherical cap formula; the 32-gon is inscribed, so its area is the planar
      // inscribed ratio of the cap's (the sphere's curvature changes this by ~(r/R)², negligible)
      expect(geometryAreaKm2(g) / (capKm2(r) * inscribed(32))).toBeCloseTo(1, 4);
    }
  });

  it('treats members that all share one position like a single member', () => {
    const g = hotspotHull([5, 5, 5, 5, 5], [45, 45, 45, 45, 45], { bufferMeters: r });
    // source: spherical cap formula (see above)
    expect(geometryAreaKm2(g) / (capKm2(r) * inscribed(32))).toBeCloseTo(1, 4);
  });

  it('draws a capsule around two members', () => {
    const [lon2, lat2] = destination(10, 50, 1.0, 1_000);
    const d = haversineMeters(10, 50, lon2, lat2);
    const g = hotspotHull([10, lon2, 10, lon2], [50, lat2, 50, lat2], { bufferMeters: r });
    expectRfcRings(g);
    // source: area of a capsule (stadium), πr² + 2r·d, in the plane — a hotspot 1 km across is
    // flat to ~1e-8; the inscribed polygons make it smaller by at most 1 − inscribed(32) ≈ 0.64 %
    const expected = (Math.PI * r * r + 2 * r * d) / 1e6;
    const ratio = geometryAreaKm2(g) / expected;
    expect(ratio).toBeGreaterThan(inscribed(32) - 1e-4);
    expect(ratio).toBeLessThanOrEqual(1);
  });

  it('draws a capsule around members on one great circle', () => {
    // Points on the great circle through two members, across ±180° near 60° north.
    const a = [179.99, 60], b = destination(179.99, 60, 0.6, 3_000);
    const v = (p: number[]): number[] => [Math.cos(p[1] * RAD) * Math.cos(p[0] * RAD), Math.cos(p[1] * RAD) * Math.sin(p[0] * RAD), Math.sin(p[1] * RAD)];
    const va = v(a), vb = v(b);
    const lon: number[] = [], lat: number[] = [];
    const rr = rng(10);
    for (let k = 0; k < 50; k++) {
      const t = k === 0 ? 0 : k === 1 ? 1 : rr.next();
      const p = [0, 1, 2].map((j) => va[j] * (1 - t) + vb[j] * t);
      lon.push(Math.atan2(p[1], p[0]) / RAD);
      lat.push(Math.atan2(p[2], Math.hypot(p[0], p[1])) / RAD);
    }
    const g = hotspotHull(lon, lat, { bufferMeters: r });
    expect(g.type).toBe('MultiPolygon');
    expectRfcRings(g);
    expectContainsAll(g, lon, lat);
    const d = haversineMeters(a[0], a[1], b[0], b[1]);
    // source: capsule area πr² + 2r·d (see above)
    const ratio = geometryAreaKm2(g) / ((Math.PI * r * r + 2 * r * d) / 1e6);
    expect(ratio).toBeGreaterThan(inscribed(32) - 1e-4);
    expect(ratio).toBeLessThanOrEqual(1);
  });

  it('buffers a hull narrower than MIN_WIDTH_M but not one just wider', () => {
    const [lon2, lat2] = destination(10, 50, Math.PI / 2, 500);
    const [lonT, latT] = destination(10, 50, Math.PI / 2, 250);
    const [lonN, latN] = destination(lonT, latT, 0, MIN_WIDTH_M / 4);
    const [lonW, latW] = destination(lonT, latT, 0, MIN_WIDTH_M * 4);
    expect(hullVertices([10, lon2, lonN], [50, lat2, latN], { bufferMeters: r }).buffered).toBe(true);
    expect(hullVertices([10, lon2, lonW], [50, lat2, latW], { bufferMeters: r }).buffered).toBe(false);
  });

  it('keeps the buffer below, not beside, a buffered member at the pole', () => {
    const g = hotspotHull([0, 0], [90, 90], { bufferMeters: 1_000 });
    if (g.type !== 'Polygon') throw new Error('expected a Polygon');
    // The RFC 7946 form of a polygon around a pole: along ±180 up to the pole and along the pole.
    const ring = g.coordinates[0];
    expect(ring.some((p) => p[0] === 180 && p[1] === 90)).toBe(true);
    expect(ring.some((p) => p[0] === -180 && p[1] === 90)).toBe(true);
    expect(Math.min(...ring.map((p) => p[1]))).toBeGreaterThan(89.99);
  });
});

describe('hotspotHull (concave)', () => {
  /** An L-shaped set: two perpendicular bars 2 km long and 200 m wide. */
  function ell(seed: number, lon0: number, lat0: number): { lon: number[]; lat: number[] } {
    const r = rng(seed);
    const out = { lon: [] as number[], lat: [] as number[] };
    for (let i = 0; i < 600; i++) {
      const along = r.next() * 2_000, across = r.next() * 200;
      const [e, n] = i % 2 ? [along, across] : [across, along];
      const [x1, y1] = destination(lon0, lat0, Math.PI / 2, e);
      const [x, y] = destination(x1, y1, 0, n);
      out.lon.push(x);
      out.lat.push(y);
    }
    return out;
  }

  it('follows an L-shaped hotspot, contains every member and uses members as vertices', () => {
    for (const [lon0, lat0] of [[12, 41], [179.99, -40], [-30, 88]]) {
      const m = ell(11, lon0, lat0);
      const concave = hotspotHull(m.lon, m.lat, { kind: 'concave', bufferMeters: 50 });
      const convex = hotspotHull(m.lon, m.lat, { bufferMeters: 50 });
      expectRfcRings(concave);
      expectContainsAll(concave, m.lon, m.lat);
      // Bars 2 km × 0.2 km: the L covers ≈ 0.76 km², its convex hull ≈ 2.2 km²; the concave
      // hull follows the sampled members a little inside the bars' edges.
      expect(geometryAreaKm2(concave)).toBeLessThan(0.6 * geometryAreaKm2(convex));
      expect(geometryAreaKm2(concave)).toBeGreaterThan(0.4);
      expect(geometryAreaKm2(concave)).toBeLessThan(0.77);
      const { ring } = hullVertices(m.lon, m.lat, { kind: 'concave', bufferMeters: 50 });
      expectVerticesAreMembers(ring, m.lon, m.lat);
    }
  });

  it('with concavity Infinity is the convex hull', () => {
    const m = ell(12, 12, 41);
    const a = hotspotHull(m.lon, m.lat, { kind: 'concave', concavity: Infinity, bufferMeters: 50 });
    const b = hotspotHull(m.lon, m.lat, { bufferMeters: 50 });
    expect(geometryAreaKm2(a)).toBeCloseTo(geometryAreaKm2(b), 9);
  });

  it('buffers degenerate hotspots like the convex kind', () => {
    const a = hotspotHull([1, 1.001], [2, 2], { kind: 'concave', bufferMeters: 100 });
    const b = hotspotHull([1, 1.001], [2, 2], { bufferMeters: 100 });
    expect(a).toEqual(b);
  });
});

describe('hotspotHull input checks', () => {
  it('rejects members spread over more than a hemisphere, with a message that says what to do', () => {
    expect(() => hotspotHull([0, 90, 180], [0, 0, 0], { bufferMeters: 10 })).toThrow(/within one hemisphere/);
    expect(() => hotspotHull([0, 180], [0, 0], { bufferMeters: 10 })).toThrow(/mean position/);
  });
  it('rejects bad positions and settings', () => {
    expect(() => hotspotHull([0], [91], { bufferMeters: 10 })).toThrow(/latitude/);
    expect(() => hotspotHull([NaN], [0], { bufferMeters: 10 })).toThrow(/longitude/);
    expect(() => hotspotHull([], [], { bufferMeters: 10 })).toThrow(/non-zero/);
    expect(() => hotspotHull([0], [0], { bufferMeters: 0 })).toThrow(/bufferMeters/);
    expect(() => hotspotHull([0], [0], { bufferMeters: 10, kind: 'round' as never })).toThrow(/kind/);
  });
});

describe('cutAtAntimeridian', () => {
  const square = [[175, -5], [185, -5], [185, 5], [175, 5], [175, -5]];

  it('cuts a ring given in unwrapped longitudes into parts on each side', () => {
    const g = cutAtAntimeridian(square);
    if (g.type !== 'MultiPolygon') throw new Error('expected a MultiPolygon');
    expectRfcRings(g);
    const xs = g.coordinates.map((p) => p[0].map((q) => q[0]));
    // source: RFC 7946 §3.1.9 — both parts end exactly on ±180
    expect(xs.map((x) => [Math.min(...x), Math.max(...x)]).sort((a, b) => a[0] - b[0])).toEqual([[-180, -175], [175, 180]]);
    // The cut keeps the area: the parts add up to the uncut ring's.
    expect(geometryAreaKm2(g)).toBeCloseTo((Math.abs(ringSignedExcess(square)) * EARTH_RADIUS_M ** 2) / 1e6, 6);
  });

  it('puts the cut on the great circle of the crossing edge', () => {
    const g = cutAtAntimeridian([[170, 10], [190, 20], [190, 30], [170, 30]]);
    const onSeam = polygonsOf(g).flat(2).filter((p) => Math.abs(p[0]) === 180 && p[1] < 20);
    expect(onSeam.length).toBeGreaterThan(0);
    // source: great-circle latitude at a longitude, tan φ = (tan φ1 sin(λ2−λ) + tan φ2 sin(λ−λ1)) / sin(λ2−λ1)
    // (Williams, "Aviation Formulary", "Latitude of point on GC") — from memory
    const t1 = Math.tan(10 * RAD), t2 = Math.tan(20 * RAD);
    const expected = Math.atan((t1 * Math.sin(10 * RAD) + t2 * Math.sin(10 * RAD)) / Math.sin(20 * RAD)) / RAD;
    for (const p of onSeam) expect(p[1]).toBeCloseTo(expected, 10);
  });

  it('reads wrapped and unwrapped longitudes alike, and any orientation', () => {
    const wrapped = square.map((p) => [wrapLongitude(p[0]), p[1]]);
    expect(cutAtAntimeridian(wrapped)).toEqual(cutAtAntimeridian(square));
    expect(geometryAreaKm2(cutAtAntimeridian([...square].reverse()))).toBeCloseTo(geometryAreaKm2(cutAtAntimeridian(square)), 9);
  });

  it('shifts a ring lying wholly beyond 180 by whole turns', () => {
    const g = cutAtAntimeridian([[190, 0], [200, 0], [200, 10], [190, 10]]);
    expect(g).toEqual({ type: 'Polygon', coordinates: [[[-170, 0], [-160, 0], [-160, 10], [-170, 10], [-170, 0]]] });
  });

  it('cuts a U-shaped ring that crosses the line four times into three parts', () => {
    // A U opening to the east with its two prongs crossing 180.
    const u = [[170, 0], [190, 0], [190, 2], [175, 2], [175, 8], [190, 8], [190, 10], [170, 10]];
    const g = cutAtAntimeridian(u);
    if (g.type !== 'MultiPolygon') throw new Error('expected a MultiPolygon');
    expectRfcRings(g);
    expect(g.coordinates.length).toBe(3);
    expect(g.coordinates.filter((p) => p[0].every((q) => q[0] <= -170 || q[0] === -180)).length).toBe(2);
    expect(geometryAreaKm2(g)).toBeCloseTo((Math.abs(ringSignedExcess(u)) * EARTH_RADIUS_M ** 2) / 1e6, 6);
  });

  it('writes a ring around a pole along the antimeridian to the pole', () => {
    for (const pole of [90, -90]) {
      const ring: number[][] = [];
      for (let k = 0; k < 12; k++) ring.push([-170 + 30 * k, pole * (88 / 90)]);
      expect(ringTurns(ring)).toBe(1);
      const g = cutAtAntimeridian(ring);
      if (g.type !== 'Polygon') throw new Error('expected a Polygon');
      expectRfcRings(g);
      const r = g.coordinates[0].slice(0, -1);
      expect(r.filter((p) => p[1] === pole).map((p) => p[0]).sort((a, b) => a - b)).toEqual([-180, 180]);
      expect(r.filter((p) => Math.abs(p[0]) === 180).length).toBeGreaterThanOrEqual(4);
      // source: spherical cap formula — the 12-gon's area lies between the inscribed and the cap's
      const cap = capKm2((2 * Math.PI * EARTH_RADIUS_M * 2) / 360);
      const a = geometryAreaKm2(g);
      expect(a).toBeLessThan(cap);
      expect(a).toBeGreaterThan(cap * inscribed(12) * 0.999);
    }
  });

  it('unwraps longitudes step by step and counts turns', () => {
    expect(Array.from(unwrapLongitudes([170, -170, -160, 175]))).toEqual([170, 190, 200, 175]);
    expect(ringTurns([[0, 0], [1, 0], [1, 1]])).toBe(0);
    expect(ringTurns([[0, 80], [120, 80], [-120, 80]])).toBe(1);
    expect(ringTurns([[0, 80], [-120, 80], [120, 80]])).toBe(-1);
    expect(wrapDelta(190)).toBe(-170);
    expect(wrapLongitude(180)).toBe(-180);
    expect(() => cutAtAntimeridian([[0, 0], [1, 0]])).toThrow(/3 distinct/);
  });
});

describe('hull fixtures (viewable on a map)', () => {
  // Each input in fixtures/in is a FeatureCollection of member points with the hull options in its
  // own "hull_options" member; fixtures/out holds the written hull next to the members.
  // REGEN=1 rewrites the outputs on purpose; otherwise the written text must match byte for byte
  // (the product promises byte-identical output for the same input).
  const dir = fileURLToPath(new URL('./fixtures/', import.meta.url));
  const names = readdirSync(join(dir, 'in')).filter((f) => f.endsWith('.geojson')).sort();

  it('has fixtures to check', () => {
    expect(names.length).toBeGreaterThanOrEqual(4);
  });

  for (const name of names) {
    it(`writes ${name} as stored`, () => {
      const input = JSON.parse(readFileSync(join(dir, 'in', name), 'utf8'));
      const lon = input.features.map((f: { geometry: { coordinates: number[] } }) => f.geometry.coordinates[0]);
      const lat = input.features.map((f: { geometry: { coordinates: number[] } }) => f.geometry.coordinates[1]);
      const hull = hotspotHull(lon, lat, input.hull_options);
      expectRfcRings(hull);
      expectContainsAll(hull, lon, lat);
      const features = [
        featureString(hull, { area_km2: Number(geometryAreaKm2(hull).toFixed(6)), members: lon.length }, 'hull'),
        ...input.features.map((f: { geometry: GeometryLike }, i: number) => featureString(f.geometry, { member: i })),
      ];
      const text = featureCollectionString(features, bboxOf([hull, ...input.features.map((f: { geometry: GeometryLike }) => f.geometry)])) + '\n';
      const outPath = join(dir, 'out', name);
      if (process.env.REGEN === '1') writeFileSync(outPath, text);
      expect(text).toBe(readFileSync(outPath, 'utf8'));
    });
  }
});
