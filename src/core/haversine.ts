/**
 * Distances on the sphere. Roost measures every distance as the great-circle distance on a sphere
 * of the IUGG mean Earth radius; within 0.6 % of the WGS 84 geodesic everywhere.
 */

/** IUGG mean Earth radius R1 = (2a + b) / 3, in metres. */
export const EARTH_RADIUS_M = 6_371_008.8;

const RAD = Math.PI / 180;

/**
 * Great-circle distance in metres between two positions given in degrees (haversine formula,
 * numerically stable for small distances).
 */
export function haversineMeters(lon1: number, lat1: number, lon2: number, lat2: number): number {
  const dLat = (lat2 - lat1) * RAD;
  const dLon = (lon2 - lon1) * RAD;
  const s1 = Math.sin(dLat / 2);
  const s2 = Math.sin(dLon / 2);
  const h = s1 * s1 + Math.cos(lat1 * RAD) * Math.cos(lat2 * RAD) * s2 * s2;
  return 2 * EARTH_RADIUS_M * Math.asin(Math.min(1, Math.sqrt(h)));
}

/**
 * Straight-line (chord) length through the unit sphere for a ground distance in metres.
 * Chord length grows monotonically with great-circle distance, so "within d metres" is
 * the same test as "chord ≤ chordForMeters(d)". Capped at 2 (antipodes).
 */
export function chordForMeters(meters: number): number {
  const angle = meters / EARTH_RADIUS_M;
  if (angle >= Math.PI) return 2;
  return 2 * Math.sin(angle / 2);
}

/** Ground distance in metres for a squared chord length on the unit sphere. */
export function metersForChord2(chord2: number): number {
  const half = Math.sqrt(chord2) / 2;
  return 2 * EARTH_RADIUS_M * Math.asin(half >= 1 ? 1 : half);
}

/**
 * Unit vectors (x, y, z interleaved, stride 3) for every position; x towards (0°, 0°),
 * z towards the North Pole.
 */
export function unitVectors(lon: Float64Array, lat: Float64Array): Float64Array {
  const n = lon.length;
  const xyz = new Float64Array(n * 3);
  for (let i = 0; i < n; i++) {
    const la = lat[i] * RAD;
    const lo = lon[i] * RAD;
    const c = Math.cos(la);
    xyz[3 * i] = c * Math.cos(lo);
    xyz[3 * i + 1] = c * Math.sin(lo);
    xyz[3 * i + 2] = Math.sin(la);
  }
  return xyz;
}

/** Degrees to radians. */
export const toRadians = (deg: number): number => deg * RAD;
/** Radians to degrees. */
export const toDegrees = (rad: number): number => rad / RAD;
