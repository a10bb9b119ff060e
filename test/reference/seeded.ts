/**
 * Seeded random point sets for tests and benchmarks. The same seed always gives the same points,
 * so failures reproduce and benchmark runs compare like with like.
 *
 * Offsets in metres are turned into positions with the spherical destination-point formula
 * (great circle from a start point along an initial bearing), so patches keep their true ground
 * size at any latitude, near the poles and across ±180°.
 */
import { EARTH_RADIUS_M } from '../../src/core/haversine.js';
import { pointSet, type PointSet } from '../../src/core/types.js';

const RAD = Math.PI / 180;

/** A seeded source of random numbers. */
export interface Rng {
  /** uniform in [0, 1) */
  next(): number;
  /** standard normal (mean 0, sd 1) */
  normal(): number;
  /** integer in 0..n-1 */
  int(n: number): number;
}

/**
 * mulberry32 (Tommy Ettinger's 32-bit generator, public domain): tiny, fast, and good enough for
 * test data. Normals by the Box–Muller transform.
 */
export function rng(seed: number): Rng {
  let a = seed >>> 0;
  const next = (): number => {
    a = (a + 0x6d2b79f5) | 0;
    let t = Math.imul(a ^ (a >>> 15), 1 | a);
    t = (t + Math.imul(t ^ (t >>> 7), 61 | t)) ^ t;
    return ((t ^ (t >>> 14)) >>> 0) / 4294967296;
  };
  let spare = NaN;
  return {
    next,
    normal(): number {
      if (!Number.isNaN(spare)) {
        const s = spare;
        spare = NaN;
        return s;
      }
      let u = next();
      while (u === 0) u = next();
      const v = next();
      const r = Math.sqrt(-2 * Math.log(u));
      spare = r * Math.sin(2 * Math.PI * v);
      return r * Math.cos(2 * Math.PI * v);
    },
    int(n: number): number {
      return Math.floor(next() * n);
    },
  };
}

/** Longitude wrapped into −180..180 (degrees). */
export function wrapLon(lon: number): number {
  const w = ((((lon + 180) % 360) + 360) % 360) - 180;
  return w === -180 && lon > 0 ? 180 : w;
}

/**
 * Position reached from (lon, lat) after `meters` along the great circle with initial bearing
 * `bearingRad` (clockwise from north), on the sphere of radius EARTH_RADIUS_M.
 * source: spherical destination-point formula, e.g. Williams, "Aviation Formulary" (δ = d/R).
 */
export function destination(lon: number, lat: number, bearingRad: number, meters: number): [number, number] {
  const d = meters / EARTH_RADIUS_M;
  const p1 = lat * RAD;
  const l1 = lon * RAD;
  if (Math.abs(lat) === 90) {
    // At a pole every direction is south (north); read the bearing as measured from the
    // meridian `lon`, so that different bearings still give different longitudes.
    const l2 = lat > 0 ? l1 + Math.PI - bearingRad : l1 + bearingRad;
    return [wrapLon(l2 / RAD), lat > 0 ? 90 - d / RAD : -90 + d / RAD];
  }
  const sinP2 = Math.sin(p1) * Math.cos(d) + Math.cos(p1) * Math.sin(d) * Math.cos(bearingRad);
  const p2 = Math.asin(Math.max(-1, Math.min(1, sinP2)));
  const l2 = l1 + Math.atan2(Math.sin(bearingRad) * Math.sin(d) * Math.cos(p1), Math.cos(d) - Math.sin(p1) * sinP2);
  return [wrapLon(l2 / RAD), p2 / RAD];
}

/** Growing list of positions (and optional weights) that becomes a PointSet at the end. */
export class PointBuilder {
  readonly lon: number[] = [];
  readonly lat: number[] = [];
  readonly weight: number[] = [];

  add(lon: number, lat: number, weight = 1): this {
    this.lon.push(lon);
    this.lat.push(lat);
    this.weight.push(weight);
    return this;
  }

  /** A round-2D-gaussian patch: offsets with standard deviation `sigmaMeters` on each ground axis. */
  gaussian(r: Rng, lon: number, lat: number, sigmaMeters: number, count: number): this {
    for (let k = 0; k < count; k++) {
      const east = r.normal() * sigmaMeters;
      const north = r.normal() * sigmaMeters;
      const [x, y] = destination(lon, lat, Math.atan2(east, north), Math.hypot(east, north));
      this.add(x, y);
    }
    return this;
  }

  /** Points uniform over a ground disc of radius `radiusMeters` (uniform area for radii ≪ R). */
  uniformDisc(r: Rng, lon: number, lat: number, radiusMeters: number, count: number): this {
    for (let k = 0; k < count; k++) {
      const [x, y] = destination(lon, lat, r.next() * 2 * Math.PI, radiusMeters * Math.sqrt(r.next()));
      this.add(x, y);
    }
    return this;
  }

  /** Shuffles the points in place (seeded Fisher–Yates), so input order carries no spatial pattern. */
  shuffle(r: Rng): this {
    for (let i = this.lon.length - 1; i > 0; i--) {
      const j = r.int(i + 1);
      [this.lon[i], this.lon[j]] = [this.lon[j], this.lon[i]];
      [this.lat[i], this.lat[j]] = [this.lat[j], this.lat[i]];
      [this.weight[i], this.weight[j]] = [this.weight[j], this.weight[i]];
    }
    return this;
  }

  build(withWeights = false): PointSet {
    return pointSet(this.lon, this.lat, withWeights ? this.weight : null);
  }
}

/** Options of `patchesSet`. */
export interface PatchesOptions {
  /** centre of the region, degrees */
  lon: number;
  lat: number;
  /** patches are centred within this ground radius of the region centre, metres */
  spreadMeters: number;
  patches: number;
  pointsPerPatch: number;
  /** patch standard deviation in metres */
  sigmaMeters: number;
  /** extra uniform points over the region */
  background: number;
}

/** Several gaussian patches plus uniform background around one centre, shuffled. */
export function patchesSet(seed: number, o: PatchesOptions): PointSet {
  const r = rng(seed);
  const b = new PointBuilder();
  for (let p = 0; p < o.patches; p++) {
    const [cx, cy] = destination(o.lon, o.lat, r.next() * 2 * Math.PI, o.spreadMeters * Math.sqrt(r.next()));
    b.gaussian(r, cx, cy, o.sigmaMeters * (0.5 + r.next()), o.pointsPerPatch);
  }
  b.uniformDisc(r, o.lon, o.lat, o.spreadMeters * 1.2, o.background);
  return b.shuffle(r).build();
}

/** Mid-latitude patches (Europe), eps ≈ 100–300 m makes a mix of hotspots, borders and noise. */
export const midLatitudeSet = (seed: number): PointSet =>
  patchesSet(seed, { lon: 8.5, lat: 47.4, spreadMeters: 3000, patches: 8, pointsPerPatch: 60, sigmaMeters: 150, background: 150 });

/** Patches around 80° N, where a degree of longitude is only ~19 km. */
export const highLatitudeSet = (seed: number): PointSet =>
  patchesSet(seed, { lon: 15, lat: 80, spreadMeters: 3000, patches: 8, pointsPerPatch: 60, sigmaMeters: 150, background: 150 });

/** Patches within a few km of the North Pole: longitudes take every value, some hotspots span the pole. */
export const poleSet = (seed: number): PointSet =>
  patchesSet(seed, { lon: 0, lat: 90, spreadMeters: 2500, patches: 8, pointsPerPatch: 60, sigmaMeters: 150, background: 150 });

/** Patches straddling ±180° near Fiji: hotspots hold points with longitudes near both +180 and −180. */
export const antimeridianSet = (seed: number): PointSet =>
  patchesSet(seed, { lon: 180, lat: -17, spreadMeters: 2500, patches: 8, pointsPerPatch: 60, sigmaMeters: 150, background: 150 });

/**
 * Patches with integer weights 0..4 (sums are exact in floating point, so weighted core tests
 * cannot differ by summation order).
 */
export function weightedSet(seed: number): PointSet {
  const base = patchesSet(seed, { lon: -71.1, lat: 42.3, spreadMeters: 3000, patches: 8, pointsPerPatch: 40, sigmaMeters: 150, background: 150 });
  const r = rng(seed ^ 0x9e3779b9);
  const w = new Float64Array(base.n);
  for (let i = 0; i < base.n; i++) w[i] = r.int(5);
  return { ...base, weight: w };
}

/** A set with many exact duplicate positions (repeated sightings at one spot) mixed with patches. */
export function duplicatesSet(seed: number): PointSet {
  const r = rng(seed);
  const b = new PointBuilder();
  b.gaussian(r, 151.2, -33.9, 200, 120);
  b.uniformDisc(r, 151.2, -33.9, 3000, 80);
  const m = b.lon.length;
  for (let k = 0; k < 150; k++) {
    const j = r.int(m);
    const copies = 1 + r.int(6);
    for (let c = 0; c < copies; c++) b.add(b.lon[j], b.lat[j]);
  }
  return b.shuffle(r).build();
}

/** Options of `realisticSet`. */
export interface RealisticOptions {
  /** region centre, degrees (default 10.0, 51.0) */
  lon?: number;
  lat?: number;
  /** region radius in metres (default 200 000) */
  regionMeters?: number;
  /** share of uniform background points (default 0.15) */
  backgroundShare?: number;
}

/**
 * Benchmark-like data: many gaussian patches of varied size (sigma 40 m – 3 km, log-uniform;
 * point counts drawn from a heavy-tailed spread) over a region a few hundred km across, plus
 * about 15 % uniform background, shuffled. Exactly `n` points.
 */
export function realisticSet(n: number, seed: number, o: RealisticOptions = {}): PointSet {
  const lon0 = o.lon ?? 10.0;
  const lat0 = o.lat ?? 51.0;
  const region = o.regionMeters ?? 200_000;
  const share = o.backgroundShare ?? 0.15;
  const r = rng(seed);
  const lon = new Float64Array(n);
  const lat = new Float64Array(n);
  const background = Math.round(n * share);
  const clustered = n - background;
  const patches = Math.max(5, Math.round(clustered / 400));
  // heavy-tailed patch sizes: weights e^(3u), normalised to the clustered total
  const shares = new Float64Array(patches);
  let total = 0;
  for (let p = 0; p < patches; p++) total += shares[p] = Math.exp(3 * r.next());
  let k = 0;
  for (let p = 0; p < patches; p++) {
    const count = p === patches - 1 ? clustered - k : Math.min(clustered - k, Math.round((shares[p] / total) * clustered));
    const [cx, cy] = destination(lon0, lat0, r.next() * 2 * Math.PI, region * Math.sqrt(r.next()));
    const sigma = 40 * Math.exp(r.next() * Math.log(3000 / 40));
    for (let c = 0; c < count; c++, k++) {
      const east = r.normal() * sigma;
      const north = r.normal() * sigma;
      const [x, y] = destination(cx, cy, Math.atan2(east, north), Math.hypot(east, north));
      lon[k] = x;
      lat[k] = y;
    }
  }
  for (; k < n; k++) {
    const [x, y] = destination(lon0, lat0, r.next() * 2 * Math.PI, region * Math.sqrt(r.next()));
    lon[k] = x;
    lat[k] = y;
  }
  for (let i = n - 1; i > 0; i--) {
    const j = r.int(i + 1);
    const tx = lon[i], ty = lat[i];
    lon[i] = lon[j];
    lat[i] = lat[j];
    lon[j] = tx;
    lat[j] = ty;
  }
  return { n, lon, lat, weight: null };
}

/** Uniform points over the whole sphere (uniform in area). */
export function globalUniformSet(n: number, seed: number): PointSet {
  const r = rng(seed);
  const lon = new Float64Array(n);
  const lat = new Float64Array(n);
  for (let i = 0; i < n; i++) {
    lon[i] = r.next() * 360 - 180;
    lat[i] = Math.asin(2 * r.next() - 1) / RAD;
  }
  return { n, lon, lat, weight: null };
}

/** n positions scattered uniformly over a disc of radiusM metres around (lon, lat); seeded. */
export function discPositions(seed: number, n: number, lon: number, lat: number, radiusM: number): { lon: number[]; lat: number[] } {
  const r = rng(seed);
  const out = { lon: [] as number[], lat: [] as number[] };
  for (let i = 0; i < n; i++) {
    const [x, y] = destination(lon, lat, r.next() * 2 * Math.PI, radiusM * Math.sqrt(r.next()));
    out.lon.push(x);
    out.lat.push(y);
  }
  return out;
}
