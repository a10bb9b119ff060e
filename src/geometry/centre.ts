/**
 * The centre of a group of observations: the mean position on the sphere, and the medoid (the
 * member nearest to that mean). Averaging longitudes and latitudes directly goes wrong near ±180°
 * (the mean of 179° and −179° would be 0°) and near the poles; averaging unit vectors in 3-D has
 * neither problem, because the sphere has no seam in 3-D.
 */
import { haversineMeters, toDegrees, toRadians } from '../core/haversine.js';

/**
 * Below this length of the mean vector, relative to the total weight, its direction is decided
 * by rounding noise (about 1e-16 per summed vector) rather than by the members; the fallback
 * applies. 1e-12 leaves a wide margin over that noise even for millions of members.
 */
const DEGENERATE_MEAN = 1e-12;

/**
 * Mean position on the sphere: the weighted sum of the members' unit vectors, scaled back onto
 * the sphere (the "mean direction" of directional statistics), returned in degrees.
 *
 * Fallback: when the summed vector is about zero (for example two members at antipodes, members
 * spread evenly around a great circle, or all weights zero), no position represents the members
 * better than another; the position of the first member with the greatest weight (in `members`
 * order, or input order) is returned instead, so the centre is always a real member position and
 * the result stays deterministic. At the poles the longitude is arbitrary and comes out as
 * atan2 of two tiny numbers; the position is still right.
 *
 * @param lon longitude per observation, degrees
 * @param lat latitude per observation, degrees
 * @param weight optional non-negative weight per observation; null/undefined means 1 each
 * @param members optional indices of the members to average; all observations when omitted
 * @returns the centre, degrees, longitude in −180..180
 * @throws RangeError when there are no members
 */
export function sphericalMean(
  lon: ArrayLike<number>,
  lat: ArrayLike<number>,
  weight?: ArrayLike<number> | null,
  members?: Int32Array | null,
): { lon: number; lat: number } {
  const m = members ? members.length : lon.length;
  if (m === 0) throw new RangeError('sphericalMean needs at least one member');
  let sx = 0, sy = 0, sz = 0, total = 0;
  let heaviest = -1;
  let heaviestWeight = -Infinity;
  for (let k = 0; k < m; k++) {
    const i = members ? members[k] : k;
    const w = weight ? weight[i] : 1;
    const la = toRadians(lat[i]);
    const lo = toRadians(lon[i]);
    const c = Math.cos(la) * w;
    sx += c * Math.cos(lo);
    sy += c * Math.sin(lo);
    sz += Math.sin(la) * w;
    total += w;
    if (w > heaviestWeight) {
      heaviestWeight = w;
      heaviest = i;
    }
  }
  return meanFromSums(sx, sy, sz, total, lon[heaviest], lat[heaviest]);
}

/**
 * Turns a summed (weighted) unit vector into a position, or returns the fallback position when
 * the sum is degenerate (see `sphericalMean`). Shared with the per-hotspot figures, which
 * accumulate the sums themselves in one pass over all observations.
 *
 * @param sx summed x of the weighted unit vectors
 * @param sy summed y
 * @param sz summed z
 * @param totalWeight sum of the weights
 * @param fallbackLon longitude (degrees) to return when the sum is degenerate
 * @param fallbackLat latitude (degrees) to return when the sum is degenerate
 */
export function meanFromSums(
  sx: number,
  sy: number,
  sz: number,
  totalWeight: number,
  fallbackLon: number,
  fallbackLat: number,
): { lon: number; lat: number } {
  const norm = Math.sqrt(sx * sx + sy * sy + sz * sz);
  if (!(totalWeight > 0) || !(norm > DEGENERATE_MEAN * totalWeight)) return { lon: fallbackLon, lat: fallbackLat };
  const lat = toDegrees(Math.asin(Math.max(-1, Math.min(1, sz / norm))));
  const lon = toDegrees(Math.atan2(sy, sx));
  return { lon, lat };
}

/**
 * The member nearest (great-circle distance) to a given centre; ties go to the lowest input index.
 *
 * @param lon longitude per observation, degrees
 * @param lat latitude per observation, degrees
 * @param centre the position to measure from, degrees (usually `sphericalMean` of the same members)
 * @param members optional indices of the candidates; all observations when omitted
 * @returns the input index of the medoid
 * @throws RangeError when there are no members
 */
export function medoidIndex(
  lon: ArrayLike<number>,
  lat: ArrayLike<number>,
  centre: { lon: number; lat: number },
  members?: Int32Array | null,
): number {
  const m = members ? members.length : lon.length;
  if (m === 0) throw new RangeError('medoidIndex needs at least one member');
  let best = -1;
  let bestMeters = Infinity;
  for (let k = 0; k < m; k++) {
    const i = members ? members[k] : k;
    const d = haversineMeters(centre.lon, centre.lat, lon[i], lat[i]);
    if (d < bestMeters || (d === bestMeters && i < best)) {
      bestMeters = d;
      best = i;
    }
  }
  return best;
}
