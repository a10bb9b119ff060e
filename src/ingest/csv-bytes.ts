/**
 * The byte reader for CSV: scans the UTF-8 bytes once, a file in chunks, without building a string
 * or an object per row, and pulls positions, weights and times straight into typed arrays. Each
 * row is kept as a byte span of the input, so the points output can write its cells back from the
 * bytes (writeCsvMembers) and a row is parsed into the feature the parsing reader would have built
 * only when it is first read (the medoid's id, `where` filters, count_by).
 *
 * It reads only text the parsing reader (src/ingest/csv.ts) splits without csv-parse — no quote
 * character, no carriage return, well-formed UTF-8, at most one leading byte-order mark — and only
 * when nothing is wrong: a header naming every column once with the position (and any named
 * weight and time) columns found, every row as wide as the header with numbers, weights and times
 * that read, ids and texts within the limits (src/ingest/limits.ts), not more rows than allowed.
 * For anything else it returns null and the parsing reader reads the input instead, so messages
 * and acceptance never differ between the two (test/ingest/csv-bytes.test.ts holds them to the
 * same results on seeded random and hostile text).
 */
import { isUtf8 } from 'node:buffer';
import type { InputFeature, Observations } from './types.js';
import { TIME_PROPERTY, parseDecimal, parseTimestampBytes, rangeProblem, readTime, type TimeRule } from './checks.js';
import { LATITUDE_HEADERS, LONGITUDE_HEADERS, findColumn, sniffDelimiter } from './csv.js';
import { MAX_ID_CHARS, MAX_KEY_CHARS, MAX_STRING_CHARS, textFault } from './limits.js';
import { InputFile, MemorySource, type ByteSource, type ByteWindow } from './source.js';
import { sharedFloat64, sharedUint32, sharedUint8 } from '../workers/shared.js';

/** Where each data row lies in the input, and how its cells are written back. */
export interface CsvRows {
  /** the input bytes (offsets below are into these) */
  source: ByteSource;
  /** row r is bytes [rowStart[r], rowEnd[r]) of the source, without its line feed */
  rowStart: Uint32Array;
  rowEnd: Uint32Array;
  /** the field delimiter (one ASCII byte) */
  delimiter: number;
  /** columns in the header */
  width: number;
  /** column of the feature id, −1 when none */
  idCol: number;
  /** column whose cell is written as the weight number, −1 when none */
  weightCol: number;
  /** the weights as read (input order), when a weight column is named */
  weight: Float64Array | null;
  /** for each column, `"name":` as UTF-8 bytes when the column is a property, else null */
  keys: (Uint8Array | null)[];
  /** sum of the keys' lengths */
  keyBytes: number;
  /**
   * 1 where the row can be written from its bytes: every property is written as JSON.stringify
   * writes the parsed feature's (no cell holds a backslash or a control character, and the
   * header has no name JSON.stringify would move or the output replaces)
   */
  verbatim: Uint8Array;
}

/** Observations read by the CSV byte reader: the usual fields plus the row spans. */
export interface CsvObservations extends Observations {
  csvRows: CsvRows;
}

/** What the CSV byte reader needs to know (the parsing reader's options). */
export interface CsvByteOptions {
  weightProperty: string | null;
  time: TimeRule;
  idProperty?: string | null;
  lonColumn?: string;
  latColumn?: string;
  delimiter?: string;
  maxFeatures: number;
}

const QUOTE = 34;
const CR = 13;
const LF = 10;
const BACKSLASH = 92;
const MINUS = 45;
const DOT = 46;
const ZERO = 48;
const NINE = 57;
const POW10 = [1e0, 1e1, 1e2, 1e3, 1e4, 1e5, 1e6, 1e7, 1e8, 1e9, 1e10, 1e11, 1e12, 1e13, 1e14, 1e15];

const utf8Slice = Buffer.prototype.utf8Slice as (this: Uint8Array, start: number, end: number) => string;
const latin1Slice = Buffer.prototype.latin1Slice as (this: Uint8Array, start: number, end: number) => string;

/** Thrown inside the scan when the input is outside the fast path. */
class NotFast extends Error {}
const NOT_FAST = new NotFast('outside the CSV byte reader');

/**
 * The number parseDecimal (src/ingest/checks.ts) reads from the cell bytes [s, e). Cells of the
 * form -?digits(.digits)? with at most 15 digits are m / 10^k with m and 10^k exact, so the one
 * rounding of the division gives the correctly rounded value Number() gives (source: W. D.
 * Clinger, "How to Read Floating Point Numbers Accurately", PLDI 1990); parseFloat reads the same
 * prefix, the whole cell. Any other cell is decoded and read by parseDecimal itself.
 */
function cellNumber(b: Uint8Array, s: number, e: number): number {
  let i = s;
  const neg = b[i] === MINUS;
  if (neg) i++;
  let m = 0;
  let digits = 0;
  let scale = 0;
  const intStart = i;
  while (i < e) {
    const c = b[i]!;
    if (c < ZERO || c > NINE) break;
    m = m * 10 + (c - ZERO);
    i++;
  }
  digits = i - intStart;
  if (digits > 0 && i < e && b[i] === DOT) {
    i++;
    const f = i;
    while (i < e) {
      const c = b[i]!;
      if (c < ZERO || c > NINE) break;
      m = m * 10 + (c - ZERO);
      i++;
    }
    scale = i - f;
    digits += scale;
    if (scale === 0) i = -1; // "12." is left to parseDecimal
  }
  if (i === e && digits > 0 && digits <= 15) {
    const v = scale === 0 ? m : m / POW10[scale]!;
    return neg ? -v : v;
  }
  return parseDecimal(utf8Slice.call(b, s, e));
}

/** A header name as the parsing reader makes it: trimmed, `column_k` when empty. */
function headerNames(line: string, delimiter: string): string[] {
  return line.split(delimiter).map((h, k) => (h.trim() === '' ? `column_${k + 1}` : h.trim()));
}

/** Whether JSON.stringify would write a member of this name before the others (an array index). */
function indexLike(name: string): boolean {
  return /^(0|[1-9][0-9]*)$/.test(name) && Number(name) < 2 ** 32 - 1;
}

/** Growable per-row columns. */
class Columns {
  n = 0;
  lon: Float64Array;
  lat: Float64Array;
  weight: Float64Array | null;
  time: Float64Array;
  rowStart: Uint32Array;
  rowEnd: Uint32Array;
  verbatim: Uint8Array;
  constructor(
    public cap: number,
    weighted: boolean,
  ) {
    this.lon = sharedFloat64(cap);
    this.lat = sharedFloat64(cap);
    this.weight = weighted ? sharedFloat64(cap) : null;
    this.time = sharedFloat64(cap);
    this.rowStart = sharedUint32(cap);
    this.rowEnd = sharedUint32(cap);
    this.verbatim = sharedUint8(cap);
  }
  grow(cap: number): void {
    const n = this.n;
    const f64 = (a: Float64Array): Float64Array => {
      const b = sharedFloat64(cap);
      b.set(a.subarray(0, n));
      return b;
    };
    const u32 = (a: Uint32Array): Uint32Array => {
      const b = sharedUint32(cap);
      b.set(a.subarray(0, n));
      return b;
    };
    this.lon = f64(this.lon);
    this.lat = f64(this.lat);
    if (this.weight !== null) this.weight = f64(this.weight);
    this.time = f64(this.time);
    this.rowStart = u32(this.rowStart);
    this.rowEnd = u32(this.rowEnd);
    const v = sharedUint8(cap);
    v.set(this.verbatim.subarray(0, n));
    this.verbatim = v;
    this.cap = cap;
  }
}

/** The header's reading: the columns the rows are read by. */
interface Layout {
  header: string[];
  width: number;
  lonCol: number;
  latCol: number;
  idCol: number;
  weightCol: number;
  timeCol: number;
  /** the rows' properties can be written from their bytes (see CsvRows.verbatim) */
  writable: boolean;
}

/** The header's columns, or null when the parsing reader would find a problem with the header. */
function layout(line: string, delimiter: string, options: CsvByteOptions): Layout | null {
  const header = headerNames(line, delimiter);
  const lower = header.map((h) => h.toLowerCase());
  if (header.some((h, k) => header.indexOf(h) !== k)) return null;
  const lonCol = findColumn(header, lower, options.lonColumn, LONGITUDE_HEADERS);
  const latCol = findColumn(header, lower, options.latColumn, LATITUDE_HEADERS);
  if (lonCol < 0 || latCol < 0 || lonCol === latCol) return null;
  const idProperty = options.idProperty ?? null;
  const idCol = idProperty === null ? lower.indexOf('id') : -1;
  const time = options.time;
  const timeCol = time.property === TIME_PROPERTY ? lower.indexOf(TIME_PROPERTY) : header.indexOf(time.property);
  if (timeCol < 0 && time.property !== TIME_PROPERTY) return null;
  const weightCol = options.weightProperty === null ? -1 : header.indexOf(options.weightProperty);
  if (options.weightProperty !== null && weightCol < 0) return null;
  let writable = weightCol < 0 || (weightCol !== lonCol && weightCol !== latCol && weightCol !== idCol);
  for (let k = 0; k < header.length; k++) {
    if (k === lonCol || k === latCol || k === idCol) continue;
    const name = header[k]!;
    // a property name the content rule refuses: every row would be refused
    if (name.length > MAX_KEY_CHARS || textFault(name) !== null) return null;
    if (indexLike(name) || name === 'hotspot_id' || name === 'role') writable = false;
  }
  return { header, width: header.length, lonCol, latCol, idCol, weightCol, timeCol, writable };
}

/**
 * Reads CSV from its UTF-8 bytes (in memory or a file read in chunks), or returns null when the
 * input is outside what this reader reads exactly (see the header); the caller then reads it with
 * the parsing reader. Never throws InputError itself.
 */
export function readCsvSource(source: MemorySource | InputFile, options: CsvByteOptions): CsvObservations | null {
  if (source.size >= 2 ** 32 || source.size === 0) return null;
  const { weightProperty, time } = options;
  // a property name that is also a member every object inherits reads differently from a parsed object
  if ((weightProperty !== null && weightProperty in Object.prototype) || time.property in Object.prototype) return null;
  try {
    return scan(source, options);
  } catch (err) {
    if (err !== NOT_FAST) throw err;
    return null;
  }
}

function scan(source: MemorySource | InputFile, options: CsvByteOptions): CsvObservations {
  const file = source instanceof InputFile ? source : null;
  let buf: Uint8Array = file === null ? (source as MemorySource).bytes : new Uint8Array(Math.min(file.windowBytes, source.size));
  /** offset in the source of buf[0] */
  let base = 0;
  /** bytes of buf holding input */
  let end = file === null ? buf.length : file.readInto(buf, 0, 0);
  /** the last chunk of the source is in buf */
  let final = base + end >= source.size;
  // the complete lines of a chunk are checked for UTF-8 at once; up to `checked` they are
  let checked = 0;
  const checkUtf8 = (upTo: number): void => {
    if (upTo > checked) {
      if (!isUtf8(buf.subarray(checked, upTo))) throw NOT_FAST;
      checked = upTo;
    }
  };

  /** Moves the chunk to start at `keep` and reads on (the chunk grows when `keep` is 0 and it is full). */
  const more = (keep: number): void => {
    if (keep === 0 && end === buf.length) {
      const grown = new Uint8Array(buf.length * 2);
      grown.set(buf.subarray(0, end));
      buf = grown;
    } else buf.copyWithin(0, keep, end);
    base += keep;
    end -= keep;
    checked = Math.max(0, checked - keep);
    const got = (file as InputFile).readInto(buf, end, base + end);
    if (got === 0) throw new RangeError(`${(file as InputFile).path} changed while it was read`);
    end += got;
    final = base + end >= source.size;
  };
  /** The end of the line from `from` in the chunk: its line feed, or the chunk's end. */
  const lineEnd = (from: number): number => {
    const e = buf.indexOf(LF, from);
    return e < 0 || e >= end ? end : e;
  };

  while (end < 6 && !final) more(0);
  let i = 0;
  if (buf[0] === 0xef && buf[1] === 0xbb && buf[2] === 0xbf) {
    i = 3;
    // a second mark is a character of the first cell to csv-parse
    if (buf[3] === 0xef && buf[4] === 0xbb && buf[5] === 0xbf) throw NOT_FAST;
  }
  // the delimiter is sniffed from the first line, the header is the first line that is not empty
  while (lineEnd(i) === end && !final) more(0);
  const delimiter = options.delimiter ?? sniffDelimiter(latin1Slice.call(buf, i, lineEnd(i)));
  const d = delimiter.charCodeAt(0);
  if (delimiter.length !== 1 || d >= 0x80 || d === QUOTE || d === LF || d === CR) throw NOT_FAST;
  for (;;) {
    while (i < end && buf[i] === LF) i++;
    if (lineEnd(i) < end || final) break;
    more(i);
    i = 0;
  }
  const headerEnd = lineEnd(i);
  for (let k = i; k < headerEnd; k++) if (buf[k] === QUOTE || buf[k] === CR) throw NOT_FAST;
  checkUtf8(headerEnd);
  const lay = layout(utf8Slice.call(buf, i, headerEnd), delimiter, options);
  if (lay === null) throw NOT_FAST;
  const { width, lonCol, latCol, idCol, weightCol, timeCol } = lay;
  i = headerEnd + 1;

  const cols = new Columns(Math.max(16, Math.min(Math.ceil(source.size / 24), 1 << 16)), weightCol >= 0);
  let estimated = false;
  let timed = 0;
  const time = options.time;
  const cells = new Int32Array(width + 1);
  for (;;) {
    if (i >= end && final) break;
    // a whole line in the chunk, or the chunk moved on to hold it
    let e = buf.indexOf(LF, i);
    if ((e < 0 || e >= end) && !final) {
      more(i);
      i = 0;
      continue;
    }
    if (e < 0 || e >= end) e = end;
    // the chunk's complete lines at once (a line feed never lies inside a character's bytes)
    if (e > checked) checkUtf8(final ? end : Math.max(e, buf.lastIndexOf(LF, end - 1)));
    if (e === i) {
      i = e + 1; // an empty line is skipped
      if (i > end) break;
      continue;
    }
    // the cells: split at the delimiter; quotes and carriage returns are for csv-parse
    let c = 1;
    cells[0] = i;
    let plain = 1;
    for (let k = i; k < e; k++) {
      const x = buf[k]!;
      if (x === d) {
        if (c === width) throw NOT_FAST; // more fields than the header
        cells[c++] = k + 1;
      } else if (x < 32 || x === BACKSLASH || x === QUOTE) {
        if (x === QUOTE || x === CR) throw NOT_FAST;
        plain = 0;
      }
    }
    if (c !== width) throw NOT_FAST;
    cells[c] = e + 1;
    const row = cols.n;
    if (row === cols.cap) cols.grow(cols.cap * 2);
    const x = cellNumber(buf, cells[lonCol]!, cells[lonCol + 1]! - 1);
    const y = cellNumber(buf, cells[latCol]!, cells[latCol + 1]! - 1);
    if (!(x >= -180 && x <= 180 && y >= -90 && y <= 90) && (x !== x || y !== y || rangeProblem(x, y) !== null)) throw NOT_FAST;
    cols.lon[row] = x;
    cols.lat[row] = y;
    if (weightCol >= 0) {
      const w = cellNumber(buf, cells[weightCol]!, cells[weightCol + 1]! - 1);
      if (!(w >= 0)) throw NOT_FAST;
      (cols.weight as Float64Array)[row] = w;
    }
    let t = NaN;
    if (timeCol >= 0) {
      const s = cells[timeCol]!;
      const te = cells[timeCol + 1]! - 1;
      // RFC 3339 read from the bytes where it reads there; otherwise as the parsing reader does
      if (time.format === null && te - s >= 20) t = parseTimestampBytes(buf, s, te);
      if (t === t) timed++;
      else if (te > s) {
        const text = utf8Slice.call(buf, s, te).trim();
        if (text !== '') {
          t = readTime(text, time);
          if (t !== t) throw NOT_FAST;
          timed++;
        }
      }
    }
    cols.time[row] = t;
    // the content rule (src/ingest/limits.ts): ids without NUL and not too long, texts not too long
    if (idCol >= 0) {
      const s = cells[idCol]!;
      const ie = cells[idCol + 1]! - 1;
      if (ie - s > MAX_ID_CHARS) throw NOT_FAST;
      for (let k = s; k < ie; k++) if (buf[k] === 0) throw NOT_FAST;
    }
    if (e - i > MAX_STRING_CHARS) {
      for (let k = 0; k < width; k++) if (cells[k + 1]! - 1 - cells[k]! > MAX_STRING_CHARS) throw NOT_FAST;
    }
    cols.rowStart[row] = base + i;
    cols.rowEnd[row] = base + e;
    cols.verbatim[row] = plain;
    cols.n = row + 1;
    if (!estimated && cols.n === 2048) {
      // sized to the whole input from the bytes the first rows took, with a little to spare
      estimated = true;
      const want = Math.ceil((source.size / (base + e)) * cols.n * 1.04) + 64;
      if (want > cols.cap) cols.grow(want);
    }
    i = e + 1;
  }
  const n = cols.n;
  if (n === 0 || n > options.maxFeatures) throw NOT_FAST;

  const keys = lay.header.map((h, k) => (k === lonCol || k === latCol || k === idCol ? null : new Uint8Array(Buffer.from(`${JSON.stringify(h)}:`, 'utf8'))));
  const weight = cols.weight === null ? null : cols.weight.slice(0, n);
  const verbatim = cols.verbatim.subarray(0, n);
  if (!lay.writable) verbatim.fill(0);
  const rows: CsvRows = {
    source,
    rowStart: cols.rowStart.subarray(0, n),
    rowEnd: cols.rowEnd.subarray(0, n),
    delimiter: d,
    width,
    idCol,
    weightCol,
    weight,
    keys,
    keyBytes: keys.reduce((sum, k) => sum + (k === null ? 0 : k.length), 0),
    verbatim,
  };
  // views in shared memory, handed to the point-layer worker without a copy (src/cli/layer-thread.ts)
  const lon = cols.lon.subarray(0, n);
  const lat = cols.lat.subarray(0, n);
  return {
    points: { n, lon, lat, weight },
    features: lazyFeatures(rows, lay, lon, lat),
    observedAt: timed > 0 ? cols.time.slice(0, n) : null,
    csvRows: rows,
  };
}

/** Row r as the feature the parsing reader builds (src/ingest/csv.ts readRecords). */
function rowFeature(rows: CsvRows, lay: Layout, r: number, x: number, y: number, w: ByteWindow): InputFeature {
  const s = rows.rowStart[r]!;
  const e = rows.rowEnd[r]!;
  w.need(s, e);
  const record = utf8Slice.call(w.buf, s - w.base, e - w.base).split(String.fromCharCode(rows.delimiter));
  const { header, lonCol, latCol, idCol, weightCol } = lay;
  const properties: Record<string, unknown> = {};
  for (let k = 0; k < lay.width; k++) {
    if (k === lonCol || k === latCol || k === idCol) continue;
    const name = header[k] as string;
    if (name === '__proto__') Object.defineProperty(properties, name, { value: record[k], enumerable: true, writable: true, configurable: true });
    else properties[name] = record[k];
  }
  if (weightCol >= 0) Object.defineProperty(properties, header[weightCol] as string, { value: (rows.weight as Float64Array)[r], enumerable: true, writable: true, configurable: true });
  const feature: InputFeature = { type: 'Feature', geometry: { type: 'Point', coordinates: [x, y] }, properties };
  if (idCol >= 0 && record[idCol] !== '') feature.id = record[idCol];
  return feature;
}

/** An array of the rows' features that builds each from its row when first read. */
function lazyFeatures(rows: CsvRows, lay: Layout, lon: Float64Array, lat: Float64Array): InputFeature[] {
  const n = rows.rowStart.length;
  const target: InputFeature[] = new Array(n);
  // one window for all: features are mostly read in order (filters, counts)
  const w = rows.source.window();
  const index = (key: string | symbol): number => {
    if (typeof key !== 'string') return -1;
    const c = key.charCodeAt(0);
    if (!(c >= 48 && c <= 57)) return -1;
    const k = Number(key);
    return Number.isInteger(k) && k >= 0 && k < n && String(k) === key ? k : -1;
  };
  return new Proxy(target, {
    get(t, key, receiver) {
      const k = index(key);
      if (k >= 0) return (t[k] ??= rowFeature(rows, lay, k, lon[k]!, lat[k]!, w));
      return Reflect.get(t, key, receiver);
    },
    has(t, key) {
      return index(key) >= 0 || Reflect.has(t, key);
    },
  });
}

/** Most bytes writeCsvId and writeCsvMembers write for row r. */
export function csvRowNeed(rows: CsvRows, r: number): number {
  return 64 + rows.rowEnd[r]! - rows.rowStart[r]! + rows.keyBytes + 3 * rows.width + 32;
}

/**
 * Writes row r's id member (`,"id":"…"`, nothing when it has none) at `pos` of `out`; `b` holds
 * the row at `rs` (a window's bytes). Returns where it ends. Only for rows marked verbatim.
 */
export function writeCsvId(rows: CsvRows, b: Uint8Array, rs: number, re: number, out: Uint8Array, pos: number): number {
  if (rows.idCol < 0) return pos;
  const [s, e] = cellAt(rows, b, rs, re, rows.idCol);
  if (e === s) return pos;
  pos = put(out, pos, ID);
  out.set(b.subarray(s, e), pos);
  pos += e - s;
  out[pos++] = QUOTE;
  return pos;
}

/**
 * Writes row r's properties as JSON.stringify writes them, without the braces (`"a":"x","n":2`,
 * nothing when there are none), at `pos` of `out`; `b` holds the row at [rs, re). Returns where
 * it ends. Only for rows marked verbatim.
 */
export function writeCsvMembers(rows: CsvRows, r: number, b: Uint8Array, rs: number, re: number, out: Uint8Array, pos: number): number {
  const d = rows.delimiter;
  let first = true;
  let s = rs;
  for (let k = 0; k < rows.width; k++) {
    let e = s;
    while (e < re && b[e] !== d) e++;
    const key = rows.keys[k]!;
    if (key !== null) {
      if (!first) out[pos++] = 44;
      first = false;
      pos = put(out, pos, key);
      if (k === rows.weightCol) {
        const text = String((rows.weight as Float64Array)[r]);
        for (let q = 0; q < text.length; q++) out[pos++] = text.charCodeAt(q);
      } else {
        out[pos++] = QUOTE;
        const n = e - s;
        if (n > 32) out.set(b.subarray(s, e), pos);
        else for (let q = 0; q < n; q++) out[pos + q] = b[s + q]!;
        pos += n;
        out[pos++] = QUOTE;
      }
    }
    s = e + 1;
  }
  return pos;
}

const ID = new Uint8Array(Buffer.from(',"id":"', 'latin1'));

function put(out: Uint8Array, pos: number, bytes: Uint8Array): number {
  for (let q = 0; q < bytes.length; q++) out[pos + q] = bytes[q]!;
  return pos + bytes.length;
}

/** Bytes [s, e) of cell `col` of the row at [rs, re) of `b`. */
function cellAt(rows: CsvRows, b: Uint8Array, rs: number, re: number, col: number): [number, number] {
  const d = rows.delimiter;
  let s = rs;
  for (let k = 0; k < col; k++) {
    while (s < re && b[s] !== d) s++;
    s++;
  }
  let e = s;
  while (e < re && b[e] !== d) e++;
  return [s, e];
}
