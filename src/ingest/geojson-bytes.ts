/**
 * The byte reader for GeoJSON FeatureCollections: scans the UTF-8 bytes once, without building a
 * JSON object per feature, and pulls positions, weights and times straight into typed arrays.
 * Each feature is kept as byte spans of the input (the whole feature, its `id` and its
 * `properties`), so the points output can copy the properties back verbatim. A file is scanned
 * through a window of a few MiB that moves forward (src/ingest/source.ts) and the spans are
 * offsets into it, read again when the points are written: the file is never held whole.
 *
 * It reads only what it can read exactly as the parsing reader (src/ingest/geojson.ts) would:
 * a FeatureCollection whose every feature is a Feature with a Point of 2 or 3 in-range numbers,
 * an id that is a string, a number or null, properties that are an object or null, a valid weight
 * and time where asked for. For anything else — any problem, a bbox, a duplicate member the
 * reader looks at, an escape in a member name, text that is not JSON, too many features — it
 * returns null and the parsing reader reads the input instead, so messages and acceptance never
 * differ between the two.
 *
 * `features` of the result is an array view that parses a feature from its span when it is
 * first read (the medoid's id, `where` filters, count_by), giving the same object the parsing
 * reader would have built.
 */
import type { InputFeature, Observations } from './types.js';
import { MAX_DEPTH, MAX_ID_CHARS, MAX_KEY_CHARS, MAX_STRING_CHARS } from './limits.js';
import { TIME_PROPERTY, parseTimestampBytes, readTime, type TimeRule } from './checks.js';
import { MemorySource, type ByteSource, type ByteWindow, type InputFile } from './source.js';
import { sharedFloat64, sharedUint32, sharedUint8 } from '../workers/shared.js';

/** Where each feature lies in the input bytes; the spans of an absent member are empty (start = end = 0). */
export interface FeatureSpans {
  /** the input bytes (offsets below are into these) */
  source: ByteSource;
  /** whole feature: bytes[featureStart[i], featureEnd[i]) */
  featureStart: Uint32Array;
  featureEnd: Uint32Array;
  /** the id's JSON text (a string or a number); empty when absent or null */
  idStart: Uint32Array;
  idEnd: Uint32Array;
  /** the properties' JSON text (an object); empty when absent or null */
  propertiesStart: Uint32Array;
  propertiesEnd: Uint32Array;
  /**
   * 1 where the id and properties texts are exactly what JSON.stringify writes for them (no
   * white space, canonical numbers and strings, no nested objects, no duplicate or integer-like
   * member names, no `hotspot_id` or `role` property), so they can be copied as they are
   */
  verbatim: Uint8Array;
  /** third coordinate (altitude), NaN where there is none; null when no feature has one */
  altitude: Float64Array | null;
}

/** Observations read by the byte reader: the usual fields plus the spans. */
export interface SpannedObservations extends Observations {
  spans: FeatureSpans;
}

/** What the byte reader needs to know (the parsing reader's options for GeoJSON). */
export interface ByteReadOptions {
  weightProperty: string | null;
  time: TimeRule;
  maxFeatures: number;
  /** a GeoJSON text sequence or newline-delimited GeoJSON (src/ingest/seq.ts) instead of a FeatureCollection */
  sequence?: boolean;
}

// The scan state lives in module variables: one reader runs at a time on a thread, and the hot
// loops stay free of closures and result objects.
let B: Uint8Array = new Uint8Array(0);
let N = 0;
/** offset in the source of B[0] (a file is scanned through a window that moves forward) */
let BASE = 0;
/** B reaches the end of the source */
let FINAL = true;
/** the file being scanned in windows; null for bytes in memory */
let FILE: InputFile | null = null;
/** length of the whole source */
let SIZE = 0;
/** the window's memory (B is its first N bytes) */
let WIN: Uint8Array = new Uint8Array(0);
/** set by scanString: the string held a backslash */
let strEscaped = false;
/** set by scanValue: the value's text is what JSON.stringify writes for it */
let canonical = true;
/** set by scanNumber: the number's value */
let numValue = 0;

const enum C {
  Quote = 34,
  Backslash = 92,
  Comma = 44,
  Colon = 58,
  OpenBrace = 123,
  CloseBrace = 125,
  OpenBracket = 91,
  CloseBracket = 93,
  Minus = 45,
  Plus = 43,
  Dot = 46,
  Zero = 48,
  Nine = 57,
}

/** Thrown inside the scan when the input is outside the fast path; caught by readGeoJsonBytes. */
class NotFast extends Error {}
const NOT_FAST = new NotFast('outside the byte reader');

function ws(i: number): number {
  const b = B;
  while (i < N) {
    const c = b[i]!;
    if (c === 32 || c === 10 || c === 13 || c === 9) i++;
    else break;
  }
  return i;
}

/** Index just past the JSON string whose opening quote is at `i`; sets strEscaped. Throws NOT_FAST when invalid (also for bytes that are not UTF-8). */
function scanString(i: number): number {
  const b = B;
  let escaped = false;
  let high = false;
  i++;
  const start = i;
  for (;;) {
    if (i >= N) throw NOT_FAST;
    const c = b[i]!;
    if (c === C.Quote) break;
    if (c < 32) throw NOT_FAST;
    if (c === C.Backslash) {
      escaped = true;
      const e = b[i + 1];
      if (e === 117 /* u */) {
        for (let k = 2; k < 6; k++) {
          const h = b[i + k];
          if (h === undefined || !((h >= 48 && h <= 57) || (h >= 65 && h <= 70) || (h >= 97 && h <= 102))) throw NOT_FAST;
        }
        i += 6;
        continue;
      }
      if (e === C.Quote || e === C.Backslash || e === 47 || e === 98 || e === 102 || e === 110 || e === 114 || e === 116) {
        i += 2;
        continue;
      }
      throw NOT_FAST;
    }
    if (c >= 0x80) high = true;
    i++;
  }
  if (high && !validUtf8(start, i)) throw NOT_FAST;
  strEscaped = escaped;
  return i + 1;
}

/** set by memberName: where the member name's text lies, [keyStart, keyEnd) */
let keyStart = 0;
let keyEnd = 0;

/**
 * Reads the member name whose opening quote is at `i`, and its colon; sets keyStart and keyEnd.
 * Names with escapes, or longer than `maxChars` bytes, are outside the fast path.
 * @returns the index of the member's value
 */
function memberName(i: number, maxChars: number): number {
  if (B[i] !== C.Quote) throw NOT_FAST;
  keyStart = i + 1;
  i = scanString(i);
  if (strEscaped || i - keyStart - 1 > maxChars) throw NOT_FAST;
  keyEnd = i - 1;
  i = ws(i);
  if (B[i] !== C.Colon) throw NOT_FAST;
  return ws(i + 1);
}

/**
 * Whether bytes [s, e) are well-formed UTF-8 (source: RFC 3629 §4, the syntax of UTF-8 byte
 * sequences: no overlong forms, no surrogates, nothing above U+10FFFF). Text that is not is
 * decoded with replacement characters by the parsing reader, so it goes there.
 */
function validUtf8(s: number, e: number): boolean {
  const b = B;
  for (let i = s; i < e; ) {
    const c = b[i]!;
    if (c < 0x80) {
      i++;
      continue;
    }
    if (c >= 0xc2 && c <= 0xdf) {
      if (i + 1 >= e || (b[i + 1]! & 0xc0) !== 0x80) return false;
      i += 2;
      continue;
    }
    if (c >= 0xe0 && c <= 0xef) {
      if (i + 2 >= e) return false;
      const c1 = b[i + 1]!;
      if ((c1 & 0xc0) !== 0x80 || (b[i + 2]! & 0xc0) !== 0x80) return false;
      if ((c === 0xe0 && c1 < 0xa0) || (c === 0xed && c1 >= 0xa0)) return false;
      i += 3;
      continue;
    }
    if (c >= 0xf0 && c <= 0xf4) {
      if (i + 3 >= e) return false;
      const c1 = b[i + 1]!;
      if ((c1 & 0xc0) !== 0x80 || (b[i + 2]! & 0xc0) !== 0x80 || (b[i + 3]! & 0xc0) !== 0x80) return false;
      if ((c === 0xf0 && c1 < 0x90) || (c === 0xf4 && c1 >= 0x90)) return false;
      i += 4;
      continue;
    }
    return false;
  }
  return true;
}

/**
 * Whether the string bytes [s, e) (between the quotes) are what JSON.stringify writes for the
 * string they denote: the only escapes it writes are \" \\ \b \f \n \r \t and \u for other
 * control characters and lone surrogates; a `\/` or a \u escape of anything else is not its form.
 */
function canonicalString(s: number, e: number): boolean {
  const b = B;
  for (let i = s; i < e; i++) {
    if (b[i] !== C.Backslash) continue;
    const x = b[i + 1];
    if (x === 117 || x === 47) return false;
    i++;
  }
  return true;
}

const POW10 = [1e0, 1e1, 1e2, 1e3, 1e4, 1e5, 1e6, 1e7, 1e8, 1e9, 1e10, 1e11, 1e12, 1e13, 1e14, 1e15, 1e16, 1e17, 1e18, 1e19, 1e20, 1e21, 1e22];

function latin1(s: number, e: number): string {
  return Buffer.prototype.latin1Slice.call(B, s, e) as string;
}

/**
 * Index just past the JSON number starting at `i`; its value in numValue. Throws NOT_FAST when
 * the grammar (RFC 8259 §6) is broken. Values with at most 15 significant digits and a decimal
 * exponent within ±22 are m·10^k or m/10^k with m and 10^k exact, so the one rounding of the
 * multiplication or division gives the correctly rounded value JSON.parse gives (Clinger's fast
 * path; source: W. D. Clinger, "How to Read Floating Point Numbers Accurately", PLDI 1990).
 * Anything else is read with Number().
 */
function scanNumber(i: number): number {
  const b = B;
  const start = i;
  let neg = false;
  if (b[i] === C.Minus) {
    neg = true;
    i++;
  }
  let m = 0;
  let digits = 0;
  let scale = 0;
  let c = b[i];
  if (c === C.Zero) i++;
  else if (c !== undefined && c > C.Zero && c <= C.Nine) {
    while (i < N && (c = b[i]!) >= C.Zero && c <= C.Nine) {
      m = m * 10 + (c - C.Zero);
      digits++;
      i++;
    }
  } else throw NOT_FAST;
  let plain = true;
  if (b[i] === C.Dot) {
    i++;
    const f = i;
    while (i < N && (c = b[i]!) >= C.Zero && c <= C.Nine) {
      if (m !== 0 || c !== C.Zero) digits++;
      m = m * 10 + (c - C.Zero);
      scale++;
      i++;
    }
    if (i === f) throw NOT_FAST;
  }
  c = b[i];
  if (c === 101 || c === 69) {
    plain = false;
    i++;
    if (b[i] === C.Plus || b[i] === C.Minus) i++;
    const f = i;
    while (i < N && (c = b[i]!) >= C.Zero && c <= C.Nine) i++;
    if (i === f) throw NOT_FAST;
  }
  if (plain && digits <= 15 && scale <= 22) {
    const v = scale === 0 ? m : m / POW10[scale]!;
    numValue = neg ? -v : v;
  } else {
    numValue = Number(latin1(start, i));
  }
  return i;
}

/** Whether the number text [s, e) is what JSON.stringify writes for its value. */
function canonicalNumber(s: number, e: number, v: number): boolean {
  const b = B;
  let plainInteger = e - s <= 15;
  for (let k = s; plainInteger && k < e; k++) {
    const c = b[k]!;
    if (c < C.Zero || c > C.Nine) plainInteger = k === s && c === C.Minus;
  }
  if (plainInteger) {
    // no fraction or exponent: canonical unless a leading zero or minus zero
    const first = b[s] === C.Minus ? s + 1 : s;
    return !(b[first] === C.Zero && (e - first > 1 || first !== s));
  }
  return Number.isFinite(v) && String(v) === latin1(s, e);
}

function isKey(s: number, e: number, key: Uint8Array): boolean {
  const b = B;
  if (e - s !== key.length) return false;
  for (let k = 0; k < key.length; k++) if (b[s + k] !== key[k]) return false;
  return true;
}

/**
 * Index just past the JSON value at `i` (no leading white space). Validates the grammar and the
 * limits of src/ingest/limits.ts (depth, text lengths) and clears `canonical` when the text is
 * not what JSON.stringify writes for the value (white space, escapes, number forms, any object
 * below `depth` 2). `depth` is the value's level, the feature being 1. Throws NOT_FAST.
 */
function scanValue(i: number, depth: number): number {
  const b = B;
  const c = b[i];
  if (c === C.Quote) {
    const e = scanString(i);
    if (e - i - 2 > MAX_STRING_CHARS) throw NOT_FAST;
    if (strEscaped && !canonicalString(i + 1, e - 1)) canonical = false;
    return e;
  }
  if (c === C.OpenBrace || c === C.OpenBracket) {
    if (depth > MAX_DEPTH - 1) throw NOT_FAST;
    if (c === C.OpenBrace && depth > 2) canonical = false; // nested objects: member order and duplicates are not checked
    const close = c === C.OpenBrace ? C.CloseBrace : C.CloseBracket;
    let j = i + 1;
    if (b[j] !== close && ws(j) !== j) canonical = false;
    j = ws(j);
    if (b[j] === close) return j + 1;
    for (;;) {
      if (c === C.OpenBrace) {
        if (b[j] !== C.Quote) throw NOT_FAST;
        const ke = scanString(j);
        if (strEscaped || ke - j - 2 > MAX_KEY_CHARS) throw NOT_FAST;
        j = ke;
        if (b[j] !== C.Colon) {
          canonical = false;
          j = ws(j);
          if (b[j] !== C.Colon) throw NOT_FAST;
        }
        j++;
        if (ws(j) !== j) {
          canonical = false;
          j = ws(j);
        }
      }
      j = scanValue(j, depth + 1);
      if (b[j] !== C.Comma && b[j] !== close) {
        canonical = false;
        j = ws(j);
      }
      if (b[j] === C.Comma) {
        j++;
        if (ws(j) !== j) {
          canonical = false;
          j = ws(j);
        }
        continue;
      }
      if (b[j] === close) return j + 1;
      throw NOT_FAST;
    }
  }
  if (c === 116 /* t */) return word(i, TRUE);
  if (c === 102 /* f */) return word(i, FALSE);
  if (c === 110 /* n */) return word(i, NULL);
  const e = scanNumber(i);
  if (canonical && !canonicalNumber(i, e, numValue)) canonical = false;
  return e;
}

const bytesOf = (s: string): Uint8Array => new Uint8Array(Buffer.from(s, 'latin1'));
const TRUE = bytesOf('true');
const FALSE = bytesOf('false');
const NULL = bytesOf('null');
const K_TYPE = bytesOf('type');
const K_FEATURES = bytesOf('features');
const K_FEATURE_COLLECTION = bytesOf('FeatureCollection');
const K_FEATURE = bytesOf('Feature');
const K_GEOMETRY = bytesOf('geometry');
const K_PROPERTIES = bytesOf('properties');
const K_ID = bytesOf('id');
const K_BBOX = bytesOf('bbox');
const K_POINT = bytesOf('Point');
const K_COORDINATES = bytesOf('coordinates');
const K_HOTSPOT_ID = bytesOf('hotspot_id');
const K_ROLE = bytesOf('role');

function word(i: number, w: Uint8Array): number {
  const b = B;
  for (let k = 0; k < w.length; k++) if (b[i + k] !== w[k]) throw NOT_FAST;
  return i + w.length;
}

/** Growable per-feature columns. */
class Columns {
  cap = 0;
  n = 0;
  lon: Float64Array = new Float64Array(0);
  lat: Float64Array = new Float64Array(0);
  weight: Float64Array | null = null;
  time: Float64Array = new Float64Array(0);
  altitude: Float64Array | null = null;
  featureStart: Uint32Array = new Uint32Array(0);
  featureEnd: Uint32Array = new Uint32Array(0);
  idStart: Uint32Array = new Uint32Array(0);
  idEnd: Uint32Array = new Uint32Array(0);
  propertiesStart: Uint32Array = new Uint32Array(0);
  propertiesEnd: Uint32Array = new Uint32Array(0);
  verbatim: Uint8Array = new Uint8Array(0);
  constructor(
    cap: number,
    readonly weighted: boolean,
  ) {
    this.grow(cap);
  }
  grow(cap: number): void {
    const f64 = (a: Float64Array): Float64Array => {
      const b = sharedFloat64(cap);
      b.set(a.subarray(0, this.n));
      return b;
    };
    const u32 = (a: Uint32Array): Uint32Array => {
      const b = sharedUint32(cap);
      b.set(a.subarray(0, this.n));
      return b;
    };
    this.lon = f64(this.lon);
    this.lat = f64(this.lat);
    if (this.weighted) this.weight = f64(this.weight ?? new Float64Array(0));
    this.time = f64(this.time);
    if (this.altitude !== null) this.altitude = f64(this.altitude);
    this.featureStart = u32(this.featureStart);
    this.featureEnd = u32(this.featureEnd);
    this.idStart = u32(this.idStart);
    this.idEnd = u32(this.idEnd);
    this.propertiesStart = u32(this.propertiesStart);
    this.propertiesEnd = u32(this.propertiesEnd);
    const v = sharedUint8(cap);
    v.set(this.verbatim.subarray(0, this.n));
    this.verbatim = v;
    this.cap = cap;
  }
}

/**
 * Reads a GeoJSON FeatureCollection from its UTF-8 bytes, or returns null when the input is
 * outside what this reader reads exactly (see the header); the caller then reads it with the
 * parsing reader. Never throws InputError itself.
 */
export function readGeoJsonBytes(bytes: Uint8Array, options: ByteReadOptions): SpannedObservations | null {
  return readGeoJsonSource(new MemorySource(bytes), options);
}

/**
 * readGeoJsonBytes for bytes in memory or a file; a file is scanned in windows of a few MiB and
 * never held whole. `stopped` of the options, when given, is set to the feature (and its offset)
 * at which the reader gave up.
 */
export function readGeoJsonSource(source: MemorySource | InputFile, options: ByteReadOptions, stopped?: { feature: number; offset: number }): SpannedObservations | null {
  const { weightProperty, time } = options;
  // a property name that is also a member every object inherits reads differently from a parsed object
  if ((weightProperty !== null && weightProperty in Object.prototype) || time.property in Object.prototype) return null;
  if (source.size >= 2 ** 32) return null;
  const weightKey = weightProperty === null ? null : new Uint8Array(Buffer.from(weightProperty, 'utf8'));
  const timeKey = new Uint8Array(Buffer.from(time.property, 'utf8'));
  // room for the first features; sized to the input once they show how long a feature is (sizeColumns)
  const cols = new Columns(Math.max(16, Math.min(Math.ceil(source.size / 100), ESTIMATE_AT + 1)), weightKey !== null);
  BASE = 0;
  SIZE = source.size;
  if (source instanceof MemorySource) {
    B = source.bytes;
    N = B.length;
    FINAL = true;
  } else {
    FILE = source;
    AHEAD = Math.min(64 << 10, source.windowBytes >> 2);
    WIN = new Uint8Array(Math.min(source.windowBytes, source.size));
    N = source.readInto(WIN, 0, 0);
    B = WIN.subarray(0, N);
    FINAL = N >= source.size;
  }
  try {
    return options.sequence === true ? scanSequence(source, cols, weightKey, timeKey, options) : scanCollection(source, cols, weightKey, timeKey, options);
  } catch (err) {
    if (err !== NOT_FAST) throw err;
    if (stopped !== undefined) {
      stopped.feature = cols.n;
      stopped.offset = cols.n === 0 ? 0 : cols.featureEnd[cols.n - 1]!;
    }
    return null;
  } finally {
    B = WIN = new Uint8Array(0);
    N = BASE = SIZE = 0;
    FILE = null;
    FINAL = true;
  }
}

/** The least kept in the window ahead of each feature scanned (a quarter of the window, at most 64 KiB). */
let AHEAD = 64 << 10;

/** Index `i` after making sure at least AHEAD bytes follow it in B (or the end of the source does); moves the window. */
function ahead(i: number): number {
  return FINAL || N - i >= AHEAD ? i : shift(i);
}

/**
 * Moves the window to start at local index `keep` and reads on; when `keep` is 0 and the window is
 * full (one value larger than the window), the window grows. Returns keep's new index (0).
 */
function shift(keep: number): number {
  const file = FILE as InputFile;
  let win = WIN;
  if (keep === 0 && N === WIN.length) {
    win = new Uint8Array(WIN.length * 2);
    win.set(B);
  } else win.copyWithin(0, keep, N);
  BASE += keep;
  N -= keep;
  N += file.readInto(win, N, BASE + N);
  WIN = win;
  B = win.subarray(0, N);
  FINAL = BASE + N >= file.size;
  return 0;
}

/**
 * Whether the value (or member) starting at `u` ends inside the window: a comma or a closing
 * bracket at its own level is found. If not, a scan that gave up there may only have run out of
 * window, and is tried again on more bytes.
 */
function endsInWindow(u: number): boolean {
  const b = B;
  let depth = 0;
  for (let i = u; i < N; i++) {
    const c = b[i]!;
    if (c === C.Quote) {
      for (i++; i < N && b[i] !== C.Quote; i++) if (b[i] === C.Backslash) i++;
    } else if (c === C.OpenBrace || c === C.OpenBracket) depth++;
    else if (c === C.CloseBrace || c === C.CloseBracket) {
      if (depth === 0) return true;
      depth--;
    } else if (c === C.Comma && depth === 0) return true;
  }
  return false;
}

/** Whether a scan of the value at `u` that threw `err` gave up for want of bytes, not for what it read. */
function shortOfBytes(err: unknown, u: number): boolean {
  return err === NOT_FAST && !FINAL && !endsInWindow(u);
}

/** White space from `i` on, across windows; returns the index of the next byte (N at the end of the source). */
function wsAcross(i: number): number {
  for (;;) {
    i = ws(i);
    if (i < N || FINAL) return i;
    i = shift(i);
  }
}

const RS = 0x1e;

/**
 * Scans a GeoJSON text sequence (records after RS characters, RFC 8142) or newline-delimited
 * GeoJSON (one record a line) as src/ingest/seq.ts reads it: RS first means RS-separated records,
 * else one record per line. Only records that are one Feature the byte reader reads, with nothing
 * but JSON white space around them, are read here; an RS anywhere in line mode, a feature over two
 * lines, two on one line or anything else goes to the parsing reader.
 */
function scanSequence(source: ByteSource, cols: Columns, weightKey: Uint8Array | null, timeKey: Uint8Array, options: ByteReadOptions): SpannedObservations {
  let i = 0;
  if (B[0] === 0xef && B[1] === 0xbb && B[2] === 0xbf) i = 3; // byte-order mark
  i = wsAcross(i);
  const rs = B[i] === RS;
  scanTimed = 0;
  scanTimeSeen = false;
  for (;;) {
    // separators: RS and white space between records; white space and line feeds between lines
    for (;;) {
      i = wsAcross(i);
      if (rs && B[i] === RS) i++;
      else break;
    }
    if (i >= N) break;
    i = scanNextFeature(i, cols, weightKey, timeKey, options.time);
    if (!rs) {
      // no line feed inside the feature (the engine's own search: the first one is where its line ends)
      const lf = B.indexOf(10, featureStart);
      if (lf >= 0 && lf < i) throw NOT_FAST;
      // the rest of the line: spaces, tabs and carriage returns only
      for (;;) {
        const c = B[i];
        if (c === 32 || c === 9 || c === 13) i++;
        else if (i >= N && !FINAL) i = shift(i);
        else break;
      }
      if (i < N && B[i] !== 10) throw NOT_FAST;
    } else {
      i = wsAcross(i);
      if (i < N && B[i] !== RS) throw NOT_FAST;
    }
  }
  if (cols.n === 0 || cols.n > options.maxFeatures) throw NOT_FAST;
  if (options.time.property !== TIME_PROPERTY && !scanTimeSeen) throw NOT_FAST;
  return observations(source, cols, scanTimed);
}

/** Features scanned before the columns are sized to the whole input. */
const ESTIMATE_AT = 2048;

/**
 * Sizes the columns for the whole input from the bytes the first ESTIMATE_AT features took (up to
 * `consumed`), with a little to spare, so that a large input is neither copied while growing nor
 * held in columns far longer than it needs.
 */
function sizeColumns(cols: Columns, consumed: number): void {
  const want = Math.ceil((SIZE / consumed) * cols.n * 1.04) + 64;
  if (want > cols.cap) cols.grow(Math.min(want, 2 ** 30));
}

const M_TYPE = 0;
const M_FEATURES = 1;
const M_OTHER = 2;

/** Set by scanNextFeature: how many features had a time, and whether any had the time property. */
let scanTimed = 0;
let scanTimeSeen = false;
/** Set by scanNextFeature: where the feature it scanned starts in the window. */
let featureStart = 0;

/**
 * Scans the feature at i into cols, moving the window on and scanning it again while the window
 * cut it short; counts its time (scanTimed, scanTimeSeen) and sizes the columns once ESTIMATE_AT
 * features are in. Returns the index just past the feature; featureStart is where it starts.
 */
function scanNextFeature(i: number, cols: Columns, weightKey: Uint8Array | null, timeKey: Uint8Array, time: ByteReadOptions['time']): number {
  if (cols.n === cols.cap) cols.grow(cols.cap * 2);
  for (;;) {
    i = ahead(i);
    featureStart = i;
    try {
      i = scanFeature(i, cols, weightKey, timeKey, time);
      break;
    } catch (err) {
      if (!shortOfBytes(err, featureStart)) throw err;
      i = shift(featureStart);
    }
  }
  if (cols.time[cols.n - 1] === cols.time[cols.n - 1]) scanTimed++;
  if (lastTimeFound) scanTimeSeen = true;
  if (cols.n === ESTIMATE_AT) sizeColumns(cols, BASE + i);
  return i;
}

/** Scans the features from just past the `[` into cols; returns the index just past the `]`. */
function scanFeatures(i: number, cols: Columns, weightKey: Uint8Array | null, timeKey: Uint8Array, options: ByteReadOptions): number {
  scanTimed = 0;
  scanTimeSeen = false;
  i = wsAcross(i);
  if (B[i] === C.CloseBracket) throw NOT_FAST; // no features: the parsing reader says so
  for (;;) {
    i = scanNextFeature(i, cols, weightKey, timeKey, options.time);
    i = wsAcross(i);
    if (B[i] === C.Comma) {
      i = wsAcross(i + 1);
      continue;
    }
    if (B[i] === C.CloseBracket) break;
    throw NOT_FAST;
  }
  if (cols.n > options.maxFeatures) throw NOT_FAST;
  return i + 1;
}

function scanCollection(source: ByteSource, cols: Columns, weightKey: Uint8Array | null, timeKey: Uint8Array, options: ByteReadOptions): SpannedObservations {
  let i = 0;
  if (B[0] === 0xef && B[1] === 0xbb && B[2] === 0xbf) i = 3; // byte-order mark
  i = wsAcross(i);
  if (B[i] !== C.OpenBrace) throw NOT_FAST;
  let sawType = false;
  let sawFeatures = false;
  let timeSeen = false;
  let timed = 0;
  i = wsAcross(i + 1);
  if (B[i] === C.CloseBrace) throw NOT_FAST;
  for (;;) {
    i = ahead(i);
    const u = i;
    let member: number;
    try {
      // a member whole, but only the name and bracket of the features
      i = memberName(i, Number.MAX_SAFE_INTEGER);
      member = isKey(keyStart, keyEnd, K_TYPE) ? M_TYPE : isKey(keyStart, keyEnd, K_FEATURES) ? M_FEATURES : M_OTHER;
      if (member === M_TYPE) {
        if (B[i] !== C.Quote) throw NOT_FAST;
        const e = scanString(i);
        if (!isKey(i + 1, e - 1, K_FEATURE_COLLECTION)) throw NOT_FAST;
        i = e;
      } else if (member === M_FEATURES) {
        if (B[i] !== C.OpenBracket) throw NOT_FAST;
        i++;
      } else {
        canonical = true;
        i = scanValue(i, 1);
      }
    } catch (err) {
      if (!shortOfBytes(err, u)) throw err;
      i = shift(u);
      continue;
    }
    if (member === M_TYPE) {
      if (sawType) throw NOT_FAST;
      sawType = true;
    } else if (member === M_FEATURES) {
      if (sawFeatures) throw NOT_FAST;
      sawFeatures = true;
      i = scanFeatures(i, cols, weightKey, timeKey, options);
      timed += scanTimed;
      if (scanTimeSeen) timeSeen = true;
    }
    i = wsAcross(i);
    if (B[i] === C.Comma) {
      i = wsAcross(i + 1);
      continue;
    }
    if (B[i] === C.CloseBrace) break;
    throw NOT_FAST;
  }
  if (!sawType || !sawFeatures) throw NOT_FAST;
  if (wsAcross(i + 1) !== N) throw NOT_FAST;
  // a time property other than observed_at that no feature has is a problem the parsing reader names
  if (options.time.property !== TIME_PROPERTY && !timeSeen) throw NOT_FAST;

  return observations(source, cols, timed);
}

/** The observations of the features scanned into cols. */
function observations(source: ByteSource, cols: Columns, timed: number): SpannedObservations {
  const n = cols.n;
  const spans: FeatureSpans = {
    source,
    // views, not copies, in shared memory: handed to the point-layer worker without a copy
    // (src/cli/layer-thread.ts), as are the positions (the columns were sized to the input)
    featureStart: cols.featureStart.subarray(0, n),
    featureEnd: cols.featureEnd.subarray(0, n),
    idStart: cols.idStart.subarray(0, n),
    idEnd: cols.idEnd.subarray(0, n),
    propertiesStart: cols.propertiesStart.subarray(0, n),
    propertiesEnd: cols.propertiesEnd.subarray(0, n),
    verbatim: cols.verbatim.subarray(0, n),
    altitude: cols.altitude === null ? null : cols.altitude.subarray(0, n),
  };
  return {
    points: { n, lon: cols.lon.subarray(0, n), lat: cols.lat.subarray(0, n), weight: cols.weight === null ? null : cols.weight.slice(0, n) },
    features: lazyFeatures(spans, n),
    observedAt: timed > 0 ? cols.time.slice(0, n) : null,
    spans,
  };
}

/** Scans one feature at `i` into row cols.n (and counts it); returns the index just past it. */
function scanFeature(i: number, cols: Columns, weightKey: Uint8Array | null, timeKey: Uint8Array, time: TimeRule): number {
  const b = B;
  if (b[i] !== C.OpenBrace) throw NOT_FAST;
  const row = cols.n;
  const featureStart = i;
  let sawType = false;
  let sawGeometry = false;
  let sawProperties = false;
  let sawId = false;
  let idVerbatim = true;
  let idS = 0;
  let idE = 0;
  let propS = 0;
  let propE = 0;
  let propVerbatim = true;
  let weightFound = false;
  let timeFound = false;
  let t = NaN;
  i = ws(i + 1);
  if (b[i] === C.CloseBrace) throw NOT_FAST;
  for (;;) {
    i = memberName(i, MAX_KEY_CHARS);
    const ks = keyStart;
    const ke = keyEnd;
    const c = b[i];
    if (isKey(ks, ke, K_TYPE)) {
      if (sawType || c !== C.Quote) throw NOT_FAST;
      sawType = true;
      const e = scanString(i);
      if (!isKey(i + 1, e - 1, K_FEATURE)) throw NOT_FAST;
      i = e;
    } else if (isKey(ks, ke, K_GEOMETRY)) {
      if (sawGeometry) throw NOT_FAST;
      sawGeometry = true;
      i = scanPoint(i, cols, row);
    } else if (isKey(ks, ke, K_PROPERTIES)) {
      if (sawProperties) throw NOT_FAST;
      sawProperties = true;
      if (c === C.OpenBrace) {
        // scanned here member by member: the weight and time are read, the rest validated
        propS = i;
        const weightKeyLocal = weightKey;
        let j = ws(i + 1);
        if (j !== i + 1) propVerbatim = false;
        let keys = 0;
        if (b[j] !== C.CloseBrace) {
          for (;;) {
            if (b[j] !== C.Quote) throw NOT_FAST;
            const pks = j + 1;
            j = scanString(j);
            if (strEscaped || j - pks - 1 > MAX_KEY_CHARS) throw NOT_FAST;
            const pke = j - 1;
            if (b[j] !== C.Colon) {
              propVerbatim = false;
              j = ws(j);
              if (b[j] !== C.Colon) throw NOT_FAST;
            }
            j++;
            if (ws(j) !== j) {
              propVerbatim = false;
              j = ws(j);
            }
            if (propVerbatim) {
              // names JSON.stringify would write elsewhere (integer-like, first) or twice
              const k0 = b[pks];
              if ((k0 !== undefined && k0 >= C.Zero && k0 <= C.Nine) || isKey(pks, pke, K_HOTSPOT_ID) || isKey(pks, pke, K_ROLE)) propVerbatim = false;
              else if (keys >= KEY_STARTS.length) propVerbatim = false;
              else {
                for (let q = 0; q < keys; q++) {
                  if (isKeyRange(pks, pke, KEY_STARTS[q]!, KEY_ENDS[q]!)) {
                    propVerbatim = false;
                    break;
                  }
                }
                KEY_STARTS[keys] = pks;
                KEY_ENDS[keys++] = pke;
              }
            }
            const vs = j;
            canonical = true;
            j = scanValue(j, 3);
            if (!canonical) propVerbatim = false;
            // the last of duplicate names wins, as in JSON.parse
            if (weightKeyLocal !== null && isKey(pks, pke, weightKeyLocal)) {
              if (b[vs] === C.Quote || b[vs] === C.OpenBrace || b[vs] === C.OpenBracket || b[vs] === 116 || b[vs] === 102 || b[vs] === 110) weightFound = false;
              else {
                scanNumber(vs);
                const w = numValue;
                weightFound = w >= 0 && w <= Number.MAX_VALUE;
                if (weightFound) (cols.weight as Float64Array)[row] = w;
              }
            }
            if (isKey(pks, pke, timeKey)) {
              timeFound = true;
              t = timeOf(vs, j, time);
            }
            if (b[j] !== C.Comma && b[j] !== C.CloseBrace) {
              propVerbatim = false;
              j = ws(j);
            }
            if (b[j] === C.Comma) {
              j++;
              if (ws(j) !== j) {
                propVerbatim = false;
                j = ws(j);
              }
              continue;
            }
            if (b[j] === C.CloseBrace) break;
            throw NOT_FAST;
          }
        }
        i = j + 1;
        propE = i;
      } else if (c === 110) {
        i = word(i, NULL);
      } else throw NOT_FAST;
    } else if (isKey(ks, ke, K_ID)) {
      if (sawId) throw NOT_FAST;
      sawId = true;
      if (c === C.Quote) {
        const e = scanString(i);
        if (e - i - 2 > MAX_ID_CHARS) throw NOT_FAST;
        if (strEscaped) {
          // a \u escape may write a NUL or half of a surrogate pair, which the parsing reader may refuse in an id
          for (let k = i + 1; k < e - 1; k++) {
            if (b[k] === C.Backslash && b[++k] === 117) {
              const u = parseInt(latin1(k + 1, k + 5), 16);
              if (u === 0 || (u >= 0xd800 && u <= 0xdfff)) throw NOT_FAST;
            }
          }
          idVerbatim = canonicalString(i + 1, e - 1);
        }
        idS = i;
        idE = e;
        i = e;
      } else if (c === 110) {
        i = word(i, NULL);
      } else if (c === C.Minus || (c !== undefined && c >= C.Zero && c <= C.Nine)) {
        const e = scanNumber(i);
        if (!Number.isFinite(numValue)) throw NOT_FAST;
        idS = i;
        idE = e;
        i = e;
      } else throw NOT_FAST;
    } else if (isKey(ks, ke, K_BBOX)) {
      throw NOT_FAST;
    } else {
      canonical = true;
      i = scanValue(i, 2);
    }
    i = ws(i);
    if (b[i] === C.Comma) {
      i = ws(i + 1);
      continue;
    }
    if (b[i] === C.CloseBrace) break;
    throw NOT_FAST;
  }
  i++;
  if (!sawType || !sawGeometry) throw NOT_FAST;
  if (weightKey !== null && !weightFound) throw NOT_FAST;
  // a time that cannot be read: the parsing reader names it
  if (timeFound && t !== t) throw NOT_FAST;
  cols.time[row] = timeFound && t !== NO_TIME ? t : NaN;
  // offsets in the source; an absent member stays 0, 0
  cols.featureStart[row] = BASE + featureStart;
  cols.featureEnd[row] = BASE + i;
  cols.idStart[row] = idE === 0 ? 0 : BASE + idS;
  cols.idEnd[row] = idE === 0 ? 0 : BASE + idE;
  cols.propertiesStart[row] = propE === 0 ? 0 : BASE + propS;
  cols.propertiesEnd[row] = propE === 0 ? 0 : BASE + propE;
  cols.verbatim[row] = idVerbatim && propVerbatim ? 1 : 0;
  cols.n = row + 1;
  lastTimeFound = timeFound;
  return i;
}

/** Where the member names of the properties being scanned lie, for the duplicate test (more: not copied verbatim). */
const KEY_STARTS = new Uint32Array(32);
const KEY_ENDS = new Uint32Array(32);

/** Set by scanFeature: the feature's properties held the time property (any value). */
let lastTimeFound = false;

function isKeyRange(s: number, e: number, s2: number, e2: number): boolean {
  const b = B;
  if (e - s !== e2 - s2) return false;
  for (let k = 0; k < e - s; k++) if (b[s + k] !== b[s2 + k]) return false;
  return true;
}

/**
 * The time of a property value at [s, e): epoch ms; NO_TIME for null and (with a time format)
 * ""; NaN for a value that is not a readable time (the caller gives up then).
 */
function timeOf(s: number, e: number, time: TimeRule): number {
  const b = B;
  const c = b[s];
  if (c === 110) return NO_TIME;
  if (c !== C.Quote) return NaN;
  // RFC 3339 read from the bytes where it reads there (no escapes then); otherwise from the text
  if (time.format === null) {
    const t = parseTimestampBytes(b, s + 1, e - 1);
    if (t === t) return t;
  }
  let text: string;
  if (strEscapedAt(s, e)) text = JSON.parse(Buffer.prototype.utf8Slice.call(B, s, e) as string) as string;
  else text = Buffer.prototype.utf8Slice.call(B, s + 1, e - 1) as string;
  if (time.format !== null && text === '') return NO_TIME;
  return readTime(text, time);
}

/** A time property present with no time (null, or "" with a time format). */
const NO_TIME = -Infinity;

function strEscapedAt(s: number, e: number): boolean {
  const b = B;
  for (let k = s + 1; k < e - 1; k++) if (b[k] === C.Backslash) return true;
  return false;
}

/** Scans a geometry that must be {"type":"Point","coordinates":[x,y(,z)]} with x, y in range; stores the position. */
function scanPoint(i: number, cols: Columns, row: number): number {
  const b = B;
  if (b[i] !== C.OpenBrace) throw NOT_FAST;
  let sawType = false;
  let sawCoordinates = false;
  i = ws(i + 1);
  if (b[i] === C.CloseBrace) throw NOT_FAST;
  for (;;) {
    i = memberName(i, MAX_KEY_CHARS);
    const ks = keyStart;
    const ke = keyEnd;
    if (isKey(ks, ke, K_TYPE)) {
      if (sawType || b[i] !== C.Quote) throw NOT_FAST;
      sawType = true;
      const e = scanString(i);
      if (!isKey(i + 1, e - 1, K_POINT)) throw NOT_FAST;
      i = e;
    } else if (isKey(ks, ke, K_COORDINATES)) {
      if (sawCoordinates || b[i] !== C.OpenBracket) throw NOT_FAST;
      sawCoordinates = true;
      i = ws(i + 1);
      i = scanCoordinate(i);
      const x = numValue;
      i = ws(i);
      if (b[i] !== C.Comma) throw NOT_FAST;
      i = scanCoordinate(ws(i + 1));
      const y = numValue;
      i = ws(i);
      let z = NaN;
      if (b[i] === C.Comma) {
        i = scanCoordinate(ws(i + 1));
        z = numValue;
        if (!Number.isFinite(z)) throw NOT_FAST;
        i = ws(i);
        if (cols.altitude === null) {
          cols.altitude = sharedFloat64(cols.cap).fill(NaN);
        }
      }
      if (b[i] !== C.CloseBracket) throw NOT_FAST;
      i++;
      if (!(x >= -180 && x <= 180 && y >= -90 && y <= 90)) throw NOT_FAST;
      cols.lon[row] = x;
      cols.lat[row] = y;
      if (cols.altitude !== null) cols.altitude[row] = z;
    } else if (isKey(ks, ke, K_BBOX)) {
      throw NOT_FAST;
    } else {
      canonical = true;
      i = scanValue(i, 3);
    }
    i = ws(i);
    if (b[i] === C.Comma) {
      i = ws(i + 1);
      continue;
    }
    if (b[i] === C.CloseBrace) break;
    throw NOT_FAST;
  }
  if (!sawType || !sawCoordinates) throw NOT_FAST;
  return i + 1;
}

function scanCoordinate(i: number): number {
  const b = B;
  const c = b[i];
  if (c !== C.Minus && !(c !== undefined && c >= C.Zero && c <= C.Nine)) throw NOT_FAST;
  return scanNumber(i);
}

/** Parses feature i from its span as JSON.parse of the whole input would have built it; `w` is a window on spans.source. */
export function parseSpan(spans: FeatureSpans, i: number, w: ByteWindow = spans.source.window()): InputFeature {
  const s = spans.featureStart[i]!;
  const e = spans.featureEnd[i]!;
  w.need(s, e);
  const text = Buffer.prototype.utf8Slice.call(w.buf, s - w.base, e - w.base) as string;
  const f = JSON.parse(text) as InputFeature;
  // the parsing reader sets an absent properties member to null
  if (f.properties === undefined) f.properties = null;
  return f;
}

/** An array of the features that parses each from its span when first read. */
function lazyFeatures(spans: FeatureSpans, n: number): InputFeature[] {
  const target: InputFeature[] = new Array(n);
  // one window for all: features are mostly read in order (filters, counts)
  const w = spans.source.window();
  return new Proxy(target, {
    get(t, key, receiver) {
      if (typeof key === 'string') {
        const c = key.charCodeAt(0);
        if (c >= 48 && c <= 57) {
          const k = Number(key);
          if (Number.isInteger(k) && k >= 0 && k < n && String(k) === key) {
            let f = t[k];
            if (f === undefined) f = t[k] = parseSpan(spans, k, w);
            return f;
          }
        }
      }
      return Reflect.get(t, key, receiver);
    },
    has(t, key) {
      if (typeof key === 'string') {
        const k = Number(key);
        if (Number.isInteger(k) && k >= 0 && k < n && String(k) === key) return true;
      }
      return Reflect.has(t, key);
    },
  });
}
