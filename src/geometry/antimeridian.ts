/**
 * Cutting rings at the antimeridian, as RFC 7946 §3.1.9 asks: a shape that crosses ±180° is
 * written as a MultiPolygon whose parts lie within [−180, 180], each part's cut edge lying
 * exactly on +180 or −180.
 *
 * Rings come in with unwrapped longitudes: consecutive positions differ by at most 180°, so a
 * ring near 180° may run on to 185° instead of jumping to −175°. Seen that way the ring is an
 * ordinary planar polygon; it is split along the lines λ = 180° + k·360° and every piece is
 * shifted by a whole number of turns back into [−180, 180].
 *
 * A ring that winds once around the pole axis encloses a pole. It is written the RFC 7946 way:
 * one polygon that runs from −180 to +180 along the ring, up (or down) the antimeridian to the
 * pole, along the pole from +180 back to −180, and down the antimeridian to its start. Of the two
 * poles, the one giving the smaller enclosed area is taken.
 *
 * Where an edge crosses a cut line, the crossing latitude is that of the great circle through the
 * edge's ends, so the parts' areas add up exactly to the area of the uncut ring.
 */
import { ringSignedExcess } from './area.js';
import type { HullGeometry } from './hull.js';

const RAD = Math.PI / 180;

/** A longitude difference in degrees brought into (−180, 180]. */
export function wrapDelta(deltaDeg: number): number {
  let d = deltaDeg % 360;
  if (d > 180) d -= 360;
  else if (d <= -180) d += 360;
  return d;
}

/** A longitude in degrees brought into [−180, 180); 180 itself maps to −180. */
export function wrapLongitude(lonDeg: number): number {
  const w = (((lonDeg + 180) % 360) + 360) % 360 - 180;
  return w === 0 ? 0 : w; // no −0
}

/**
 * Unwrapped copy of a sequence of longitudes in degrees: the first is kept, each next one is
 * moved by whole turns so that it differs from its predecessor by at most 180°.
 */
export function unwrapLongitudes(lonDeg: ArrayLike<number>): Float64Array {
  const n = lonDeg.length;
  const out = new Float64Array(n);
  if (n === 0) return out;
  out[0] = lonDeg[0];
  for (let i = 1; i < n; i++) out[i] = out[i - 1] + wrapDelta(lonDeg[i] - lonDeg[i - 1]);
  return out;
}

/**
 * Net number of turns a closed ring makes around the pole axis: 0 when it encloses neither pole,
 * +1 or −1 (eastward or westward) when it encloses one. Edges are taken the short way round.
 */
export function ringTurns(ring: ArrayLike<ArrayLike<number>>): number {
  const n = ring.length;
  let total = 0;
  for (let i = 0; i < n; i++) total += wrapDelta(ring[(i + 1) % n][0] - ring[i][0]);
  return Math.round(total / 360);
}

/**
 * Latitude in degrees where the great circle through positions a and b (degrees, any
 * longitude branch) crosses the meridian lonDeg. Falls back to straight interpolation when the
 * edge lies in the meridian plane.
 */
export function crossingLatitude(a: ArrayLike<number>, b: ArrayLike<number>, lonDeg: number): number {
  if (a[0] === lonDeg) return a[1];
  if (b[0] === lonDeg) return b[1];
  const ca = Math.cos(a[1] * RAD);
  const cb = Math.cos(b[1] * RAD);
  const ax = ca * Math.cos(a[0] * RAD), ay = ca * Math.sin(a[0] * RAD), az = Math.sin(a[1] * RAD);
  const bx = cb * Math.cos(b[0] * RAD), by = cb * Math.sin(b[0] * RAD), bz = Math.sin(b[1] * RAD);
  // Normal of the meridian plane of lonDeg.
  const nx = -Math.sin(lonDeg * RAD), ny = Math.cos(lonDeg * RAD);
  const da = nx * ax + ny * ay;
  const db = nx * bx + ny * by;
  const f = (lonDeg - a[0]) / (b[0] - a[0]);
  if (da === db) return a[1] + (b[1] - a[1]) * f;
  const t = da / (da - db);
  const px = ax + t * (bx - ax), py = ay + t * (by - ay), pz = az + t * (bz - az);
  const lat = Math.atan2(pz, Math.hypot(px, py)) / RAD;
  // Guard against a numerically useless answer (edge almost along the meridian plane).
  return Number.isFinite(lat) ? lat : a[1] + (b[1] - a[1]) * f;
}

type Ring = number[][];

/** Open copy of a ring: closing duplicate and consecutive duplicates removed. */
function openRing(ring: ArrayLike<ArrayLike<number>>): Ring {
  const out: Ring = [];
  for (let i = 0; i < ring.length; i++) {
    const p = ring[i];
    const q = out[out.length - 1];
    if (q && q[0] === p[0] && q[1] === p[1]) continue;
    out.push([p[0], p[1]]);
  }
  while (out.length > 1) {
    const f = out[0], l = out[out.length - 1];
    if (f[0] === l[0] && f[1] === l[1]) out.pop();
    else break;
  }
  return out;
}

/** Planar shoelace sum in (lon, lat); positive for counter-clockwise. */
function shoelace(ring: Ring): number {
  let s = 0;
  const n = ring.length;
  for (let i = 0, j = n - 1; i < n; j = i++) s += (ring[j][0] - ring[i][0]) * (ring[j][1] + ring[i][1]);
  return s / 2;
}

const band = (x: number): number => Math.floor((x + 180) / 360);

/**
 * Split a counter-clockwise open planar ring along the vertical line x = x0 and return the
 * rings of the side requested (−1: x ≤ x0, +1: x ≥ x0). The pieces of the ring on that side are
 * joined along the line: on the west side the cut edge runs northward, on the east side southward,
 * as counter-clockwise order demands.
 */
function sideOf(aug: Ring, x0: number, side: -1 | 1): Ring[] {
  const isOut = (p: number[]): boolean => (side < 0 ? p[0] > x0 : p[0] < x0);
  const isIn = (p: number[]): boolean => (side < 0 ? p[0] < x0 : p[0] > x0);
  const m = aug.length;
  const start = aug.findIndex(isOut);
  if (start < 0) return aug.some(isIn) ? [aug] : [];
  if (!aug.some(isIn)) return [];
  type Chain = { pts: Ring; s: number; e: number };
  const chains: Chain[] = [];
  let run: Ring = [];
  let hasIn = false;
  for (let k = 1; k <= m; k++) {
    const p = aug[(start + k) % m];
    if (isOut(p)) {
      if (run.length > 0 && hasIn) chains.push({ pts: run, s: run[0][1], e: run[run.length - 1][1] });
      run = [];
      hasIn = false;
    } else {
      run.push(p);
      if (isIn(p)) hasIn = true;
    }
  }
  const used = new Uint8Array(chains.length);
  const rings: Ring[] = [];
  for (let c0 = 0; c0 < chains.length; c0++) {
    if (used[c0]) continue;
    const ring: Ring = [];
    let c = c0;
    for (let guard = 0; guard <= chains.length; guard++) {
      used[c] = 1;
      ring.push(...chains[c].pts);
      const e = chains[c].e;
      let next = -1;
      for (let k = 0; k < chains.length; k++) {
        if (used[k] && k !== c0) continue;
        const s = chains[k].s;
        if (side < 0 ? s < e : s > e) continue;
        if (next < 0 || (side < 0 ? s < chains[next].s : s > chains[next].s)) next = k;
      }
      if (next < 0 || next === c0) break;
      c = next;
    }
    rings.push(ring);
  }
  return rings;
}

function splitAtLine(ring: Ring, x0: number): Ring[] {
  const aug: Ring = [];
  const n = ring.length;
  for (let i = 0; i < n; i++) {
    const a = ring[i];
    const b = ring[(i + 1) % n];
    aug.push(a);
    if ((a[0] < x0 && b[0] > x0) || (a[0] > x0 && b[0] < x0)) aug.push([x0, crossingLatitude(a, b, x0)]);
  }
  return [...sideOf(aug, x0, -1), ...sideOf(aug, x0, 1)];
}

/** Planar ring for a ring that winds once around the pole axis (see the module comment). */
function polarRing(u: Ring, turns: number): Ring {
  const n = u.length;
  const W = 360 * turns;
  const seq: Ring = [...u, [u[0][0] + W, u[0][1]]];
  let i = 0;
  while (i < n && band(seq[i][0]) === band(seq[i + 1][0])) i++;
  const a = seq[i], b = seq[i + 1];
  const x0 = -180 + 360 * Math.max(band(a[0]), band(b[0]));
  const X = [x0, crossingLatitude(a, b, x0)];
  const r: Ring = [X];
  for (let k = i + 1; k <= n; k++) r.push(seq[k]);
  for (let k = 1; k <= i; k++) r.push([seq[k][0] + W, seq[k][1]]);
  r.push([x0 + W, X[1]]);
  const shift = (W > 0 ? -180 : 180) - x0; // a whole number of turns: x0 is on a cut line
  for (const p of r) p[0] += shift;
  const end = r[r.length - 1][0];
  const north = [...r, [end, 90], [r[0][0], 90]];
  const south = [...r, [end, -90], [r[0][0], -90]];
  return Math.abs(ringSignedExcess(north)) <= Math.abs(ringSignedExcess(south)) ? north : south;
}

/** Closed counter-clockwise ring with no consecutive duplicates, or null if fewer than 3 positions. */
function finishRing(ring: Ring): Ring | null {
  const r = openRing(ring);
  if (r.length < 3) return null;
  if (shoelace(r) < 0) r.reverse();
  r.push([r[0][0], r[0][1]]);
  return r;
}

/**
 * Cut one ring at the antimeridian. The ring is a list of [longitude, latitude] in degrees, closed
 * or open, in any orientation, with unwrapped longitudes (each within 180° of the previous; values
 * beyond ±180 are expected). Returns a Polygon when the ring needs no cut (shifted by whole turns
 * into [−180, 180] if needed) or encloses a pole, else a MultiPolygon of the parts. Every output
 * ring is closed, counter-clockwise in (longitude, latitude) and free of consecutive duplicates.
 * Throws for fewer than 3 distinct positions or a ring that winds around the poles more than once.
 */
export function cutAtAntimeridian(ring: ArrayLike<ArrayLike<number>>): HullGeometry {
  const open = openRing(ring);
  if (open.length < 3) throw new Error('cutAtAntimeridian: a ring needs at least 3 distinct positions');
  for (const p of open) {
    if (!Number.isFinite(p[0]) || !Number.isFinite(p[1]) || Math.abs(p[1]) > 90) {
      throw new Error(`cutAtAntimeridian: invalid position [${p[0]}, ${p[1]}]; longitude finite, latitude within [-90, 90]`);
    }
  }
  const lons = unwrapLongitudes(open.map((p) => p[0]));
  const u: Ring = open.map((p, i) => [lons[i], p[1]]);
  const turns = ringTurns(u);
  if (Math.abs(turns) > 1) throw new Error(`cutAtAntimeridian: ring winds ${turns} times around the poles; at most once is allowed`);
  let planar = turns === 0 ? u : polarRing(u, turns);
  if (shoelace(planar) < 0) planar = planar.slice().reverse();

  let minX = Infinity, maxX = -Infinity;
  for (const p of planar) {
    if (p[0] < minX) minX = p[0];
    if (p[0] > maxX) maxX = p[0];
  }
  let pieces: Ring[] = [planar];
  for (let x0 = -180 + 360 * Math.ceil((minX + 180) / 360); x0 < maxX; x0 += 360) {
    if (x0 <= minX) continue;
    const next: Ring[] = [];
    for (const piece of pieces) {
      let lo = Infinity, hi = -Infinity;
      for (const p of piece) {
        if (p[0] < lo) lo = p[0];
        if (p[0] > hi) hi = p[0];
      }
      if (lo < x0 && hi > x0) next.push(...splitAtLine(piece, x0));
      else next.push(piece);
    }
    pieces = next;
  }

  const parts: Ring[] = [];
  for (const piece of pieces) {
    let lo = Infinity, hi = -Infinity;
    for (const p of piece) {
      if (p[0] < lo) lo = p[0];
      if (p[0] > hi) hi = p[0];
    }
    const shift = -360 * band((lo + hi) / 2);
    const done = finishRing(piece.map((p) => [p[0] + shift, p[1]]));
    if (done) parts.push(done);
  }
  if (parts.length === 0) throw new Error('cutAtAntimeridian: the ring has no area');
  if (parts.length === 1) return { type: 'Polygon', coordinates: [parts[0]] };
  return { type: 'MultiPolygon', coordinates: parts.map((r) => [r]) };
}
