/**
 * Shared shapes of the pure clustering core. Everything here is typed arrays indexed by the
 * position of the observation in its input (0..n-1); objects are built only at the edges.
 */

/** A set of observations as parallel arrays. Positions are WGS 84 degrees. */
export interface PointSet {
  /** number of observations */
  readonly n: number;
  /** longitude in degrees, −180..180 */
  readonly lon: Float64Array;
  /** latitude in degrees, −90..90 */
  readonly lat: Float64Array;
  /** optional non-negative weight per observation (for example the number of animals seen); null means 1 each */
  readonly weight: Float64Array | null;
}

/** DBSCAN point classes (Ester et al. 1996). Stored as bytes in `Clustering.roles`. */
export const ROLE_NOISE = 0;
export const ROLE_CORE = 1;
export const ROLE_BORDER = 2;
export const ROLE_NAMES = ['noise', 'core', 'border'] as const;

/** A partition of a point set into hotspots and noise. */
export interface Clustering {
  /** hotspot number per observation, 0..count-1, or −1 for noise */
  readonly labels: Int32Array;
  /** ROLE_CORE, ROLE_BORDER or ROLE_NOISE per observation */
  readonly roles: Uint8Array;
  /** number of hotspots */
  readonly count: number;
}

/** Called now and then during long work with the share done, 0..1. */
export type ProgressFn = (done: number) => void;

/** Builds a PointSet from plain arrays (tests, small inputs). */
export function pointSet(lon: ArrayLike<number>, lat: ArrayLike<number>, weight?: ArrayLike<number> | null): PointSet {
  if (lon.length !== lat.length) throw new Error(`lon and lat differ in length (${lon.length} vs ${lat.length})`);
  if (weight && weight.length !== lon.length) throw new Error(`weight has ${weight.length} values for ${lon.length} points`);
  return {
    n: lon.length,
    lon: Float64Array.from(lon),
    lat: Float64Array.from(lat),
    weight: weight ? Float64Array.from(weight) : null,
  };
}
