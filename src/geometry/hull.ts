/**
 * Hotspot hulls: the outline polygon of one hotspot's members, as RFC 7946 geometry.
 *
 * The work happens in the gnomonic projection centred on the members' mean position on the
 * sphere (the normalised mean of their unit vectors). That projection maps great circles to
 * straight lines, so the planar convex hull of the projected members is exactly their spherical
 * convex hull, near the poles and across ±180° alike. The hull's vertices are members, so their
 * own longitudes and latitudes are used on the way back and nothing is lost to the projection.
 *
 * Degenerate hotspots (1 or 2 distinct positions, all members on one great circle, or a hull
 * narrower than MIN_WIDTH_M) are given a buffer: the convex hull of circles of `bufferMeters`
 * around the hull's extreme members, so every hotspot has a non-zero area.
 *
 * Hull edges are great-circle arcs, but GeoJSON readers draw straight lines in longitude and
 * latitude; edges are therefore split along their great circle until the straight line departs
 * from it by at most `edgeToleranceMeters`. Finally the ring is cut at the antimeridian
 * (see antimeridian.ts for the form of cut hulls and of hulls that contain a pole).
 */
import concaveman from 'concaveman';
import { EARTH_RADIUS_M, haversineMeters } from '../core/haversine.js';
import { cutAtAntimeridian, unwrapLongitudes, wrapDelta } from './antimeridian.js';

export type HullKind = 'convex' | 'concave';

export type HullGeometry =
  | { type: 'Polygon'; coordinates: number[][][] }
  | { type: 'MultiPolygon'; coordinates: number[][][][] };

export interface HullOptions {
  /** 'convex' (default) or 'concave'. */
  kind?: HullKind;
  /**
   * Concave hulls only: concaveman's relative concavity, default 2. Smaller values follow the
   * members more closely (1 is detailed, below 1 gets ragged); Infinity gives the convex hull.
   */
  concavity?: number;
  /** Radius in metres of the circles drawn around degenerate hotspots; the caller passes eps / 2. */
  bufferMeters: number;
  /** Vertices per buffer circle, default 32 (the circle polygon is inscribed in the true circle). */
  circleVertices?: number;
  /**
   * Largest allowed gap in metres between a great-circle edge and the straight longitude/latitude
   * line drawn between its ends, default 0.05 m; Infinity keeps only the hull's own vertices.
   */
  edgeToleranceMeters?: number;
}

/** Defaults of the optional hull settings. */
export const HULL_DEFAULTS = {
  kind: 'convex' as HullKind,
  concavity: 2,
  circleVertices: 32,
  edgeToleranceMeters: 0.05,
} as const;

/**
 * Hulls narrower than this many metres are treated as degenerate: at the 7-decimal output
 * precision (≈ 1 cm) they would collapse or flip. */
export const MIN_WIDTH_M = 0.1;
/** Members on one great circle: hull area below this fraction of its extent squared. */
const COLLINEAR_REL = 1e-9;
/** Every member must lie within this angle of the centre (gnomonic scale grows as 1/cos). */
const MAX_SPREAD_DEG = 80;
const MAX_SPLIT_DEPTH = 12;

const RAD = Math.PI / 180;
const MIN_DOT = Math.cos(MAX_SPREAD_DEG * RAD);

/** Orthonormal frame of the gnomonic projection: centre c, east e, north n (unit vectors). */
interface Frame { cx: number; cy: number; cz: number; ex: number; ey: number; ez: number; nx: number; ny: number; nz: number }

function frameAt(cx: number, cy: number, cz: number): Frame {
  const h = Math.hypot(cx, cy);
  // At a pole "east" is undefined; any tangent direction serves the projection.
  const ex = h > 1e-12 ? -cy / h : 0;
  const ey = h > 1e-12 ? cx / h : 1;
  const ez = 0;
  return { cx, cy, cz, ex, ey, ez, nx: cy * ez - cz * ey, ny: cz * ex - cx * ez, nz: cx * ey - cy * ex };
}

/** Members spread too widely for a hull (more than MAX_SPREAD_DEG from their centre, or evenly round the globe). */
export class HullSpreadError extends Error {
  constructor(message: string) {
    super(message);
    this.name = 'HullSpreadError';
  }
}

/** Projects positions (degrees) into xs/ys; throws HullSpreadError if any lies too far from the centre. */
function project(f: Frame, lon: ArrayLike<number>, lat: ArrayLike<number>, xs: Float64Array, ys: Float64Array): void {
  const n = lon.length;
  const u = new Float64Array(3 * n);
  for (let i = 0; i < n; i++) {
    const la = lat[i] * RAD, lo = lon[i] * RAD;
    const c = Math.cos(la);
    u[3 * i] = c * Math.cos(lo);
    u[3 * i + 1] = c * Math.sin(lo);
    u[3 * i + 2] = Math.sin(la);
  }
  projectVectors(f, u, lon, lat, xs, ys);
}

/**
 * Projects unit vectors (stride 3) of the positions lon/lat (degrees, for the error message) into
 * xs/ys; throws HullSpreadError if any lies too far from the centre.
 */
function projectVectors(f: Frame, u: Float64Array, lon: ArrayLike<number>, lat: ArrayLike<number>, xs: Float64Array, ys: Float64Array): void {
  const { cx, cy, cz, ex, ey, ez, nx, ny, nz } = f;
  for (let i = 0, n = lon.length; i < n; i++) {
    const px = u[3 * i], py = u[3 * i + 1], pz = u[3 * i + 2];
    const d = px * cx + py * cy + pz * cz;
    if (!(d >= MIN_DOT)) {
      throw new HullSpreadError(
        `member ${i} at [${lon[i]}, ${lat[i]}] lies more than ${MAX_SPREAD_DEG}° from the centre; ` +
        'a hull needs its members within one hemisphere');
    }
    xs[i] = (px * ex + py * ey + pz * ez) / d;
    ys[i] = (px * nx + py * ny + pz * nz) / d;
  }
}

const cross = (xs: Float64Array, ys: Float64Array, o: number, a: number, b: number): number =>
  (xs[a] - xs[o]) * (ys[b] - ys[o]) - (ys[a] - ys[o]) * (xs[b] - xs[o]);

/**
 * Indices of the planar convex hull of (xs, ys), counter-clockwise, without collinear or
 * repeated vertices (Andrew's monotone chain). Points strictly inside the octagon of the extreme
 * points in 8 directions are dropped first (Akl–Toussaint), so sorting touches only a few points.
 */
export function convexHullIndices(xs: Float64Array, ys: Float64Array): Int32Array {
  const n = xs.length;
  if (n === 0) return new Int32Array(0);
  const ext = new Int32Array(8); // E, NE, N, NW, W, SW, S, SE
  for (let i = 1; i < n; i++) {
    const x = xs[i], y = ys[i];
    if (x > xs[ext[0]]) ext[0] = i;
    if (x + y > xs[ext[1]] + ys[ext[1]]) ext[1] = i;
    if (y > ys[ext[2]]) ext[2] = i;
    if (y - x > ys[ext[3]] - xs[ext[3]]) ext[3] = i;
    if (x < xs[ext[4]]) ext[4] = i;
    if (x + y < xs[ext[5]] + ys[ext[5]]) ext[5] = i;
    if (y < ys[ext[6]]) ext[6] = i;
    if (x - y > xs[ext[7]] - ys[ext[7]]) ext[7] = i;
  }
  const oct: number[] = [];
  for (let k = 0; k < 8; k++) {
    const i = ext[k];
    const last = oct[oct.length - 1];
    if (last === undefined || xs[last] !== xs[i] || ys[last] !== ys[i]) oct.push(i);
  }
  while (oct.length > 1 && xs[oct[0]] === xs[oct[oct.length - 1]] && ys[oct[0]] === ys[oct[oct.length - 1]]) oct.pop();
  const all = new Int32Array(n);
  let m = 0;
  if (oct.length >= 3) {
    // the octagon's edges o→a, so that cross(o, a, i) below is the same product as `cross`
    const e = oct.length;
    const ox = new Float64Array(e), oy = new Float64Array(e), ex = new Float64Array(e), ey = new Float64Array(e);
    for (let k = 0; k < e; k++) {
      const o = oct[k], a = oct[(k + 1) % e];
      ox[k] = xs[o];
      oy[k] = ys[o];
      ex[k] = xs[a] - xs[o];
      ey[k] = ys[a] - ys[o];
    }
    for (let i = 0; i < n; i++) {
      const x = xs[i], y = ys[i];
      for (let k = 0; k < e; k++) {
        if (ex[k] * (y - oy[k]) - ey[k] * (x - ox[k]) <= 0) {
          all[m++] = i;
          break;
        }
      }
    }
  } else {
    for (let i = 0; i < n; i++) all[i] = i;
    m = n;
  }
  // by x, then y, then index; answered with ±1 rather than a difference, which for coordinates is
  // a fraction the engine allocates on the heap at every comparison (the same order: for finite
  // numbers a − b is 0 exactly when a = b)
  const keep = all.subarray(0, m).sort((a, b) => {
    const xa = xs[a], xb = xs[b];
    if (xa !== xb) return xa < xb ? -1 : 1;
    const ya = ys[a], yb = ys[b];
    if (ya !== yb) return ya < yb ? -1 : 1;
    return a - b;
  });
  const h = new Int32Array(2 * m + 1);
  let k = 0;
  for (let t = 0; t < m; t++) {
    const i = keep[t];
    while (k >= 2 && cross(xs, ys, h[k - 2], h[k - 1], i) <= 0) k--;
    h[k++] = i;
  }
  for (let t = m - 2, lower = k + 1; t >= 0; t--) {
    const i = keep[t];
    while (k >= lower && cross(xs, ys, h[k - 2], h[k - 1], i) <= 0) k--;
    h[k++] = i;
  }
  // The chain repeats its first point last; identical positions collapse to one.
  const out: number[] = [];
  const count = k > 1 ? k - 1 : k;
  for (let t = 0; t < count; t++) {
    const i = h[t];
    const last = out[out.length - 1];
    if (last === undefined || xs[last] !== xs[i] || ys[last] !== ys[i]) out.push(i);
  }
  while (out.length > 1 && xs[out[0]] === xs[out[out.length - 1]] && ys[out[0]] === ys[out[out.length - 1]]) out.pop();
  return Int32Array.from(out);
}

/** Planar area (×2) and bounding-box diagonal of a hull given by indices. */
function hullShape(xs: Float64Array, ys: Float64Array, idx: ArrayLike<number>): { area2: number; extent: number } {
  let area2 = 0;
  let minX = Infinity, maxX = -Infinity, minY = Infinity, maxY = -Infinity;
  for (let t = 0; t < idx.length; t++) {
    const a = idx[t], b = idx[(t + 1) % idx.length];
    area2 += xs[a] * ys[b] - xs[b] * ys[a];
    minX = Math.min(minX, xs[a]); maxX = Math.max(maxX, xs[a]);
    minY = Math.min(minY, ys[a]); maxY = Math.max(maxY, ys[a]);
  }
  return { area2: Math.abs(area2), extent: Math.hypot(maxX - minX, maxY - minY) };
}

/**
 * Positions (degrees) of `count` points on the circle of `radiusMeters` around (lon, lat), built
 * exactly on the sphere: q = p·cos δ + (u·cos θ + v·sin θ)·sin δ with u, v unit tangents at p.
 * Valid at the poles, where a bearing-based destination formula breaks down.
 */
export function circlePositions(lonDeg: number, latDeg: number, radiusMeters: number, count: number): { lon: Float64Array; lat: Float64Array } {
  const la = latDeg * RAD, lo = lonDeg * RAD;
  const px = Math.cos(la) * Math.cos(lo), py = Math.cos(la) * Math.sin(lo), pz = Math.sin(la);
  const f = frameAt(px, py, pz);
  const delta = radiusMeters / EARTH_RADIUS_M;
  const cd = Math.cos(delta), sd = Math.sin(delta);
  const lon = new Float64Array(count), lat = new Float64Array(count);
  for (let k = 0; k < count; k++) {
    const th = (2 * Math.PI * k) / count;
    const ct = Math.cos(th) * sd, st = Math.sin(th) * sd;
    const qx = px * cd + f.ex * ct + f.nx * st;
    const qy = py * cd + f.ey * ct + f.ny * st;
    const qz = pz * cd + f.ez * ct + f.nz * st;
    lon[k] = Math.atan2(qy, qx) / RAD;
    lat[k] = Math.atan2(qz, Math.hypot(qx, qy)) / RAD;
  }
  return { lon, lat };
}

/**
 * Append to out the end b of the edge a→b (unwrapped degrees), first inserting great-circle
 * points until the straight longitude/latitude line departs from the arc by at most tolM.
 */
function pushEdge(out: number[][], a0: number, a1: number, b0: number, b1: number, tolM: number, depth: number): void {
  if (depth < MAX_SPLIT_DEPTH && Number.isFinite(tolM)) {
    const ca = Math.cos(a1 * RAD), cb = Math.cos(b1 * RAD);
    const mx = ca * Math.cos(a0 * RAD) + cb * Math.cos(b0 * RAD);
    const my = ca * Math.sin(a0 * RAD) + cb * Math.sin(b0 * RAD);
    const mz = Math.sin(a1 * RAD) + Math.sin(b1 * RAD);
    const straightLon = (a0 + b0) / 2, straightLat = (a1 + b1) / 2;
    if (Math.hypot(mx, my, mz) > 1e-9) {
      let mLon = Math.atan2(my, mx) / RAD;
      mLon += 360 * Math.round((straightLon - mLon) / 360);
      const mLat = Math.atan2(mz, Math.hypot(mx, my)) / RAD;
      if (haversineMeters(mLon, mLat, straightLon, straightLat) > tolM) {
        pushEdge(out, a0, a1, mLon, mLat, tolM, depth + 1);
        pushEdge(out, mLon, mLat, b0, b1, tolM, depth + 1);
        return;
      }
    }
  }
  out.push([b0, b1]);
}

/** Validated options with defaults filled in. */
function settle(options: HullOptions): Required<HullOptions> {
  const o = { ...HULL_DEFAULTS, ...options };
  if (o.kind !== 'convex' && o.kind !== 'concave') throw new Error(`hotspotHull: kind must be 'convex' or 'concave', got ${String(o.kind)}`);
  if (!(o.bufferMeters > 0) || !Number.isFinite(o.bufferMeters) || o.bufferMeters > 1e6) {
    throw new Error(`hotspotHull: bufferMeters must be a positive number of metres up to 1 000 000, got ${o.bufferMeters}`);
  }
  if (!(o.concavity >= 0)) throw new Error(`hotspotHull: concavity must be ≥ 0 (default 2), got ${o.concavity}`);
  if (!Number.isInteger(o.circleVertices) || o.circleVertices < 8) throw new Error(`hotspotHull: circleVertices must be an integer ≥ 8, got ${o.circleVertices}`);
  if (!(o.edgeToleranceMeters > 0)) throw new Error(`hotspotHull: edgeToleranceMeters must be > 0 (Infinity disables edge splitting), got ${o.edgeToleranceMeters}`);
  return o;
}

/**
 * Ring of the hull before edge splitting and cutting: [longitude, latitude] in degrees,
 * counter-clockwise as seen from outside the sphere, not closed. Convex-hull vertices are members'
 * own positions; buffer vertices lie on circles of bufferMeters around members.
 */
export function hullVertices(lon: ArrayLike<number>, lat: ArrayLike<number>, options: HullOptions): { ring: number[][]; buffered: boolean } {
  const o = settle(options);
  const n = lon.length;
  if (n === 0 || lat.length !== n) throw new Error(`hotspotHull: need the same, non-zero number of longitudes and latitudes (got ${n} and ${lat.length})`);
  let sx = 0, sy = 0, sz = 0;
  // unit vectors kept for the projection, so each position's trigonometry runs once
  const u = new Float64Array(3 * n);
  for (let i = 0; i < n; i++) {
    if (!Number.isFinite(lon[i]) || !(Math.abs(lat[i]) <= 90)) {
      throw new Error(`hotspotHull: member ${i} has an invalid position [${lon[i]}, ${lat[i]}]; longitude must be finite, latitude within [-90, 90]`);
    }
    const la = lat[i] * RAD, lo = lon[i] * RAD;
    const c = Math.cos(la);
    const px = c * Math.cos(lo), py = c * Math.sin(lo), pz = Math.sin(la);
    u[3 * i] = px; u[3 * i + 1] = py; u[3 * i + 2] = pz;
    sx += px; sy += py; sz += pz;
  }
  const len = Math.hypot(sx, sy, sz);
  if (!(len > 1e-9 * n)) throw new HullSpreadError('the members are spread evenly round the globe; they have no mean position');
  const frame = frameAt(sx / len, sy / len, sz / len);
  const xs = new Float64Array(n), ys = new Float64Array(n);
  projectVectors(frame, u, lon, lat, xs, ys);
  const hull = convexHullIndices(xs, ys);
  const shape = hullShape(xs, ys, hull);
  const widthM = shape.extent > 0 ? (shape.area2 / shape.extent) * EARTH_RADIUS_M : 0;
  const degenerate = hull.length < 3 || shape.area2 <= COLLINEAR_REL * shape.extent * shape.extent || widthM < MIN_WIDTH_M;

  if (degenerate) {
    const m = o.circleVertices;
    const cl = new Float64Array(hull.length * m), ca = new Float64Array(hull.length * m);
    for (let t = 0; t < hull.length; t++) {
      const c = circlePositions(lon[hull[t]], lat[hull[t]], o.bufferMeters, m);
      cl.set(c.lon, t * m);
      ca.set(c.lat, t * m);
    }
    const bx = new Float64Array(cl.length), by = new Float64Array(cl.length);
    project(frame, cl, ca, bx, by);
    const bh = convexHullIndices(bx, by);
    return { ring: Array.from(bh, (i) => [cl[i], ca[i]]), buffered: true };
  }

  if (o.kind === 'concave' && Number.isFinite(o.concavity)) {
    const pts: number[][] = new Array(n);
    for (let i = 0; i < n; i++) pts[i] = [xs[i], ys[i], i];
    const ring = concaveman(pts, o.concavity, 0);
    const out: number[][] = [];
    for (const p of ring) {
      const last = out[out.length - 1];
      const i = p[2];
      if (last && last[0] === lon[i] && last[1] === lat[i]) continue;
      out.push([lon[i], lat[i], xs[i], ys[i]]);
    }
    while (out.length > 1 && out[0][0] === out[out.length - 1][0] && out[0][1] === out[out.length - 1][1]) out.pop();
    let s = 0;
    for (let t = 0, u = out.length - 1; t < out.length; u = t++) s += out[u][2] * out[t][3] - out[t][2] * out[u][3];
    if (s < 0) out.reverse();
    return { ring: out.map((p) => [p[0], p[1]]), buffered: false };
  }
  return { ring: Array.from(hull, (i) => [lon[i], lat[i]]), buffered: false };
}

/**
 * The hull polygon of one hotspot's members as RFC 7946 geometry.
 *
 * @param lon members' longitudes in degrees
 * @param lat members' latitudes in degrees
 * @param options kind ('convex' default, or 'concave' via concaveman with `concavity`, default 2);
 *   bufferMeters: radius in metres of the buffer around degenerate hotspots (pass eps / 2);
 *   circleVertices (32), edgeToleranceMeters (0.05 m) — see HullOptions.
 * @returns a Polygon, or a MultiPolygon when the hull crosses the antimeridian; rings closed,
 *   exterior counter-clockwise, no repeated consecutive vertices. A hull containing a pole is a
 *   Polygon that runs along the antimeridian to the pole and along the pole (see antimeridian.ts).
 * @throws when members are more than 80° from their mean position or input is invalid.
 */
export function hotspotHull(lon: ArrayLike<number>, lat: ArrayLike<number>, options: HullOptions): HullGeometry {
  const tol = options.edgeToleranceMeters ?? HULL_DEFAULTS.edgeToleranceMeters;
  const { ring } = hullVertices(lon, lat, options);
  const lons = unwrapLongitudes(ring.map((p) => p[0]));
  const dense: number[][] = [[lons[0], ring[0][1]]];
  for (let t = 0; t < ring.length; t++) {
    const u = (t + 1) % ring.length;
    // Keep the closing edge on the same longitude branch as the rest of the ring.
    const bLon = u === 0 ? lons[t] + wrapDelta(lons[0] - lons[t]) : lons[u];
    pushEdge(dense, lons[t], ring[t][1], bLon, ring[u][1], tol, 0);
  }
  dense.pop(); // the closing edge's end is the start again (possibly one turn on)
  return cutAtAntimeridian(dense);
}
