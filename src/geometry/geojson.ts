/**
 * Writing RFC 7946 GeoJSON as text. Features are serialised one by one into strings so a caller
 * can hold (or stream) a million of them without building a million nested objects; collections
 * are assembled from those strings. No `crs` member is ever written (RFC 7946 §4).
 */

/**
 * Decimal places kept in written coordinates: 7 decimals of a degree is about 1.1 cm on the
 * ground, enough for any observation while following RFC 7946 §11.2 (no more precision than
 * needed). The product contract requires at least 6.
 */
export const COORDINATE_DECIMALS = 7;
const SCALE = 10 ** COORDINATE_DECIMALS;

/** A coordinate rounded to COORDINATE_DECIMALS places (half up), with −0 turned into 0. */
export function roundCoord(x: number): number {
  const r = Math.round(x * SCALE) / SCALE;
  return r === 0 ? 0 : r;
}

/**
 * Text of one rounded coordinate, the decimal itself with trailing zeros dropped ("1.5", "-0.0000001",
 * "8"). Built from integers because integer-to-text is several times faster than the general
 * number-to-text conversion, which dominated writing a million points. Throws for non-finite
 * values, which JSON cannot carry.
 */
export function coordText(x: number): string {
  if (!Number.isFinite(x)) throw new Error(`GeoJSON output: coordinate ${x} is not a finite number`);
  const r = Math.round(x * SCALE);
  if (r === 0) return '0';
  const a = r < 0 ? -r : r;
  const whole = Math.floor(a / SCALE);
  const frac = a - whole * SCALE;
  const head = r < 0 ? '-' + whole : '' + whole;
  if (frac === 0) return head;
  let digits = '' + frac;
  while (digits.length < COORDINATE_DECIMALS) digits = '0' + digits;
  let end = digits.length;
  while (digits.charCodeAt(end - 1) === 48 /* '0' */) end--;
  return head + '.' + digits.slice(0, end);
}

/**
 * Writes coordText(x) as ASCII bytes into `out` at `pos` and returns where it ends, without
 * building a string: the point layers write two of these per observation. Values whose scaled
 * integer is beyond 2^53 (never a position; perhaps an altitude) go through coordText. Needs at
 * most 32 bytes of room.
 */
export function writeCoord(out: Uint8Array, pos: number, x: number): number {
  if (!Number.isFinite(x)) throw new Error(`GeoJSON output: coordinate ${x} is not a finite number`);
  const r = Math.round(x * SCALE);
  if (r === 0) {
    out[pos] = 48;
    return pos + 1;
  }
  const a = r < 0 ? -r : r;
  if (a > Number.MAX_SAFE_INTEGER) {
    const t = coordText(x);
    for (let k = 0; k < t.length; k++) out[pos + k] = t.charCodeAt(k);
    return pos + t.length;
  }
  if (r < 0) out[pos++] = 45; // -
  let whole = Math.floor(a / SCALE);
  let frac = a - whole * SCALE;
  // the whole part's digits, written backwards from its end
  let len = 1;
  for (let t = whole; t >= 10; t = Math.floor(t / 10)) len++;
  for (let k = pos + len - 1; k >= pos; k--) {
    const q = Math.floor(whole / 10);
    out[k] = 48 + (whole - q * 10);
    whole = q;
  }
  pos += len;
  if (frac === 0) return pos;
  // the fraction without its trailing zeros, padded to COORDINATE_DECIMALS places on the left
  let places = COORDINATE_DECIMALS;
  while (frac % 10 === 0) {
    frac /= 10;
    places--;
  }
  out[pos] = 46; // .
  for (let k = pos + places; k > pos; k--) {
    const q = Math.floor(frac / 10);
    out[k] = 48 + (frac - q * 10);
    frac = q;
  }
  return pos + places + 1;
}

/** Geometry shapes this module writes and measures. */
export type GeometryLike =
  | { type: 'Point'; coordinates: number[] }
  | { type: 'MultiPoint'; coordinates: number[][] }
  | { type: 'LineString'; coordinates: number[][] }
  | { type: 'MultiLineString'; coordinates: number[][][] }
  | { type: 'Polygon'; coordinates: number[][][] }
  | { type: 'MultiPolygon'; coordinates: number[][][][] };

function positionText(p: ArrayLike<number>): string {
  let s = '[' + coordText(p[0]) + ',' + coordText(p[1]);
  for (let k = 2; k < p.length; k++) s += ',' + coordText(p[k]);
  return s + ']';
}

function sameRounded(a: ArrayLike<number>, b: ArrayLike<number>): boolean {
  if (a.length !== b.length) return false;
  for (let k = 0; k < a.length; k++) if (roundCoord(a[k]) !== roundCoord(b[k])) return false;
  return true;
}

function lineText(line: number[][]): string {
  let s = '[';
  for (let i = 0; i < line.length; i++) s += (i ? ',' : '') + positionText(line[i]);
  return s + ']';
}

/**
 * Ring text after rounding, with positions that rounding made equal to their predecessor
 * dropped (RFC 7946 rings carry no repeated consecutive positions). Throws if fewer than 4
 * positions remain, since such a ring is not a valid linear ring.
 */
function ringText(ring: number[][]): string {
  let s = '[';
  let prev: number[] | null = null;
  let count = 0;
  for (let i = 0; i < ring.length; i++) {
    const p = ring[i];
    if (prev && sameRounded(prev, p)) continue;
    s += (count ? ',' : '') + positionText(p);
    prev = p;
    count++;
  }
  if (count < 4 || !sameRounded(ring[0], ring[ring.length - 1])) {
    throw new Error(`GeoJSON output: a polygon ring must be closed with at least 4 positions after rounding to ${COORDINATE_DECIMALS} decimals (got ${count})`);
  }
  return s + ']';
}

const polygonText = (rings: number[][][]): string => '[' + rings.map(ringText).join(',') + ']';

/** The `{"type":…,"coordinates":…}` text of a geometry, coordinates rounded; "null" for null. */
export function geometryString(g: GeometryLike | null): string {
  if (g === null) return 'null';
  let c: string;
  switch (g.type) {
    case 'Point': c = positionText(g.coordinates); break;
    case 'MultiPoint': case 'LineString': c = lineText(g.coordinates); break;
    case 'MultiLineString': c = '[' + g.coordinates.map(lineText).join(',') + ']'; break;
    case 'Polygon': c = polygonText(g.coordinates); break;
    case 'MultiPolygon': c = '[' + g.coordinates.map(polygonText).join(',') + ']'; break;
    default: throw new Error(`GeoJSON output: unsupported geometry type ${(g as { type: string }).type}`);
  }
  return '{"type":"' + g.type + '","coordinates":' + c + '}';
}

/**
 * Text of one GeoJSON Feature: `{"type":"Feature","id":…,"geometry":…,"properties":…}`.
 * Coordinates are rounded to COORDINATE_DECIMALS; properties are written with JSON.stringify
 * (the caller rounds figures as it sees fit); id, when given, must be a string or finite number.
 */
export function featureString(geometry: GeometryLike | null, properties: Record<string, unknown> | null, id?: string | number): string {
  return featureStringWithProperties(geometry, properties === null ? 'null' : JSON.stringify(properties), id);
}

/**
 * As featureString, with the properties already serialised (a JSON object text or "null"), for
 * callers that splice members into an input feature's properties without copying the object.
 */
export function featureStringWithProperties(geometry: GeometryLike | null, propertiesJson: string, id?: string | number): string {
  let idText = '';
  if (id !== undefined) {
    if (typeof id !== 'string' && !(typeof id === 'number' && Number.isFinite(id))) {
      throw new Error(`GeoJSON output: a feature id must be a string or finite number, got ${String(id)}`);
    }
    idText = ',"id":' + JSON.stringify(id);
  }
  return `{"type":"Feature"${idText},"geometry":${geometryString(geometry)},"properties":${propertiesJson}}`;
}

/** Growable longitude intervals plus the latitude range, gathered from geometries. */
class Extents {
  lo = new Float64Array(1024);
  hi = new Float64Array(1024);
  n = 0;
  south = Infinity;
  north = -Infinity;
  add(lo: number, hi: number): void {
    if (this.n === this.lo.length) {
      const l2 = new Float64Array(2 * this.n), h2 = new Float64Array(2 * this.n);
      l2.set(this.lo); h2.set(this.hi);
      this.lo = l2; this.hi = h2;
    }
    this.lo[this.n] = lo; this.hi[this.n] = hi; this.n++;
  }
  /** One interval for a whole line or ring, whose straight edges cover every longitude between. */
  addLine(line: number[][]): void {
    let lo = Infinity, hi = -Infinity;
    for (const p of line) {
      if (p[0] < lo) lo = p[0];
      if (p[0] > hi) hi = p[0];
      if (p[1] < this.south) this.south = p[1];
      if (p[1] > this.north) this.north = p[1];
    }
    if (lo <= hi) this.add(lo, hi);
  }
  addPoint(p: number[]): void {
    this.add(p[0], p[0]);
    if (p[1] < this.south) this.south = p[1];
    if (p[1] > this.north) this.north = p[1];
  }
}

/**
 * Smallest longitude span [west, east] covering every interval [lo[i], hi[i]] (degrees, each
 * within [−180, 180]), allowing a span across the antimeridian (west > east). The union's widest
 * uncovered gap, going round, is what the span leaves out. With both bounds sorted, the gap
 * before the k-th start exists exactly when the k-th smallest end is below that start.
 */
function lonSpan(lo: Float64Array, hi: Float64Array): [number, number] {
  const n = lo.length;
  let west = Infinity, east = -Infinity;
  for (let i = 0; i < n; i++) {
    if (lo[i] < west) west = lo[i];
    if (hi[i] > east) east = hi[i];
  }
  // A plain span at most half a turn wide cannot be beaten by one that crosses the antimeridian.
  if (east - west <= 180) return [west, east];
  // A point exactly on ±180 lies on both edges of the map; place it once the rest is known.
  const keep: number[] = [];
  let onSeam = false;
  for (let i = 0; i < n; i++) {
    if (lo[i] === hi[i] && Math.abs(lo[i]) === 180) onSeam = true;
    else keep.push(i);
  }
  if (keep.length === 0) return [180, 180];
  const los = Float64Array.from(keep, (i) => lo[i]).sort();
  const his = Float64Array.from(keep, (i) => hi[i]).sort();
  const m = los.length;
  let gap = los[0] + 360 - his[m - 1];
  west = los[0];
  east = his[m - 1];
  for (let k = 1; k < m; k++) {
    const d = los[k] - his[k - 1];
    if (d > gap) { gap = d; west = los[k]; east = his[k - 1]; }
  }
  if (onSeam && west <= east && west > -180 && east < 180) {
    if (west + 180 < 180 - east) west = -180;
    else east = 180;
  }
  return [west, east];
}

/**
 * Bounding box [west, south, east, north] in degrees of positions given as longitude and
 * latitude arrays, or null when there are none. When the box that crosses the antimeridian is
 * narrower it is returned in the RFC 7946 §5.2 form, west > east.
 */
export function bboxOfPositions(lon: ArrayLike<number>, lat: ArrayLike<number>): [number, number, number, number] | null {
  const n = lon.length;
  if (n === 0) return null;
  let south = Infinity, north = -Infinity;
  for (let i = 0; i < n; i++) {
    if (lat[i] < south) south = lat[i];
    if (lat[i] > north) north = lat[i];
  }
  const xs = Float64Array.from(lon);
  const [west, east] = lonSpan(xs, xs);
  return [west, south, east, north];
}

/**
 * Bounding box [west, south, east, north] in degrees of geometries (longitudes within
 * [−180, 180], as written), or null when there are none. Each line and each polygon covers the
 * longitudes between its extremes (edges are straight in longitude/latitude); when a box across
 * the antimeridian is narrower, it is given with west > east (RFC 7946 §5.2). A polygon reaching
 * a pole from −180 to 180 gives [−180, south, 180, ±90] (RFC 7946 §5.3).
 */
export function bboxOf(geometries: Iterable<GeometryLike | null>): [number, number, number, number] | null {
  const ex = new Extents();
  for (const g of geometries) {
    if (!g) continue;
    switch (g.type) {
      case 'Point': ex.addPoint(g.coordinates); break;
      case 'MultiPoint': for (const p of g.coordinates) ex.addPoint(p); break;
      case 'LineString': ex.addLine(g.coordinates); break;
      case 'MultiLineString': for (const l of g.coordinates) ex.addLine(l); break;
      case 'Polygon': if (g.coordinates.length) ex.addLine(g.coordinates[0]); break;
      case 'MultiPolygon': for (const r of g.coordinates) if (r.length) ex.addLine(r[0]); break;
      default: throw new Error(`bboxOf: unsupported geometry type ${(g as { type: string }).type}`);
    }
  }
  if (ex.n === 0) return null;
  const [west, east] = lonSpan(ex.lo.subarray(0, ex.n), ex.hi.subarray(0, ex.n));
  return [west, ex.south, east, ex.north];
}

const RESERVED = new Set(['type', 'features', 'bbox', 'crs', 'geometry', 'properties', 'coordinates']);

/** Text of the collection's opening up to and including `"features":[`. */
function collectionHead(bbox: ArrayLike<number> | null, extra?: Record<string, unknown>): string {
  let s = '{"type":"FeatureCollection"';
  if (bbox) {
    if (bbox.length !== 4 && bbox.length !== 6) throw new Error(`GeoJSON output: bbox must have 4 (or 6) numbers, got ${bbox.length}`);
    s += ',"bbox":[' + Array.from(bbox, coordText).join(',') + ']';
  }
  if (extra) {
    for (const key of Object.keys(extra)) {
      if (RESERVED.has(key)) throw new Error(`GeoJSON output: "${key}" cannot be a foreign member of a FeatureCollection; rename it`);
      const v = extra[key];
      if (v === undefined) continue;
      s += ',' + JSON.stringify(key) + ':' + JSON.stringify(v);
    }
  }
  return s + ',"features":[';
}

/**
 * The text of a FeatureCollection in chunks of about `chunkChars` characters (default 65 536):
 * `{"type":"FeatureCollection","bbox":[…],<extra members>,"features":[…]}`. Features are
 * pre-serialised strings (see featureString). Feed the chunks to a stream
 * (`Readable.from(featureCollectionChunks(…))`) to write a million features without holding the
 * whole document in one string. bbox values are written rounded like coordinates; extra members
 * are written with JSON.stringify and may not use the reserved names type, features, bbox, crs.
 */
export function* featureCollectionChunks(
  features: Iterable<string>,
  bbox: ArrayLike<number> | null,
  extra?: Record<string, unknown>,
  chunkChars = 65_536,
): Generator<string, void, undefined> {
  let buf = collectionHead(bbox, extra);
  let first = true;
  for (const f of features) {
    buf += first ? f : ',' + f;
    first = false;
    if (buf.length >= chunkChars) {
      yield buf;
      buf = '';
    }
  }
  yield buf + ']}';
}

/**
 * The whole text of a FeatureCollection in one string (see featureCollectionChunks for the form).
 * @param features pre-serialised Feature strings
 * @param bbox [west, south, east, north] in degrees, or null to leave it out
 * @param extra foreign members written between bbox and features
 */
export function featureCollectionString(features: Iterable<string>, bbox: ArrayLike<number> | null, extra?: Record<string, unknown>): string {
  const parts: string[] = [collectionHead(bbox, extra)];
  let first = true;
  for (const f of features) {
    parts.push(first ? f : ',' + f);
    first = false;
  }
  parts.push(']}');
  return parts.join('');
}
