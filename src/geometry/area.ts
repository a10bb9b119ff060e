/**
 * Area of hull polygons on the sphere of the IUGG mean Earth radius (6 371 008.8 m).
 *
 * Every edge is taken as the great-circle arc between its ends. The area is the line integral
 * ∮ sin φ dλ around the ring (Green's theorem on the sphere; see Chamberlain & Duquette 2007,
 * "Some algorithms for polygons on a sphere", JPL Publication 07-03), evaluated exactly per edge
 * as the spherical excess E of the quadrilateral bounded by the edge, its two meridians and the
 * equator:
 *
 *   tan(E/2) = tan(Δλ/2) · (tan(φ1/2) + tan(φ2/2)) / (1 + tan(φ1/2) · tan(φ2/2))
 *
 * (the same per-edge term GeographicLib uses for the sphere; Karney 2013, "Algorithms for
 * geodesics", J. Geodesy 87). Because only longitude differences enter, rings may use unwrapped
 * longitudes, and a ring that follows the antimeridian up to a pole and along it (the RFC 7946
 * form of a polygon that contains a pole) needs no special case: the edge along the pole has
 * φ1 = φ2 = ±90° and contributes exactly its Δλ, the area of the lune from the equator to the pole.
 */
import { EARTH_RADIUS_M } from '../core/haversine.js';
import type { HullGeometry } from './hull.js';

const RAD = Math.PI / 180;
/** Longer edges (in longitude) are split so that no single term is ambiguous near Δλ = 180°. */
const MAX_STEP_DEG = 90;

function edgeExcess(lon1: number, lat1: number, lon2: number, lat2: number): number {
  const half = ((lon2 - lon1) * RAD) / 2;
  const t1 = Math.tan((lat1 * RAD) / 2);
  const t2 = Math.tan((lat2 * RAD) / 2);
  return 2 * Math.atan2(Math.sin(half) * (t1 + t2), Math.cos(half) * (1 + t1 * t2));
}

/**
 * Signed area of one ring in steradians (unit sphere), positive when the ring runs
 * counter-clockwise in the (longitude, latitude) plane. The ring may be closed (first position
 * repeated last) or open. Longitudes in degrees, unwrapped or within [−180, 180]; latitudes in
 * degrees.
 */
export function ringSignedExcess(ring: ArrayLike<ArrayLike<number>>): number {
  const n = ring.length;
  let sum = 0;
  for (let i = 0; i < n; i++) {
    const a = ring[i];
    const b = ring[(i + 1) % n];
    const dLon = b[0] - a[0];
    const steps = Math.max(1, Math.ceil(Math.abs(dLon) / MAX_STEP_DEG));
    if (steps === 1) {
      sum += edgeExcess(a[0], a[1], b[0], b[1]);
      continue;
    }
    // An edge this long in longitude only occurs along a pole or the antimeridian-to-pole form;
    // split it into pieces at linearly interpolated positions.
    for (let k = 0; k < steps; k++) {
      const f0 = k / steps;
      const f1 = (k + 1) / steps;
      sum += edgeExcess(
        a[0] + dLon * f0, a[1] + (b[1] - a[1]) * f0,
        a[0] + dLon * f1, a[1] + (b[1] - a[1]) * f1,
      );
    }
  }
  // ∮ sin φ dλ counter-clockwise is minus the enclosed area (Green's theorem).
  return -sum;
}

/**
 * Area in km² of a hull polygon or multipolygon on the sphere of radius 6 371 008.8 m.
 * Each polygon's area is |exterior| − Σ|holes|; parts of a MultiPolygon (e.g. both sides of a
 * hull cut at the antimeridian) are summed.
 */
export function geometryAreaKm2(g: HullGeometry): number {
  const polygons = g.type === 'Polygon' ? [g.coordinates] : g.coordinates;
  let sr = 0;
  for (const rings of polygons) {
    if (rings.length === 0) continue;
    let a = Math.abs(ringSignedExcess(rings[0]));
    for (let h = 1; h < rings.length; h++) a -= Math.abs(ringSignedExcess(rings[h]));
    sr += a;
  }
  return (sr * EARTH_RADIUS_M * EARTH_RADIUS_M) / 1e6;
}
