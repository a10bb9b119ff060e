/**
 * The checks a schema cannot express, shared by the GeoJSON, CSV and text-sequence readers:
 * position ranges with the swapped-order hint, RFC 3339 times, weights, and the capped list of
 * problems that becomes one InputError. Everything here is allocation-free on the good path;
 * strings are built only when something is wrong.
 */
import { InputError, type InputProblem } from './types.js';

/** Default cap on the number of problems an InputError carries (the total is still counted). */
export const DEFAULT_MAX_PROBLEMS = 100;

/** The property (GeoJSON) or column (CSV) that holds an observation's time. */
export const TIME_PROPERTY = 'observed_at';

/**
 * Collects problems in the order found, keeps at most `cap` of them and counts them all, so the
 * error can say "100 shown of 2 345". Problems about the input as a whole go first.
 */
export class ProblemList {
  readonly items: InputProblem[] = [];
  total = 0;
  constructor(readonly cap: number = DEFAULT_MAX_PROBLEMS) {}

  /** Records one problem with one feature, row or record (index 0-based) or, index null, with the input. */
  add(index: number | null, id: string | number | undefined, code: string, message: string): void {
    this.total++;
    if (this.items.length >= this.cap) return;
    const p: InputProblem = { index, code, message };
    if (id !== undefined && id !== null) p.id = id;
    this.items.push(p);
  }

  /** Records a problem with the whole input, ahead of the per-feature ones (it explains them). */
  addFirst(code: string, message: string): void {
    this.total++;
    this.items.unshift({ index: null, code, message });
    if (this.items.length > this.cap) this.items.pop();
  }

  /** Throws the InputError when anything was recorded. */
  throwIfAny(): void {
    if (this.total > 0) throw new InputError(this.items, this.total);
  }
}

/** Throws an InputError carrying one problem with the input as a whole. */
export function fail(code: string, message: string): never {
  throw new InputError([{ index: null, code, message }], 1);
}

/** How messages name an item: `feature 3 (id "a7")`, `row 3 (line 5)`, `record 3 (line 4)`. */
export function locate(noun: string, index: number, id?: unknown, line?: number): string {
  let s = `${noun} ${index}`;
  if (line !== undefined && line > 0) s += ` (line ${line})`;
  if (id !== undefined && id !== null && (typeof id === 'string' || typeof id === 'number')) s += ` (id ${JSON.stringify(id)})`;
  return s;
}

/** A short plain-words description of a JSON value for messages: `the string "3"`, `an array`, `null`. */
export function describe(v: unknown): string {
  if (v === null) return 'null';
  if (v === undefined) return 'missing';
  if (Array.isArray(v)) return `an array of ${v.length}`;
  switch (typeof v) {
    case 'string':
      return `the string ${JSON.stringify(v.length > 40 ? v.slice(0, 40) + '…' : v)}`;
    case 'number':
      return Number.isFinite(v) ? `the number ${v}` : `the number ${v} (too large to be finite)`;
    case 'boolean':
      return `the boolean ${v}`;
    case 'object':
      return 'an object';
    default:
      return typeof v;
  }
}

/**
 * Says what is wrong with a longitude/latitude pair that failed the range test, or null when it
 * is in range. When the pair is out of range as given but in range swapped, the code is
 * `swapped-coordinates` and the message says GeoJSON order is [longitude, latitude].
 */
export function rangeProblem(lon: number, lat: number): { code: string; message: string } | null {
  const lonOk = lon >= -180 && lon <= 180;
  const latOk = lat >= -90 && lat <= 90;
  if (lonOk && latOk) return null;
  const swappedOk = lat >= -180 && lat <= 180 && lon >= -90 && lon <= 90;
  const what = !latOk
    ? `latitude ${lat} is out of range (−90 to 90)`
    : `longitude ${lon} is out of range (−180 to 180)`;
  const both = !latOk && !lonOk ? ` and longitude ${lon} is out of range (−180 to 180)` : '';
  if (swappedOk) {
    return {
      code: 'swapped-coordinates',
      message: `${what}; the pair looks like [latitude, longitude] — GeoJSON order is [longitude, latitude]`,
    };
  }
  return { code: 'out-of-range', message: `${what}${both}` };
}

/**
 * Parses a number written as text (a CSV cell): decimal notation with optional sign, fraction and
 * exponent, surrounding spaces allowed. Returns NaN for anything else — empty cells, `0x1F`,
 * `12abc`, `Infinity` — where `Number()` alone would accept "" as 0 and hexadecimal.
 */
export function parseDecimal(s: string): number {
  const v = Number(s);
  // parseFloat stops at the first character that is not decimal notation, so agreement with
  // Number() rules out hexadecimal, binary and empty strings.
  return Number.isFinite(v) && v === parseFloat(s) ? v : NaN;
}

// Days from 1970-01-01 to the given proleptic Gregorian date (H. Hinnant, "chrono-Compatible
// Low-Level Date Algorithms", days_from_civil). Used instead of Date.UTC, which maps years 0–99 to 1900–1999.
function daysFromCivil(y: number, m: number, d: number): number {
  y -= m <= 2 ? 1 : 0;
  const era = Math.floor(y / 400);
  const yoe = y - era * 400;
  const doy = Math.floor((153 * (m + (m > 2 ? -3 : 9)) + 2) / 5) + d - 1;
  const doe = yoe * 365 + Math.floor(yoe / 4) - Math.floor(yoe / 100) + doy;
  return era * 146097 + doe - 719468;
}

function digits(s: string, at: number, count: number): number {
  let v = 0;
  for (let k = 0; k < count; k++) {
    const c = s.charCodeAt(at + k) - 48;
    if (c < 0 || c > 9) return -1;
    v = v * 10 + c;
  }
  return v;
}

function daysInMonth(y: number, m: number): number {
  if (m === 2) return (y % 4 === 0 && y % 100 !== 0) || y % 400 === 0 ? 29 : 28;
  return m === 4 || m === 6 || m === 9 || m === 11 ? 30 : 31;
}

/**
 * Parses an RFC 3339 date-time (`2024-05-01T06:30:00Z`, `2024-05-01 06:30:00.250+02:00`) to epoch
 * milliseconds; returns NaN when the text is not one. The offset is required, because a time
 * without one means a different instant on every server. Fractions beyond milliseconds are
 * truncated; a leap second (:60) counts as the first second of the next minute.
 * With `dateOnly` true a bare date (`2024-05-01`) is also accepted, as 00:00 UTC that day.
 */
export function parseTimestamp(s: string, dateOnly = false): number {
  const n = s.length;
  if (n < 10) return NaN;
  const y = digits(s, 0, 4);
  const mo = digits(s, 5, 2);
  const d = digits(s, 8, 2);
  if (y < 0 || mo < 1 || mo > 12 || d < 1 || s.charCodeAt(4) !== 45 || s.charCodeAt(7) !== 45) return NaN;
  if (d > daysInMonth(y, mo)) return NaN;
  const day = daysFromCivil(y, mo, d) * 86_400_000;
  if (n === 10) return dateOnly ? day : NaN;
  const t = s.charCodeAt(10);
  if ((t !== 84 && t !== 116 && t !== 32) || n < 20) return NaN; // 'T', 't' or ' '
  const h = digits(s, 11, 2);
  const mi = digits(s, 14, 2);
  const sec = digits(s, 17, 2);
  if (h < 0 || h > 23 || mi < 0 || mi > 59 || sec < 0 || sec > 60) return NaN;
  if (s.charCodeAt(13) !== 58 || s.charCodeAt(16) !== 58) return NaN;
  let i = 19;
  let ms = 0;
  if (s.charCodeAt(i) === 46) {
    i++;
    const start = i;
    let scale = 100;
    for (; i < n; i++) {
      const c = s.charCodeAt(i) - 48;
      if (c < 0 || c > 9) break;
      ms += c * scale;
      scale /= 10;
    }
    if (i === start) return NaN;
    ms = Math.floor(ms);
  }
  let offsetMin = 0;
  const z = s.charCodeAt(i);
  if (z === 90 || z === 122) {
    // 'Z' or 'z'
    i++;
  } else if (z === 43 || z === 45) {
    const oh = digits(s, i + 1, 2);
    const om = digits(s, i + 4, 2);
    if (oh < 0 || oh > 23 || om < 0 || om > 59 || s.charCodeAt(i + 3) !== 58) return NaN;
    offsetMin = (z === 45 ? -1 : 1) * (oh * 60 + om);
    i += 6;
  } else {
    return NaN;
  }
  if (i !== n) return NaN;
  return day + ((h * 60 + mi - offsetMin) * 60 + sec) * 1000 + ms;
}

/** Digits of bytes [at, at + count) of b below `end` as a number; −1 when one is not a digit (NaN past `end`, as charCodeAt past a string's end). */
function byteDigits(b: Uint8Array, end: number, at: number, count: number): number {
  let v = 0;
  for (let k = 0; k < count; k++) {
    const c = (at + k < end ? b[at + k]! : NaN) - 48;
    if (c < 0 || c > 9) return -1;
    v = v * 10 + c;
  }
  return v;
}

/** Byte k of the text of n bytes at s of b, NaN past its end (as charCodeAt past a string's end); a function, not a closure per call. */
function byteAt(b: Uint8Array, s: number, n: number, k: number): number {
  return k < n ? b[s + k]! : NaN;
}

/**
 * parseTimestamp of the text of bytes [s, e) of `b`, without making a string: the same steps on
 * the bytes, which are the text's UTF-16 units where it is ASCII. Returns NaN for anything it
 * does not read, non-ASCII text included; the caller then reads the text with parseTimestamp,
 * so a value returned here is always the one parseTimestamp gives.
 */
export function parseTimestampBytes(b: Uint8Array, s: number, e: number): number {
  const n = e - s;
  if (n < 20) return NaN;
  const y = byteDigits(b, e, s, 4);
  const mo = byteDigits(b, e, s + 5, 2);
  const d = byteDigits(b, e, s + 8, 2);
  if (y < 0 || mo < 1 || mo > 12 || d < 1 || byteAt(b, s, n, 4) !== 45 || byteAt(b, s, n, 7) !== 45) return NaN;
  if (d > daysInMonth(y, mo)) return NaN;
  const day = daysFromCivil(y, mo, d) * 86_400_000;
  const t = byteAt(b, s, n, 10);
  if (t !== 84 && t !== 116 && t !== 32) return NaN;
  const h = byteDigits(b, e, s + 11, 2);
  const mi = byteDigits(b, e, s + 14, 2);
  const sec = byteDigits(b, e, s + 17, 2);
  if (h < 0 || h > 23 || mi < 0 || mi > 59 || sec < 0 || sec > 60) return NaN;
  if (byteAt(b, s, n, 13) !== 58 || byteAt(b, s, n, 16) !== 58) return NaN;
  let i = 19;
  let ms = 0;
  if (byteAt(b, s, n, i) === 46) {
    i++;
    const start = i;
    let scale = 100;
    for (; i < n; i++) {
      const c = byteAt(b, s, n, i) - 48;
      if (c < 0 || c > 9) break;
      ms += c * scale;
      scale /= 10;
    }
    if (i === start) return NaN;
    ms = Math.floor(ms);
  }
  let offsetMin = 0;
  const z = byteAt(b, s, n, i);
  if (z === 90 || z === 122) {
    i++;
  } else if (z === 43 || z === 45) {
    const oh = byteDigits(b, e, s + i + 1, 2);
    const om = byteDigits(b, e, s + i + 4, 2);
    if (oh < 0 || oh > 23 || om < 0 || om > 59 || byteAt(b, s, n, i + 3) !== 58) return NaN;
    offsetMin = (z === 45 ? -1 : 1) * (oh * 60 + om);
    i += 6;
  } else {
    return NaN;
  }
  if (i !== n) return NaN;
  return day + ((h * 60 + mi - offsetMin) * 60 + sec) * 1000 + ms;
}

/** The message for a time value that is neither RFC 3339 nor in the rule's format. */
export function timeMessage(where: string, v: unknown, rule: TimeRule = DEFAULT_TIME_RULE): string {
  if (rule.format !== null) {
    return `${where}: ${rule.property} is ${describe(v)}, which is not a time written ${rule.format.pattern} (the time_format given)`;
  }
  return `${where}: ${rule.property} is ${describe(v)}; write an RFC 3339 date-time with an offset, for example "2024-05-01T06:30:00Z", or give its format with time_format (for example DD.MM.YYYY)`;
}

/** Where an observation's time is and how it is written. */
export interface TimeRule {
  /** property (CSV: column) holding the time; `observed_at` by default */
  readonly property: string;
  /** the format of the time text, or null for RFC 3339 */
  readonly format: TimeFormat | null;
}

export const DEFAULT_TIME_RULE: TimeRule = Object.freeze({ property: TIME_PROPERTY, format: null });

/**
 * The time rule for a time column and format as given in the settings.
 * @throws InputError `bad-time-format` for a pattern that cannot be used
 */
export function timeRule(column: string | null | undefined, format: string | null | undefined): TimeRule {
  const property = column === null || column === undefined || column === '' ? TIME_PROPERTY : column;
  if (format === null || format === undefined || format === '') return property === TIME_PROPERTY ? DEFAULT_TIME_RULE : { property, format: null };
  const compiled = compileTimeFormat(format);
  if (typeof compiled === 'string') fail('bad-time-format', compiled);
  return { property, format: compiled };
}

/** Epoch milliseconds of a time value under the rule (a string in its format, or RFC 3339), NaN when unreadable. */
export function readTime(v: unknown, rule: TimeRule): number {
  if (typeof v !== 'string') return NaN;
  return rule.format === null ? parseTimestamp(v) : parseFormattedTime(v.trim(), rule.format);
}

/**
 * A time format for a column that does not hold RFC 3339: a pattern in the notation ISO 8601
 * uses to describe representations — `YYYY` year, `MM` month, `DD` day, `hh` hour (00–23), `mm`
 * minute, `ss` second — with any other characters standing for themselves, for example
 * `DD.MM.YYYY`, `MM/DD/YYYY hh:mm` or `YYYYMMDD`. Times are read as UTC. Each field has exactly
 * as many digits as its letters (source: ISO 8601-1:2019, 3.2, representation notation).
 */
export interface TimeFormat {
  /** the pattern as given */
  readonly pattern: string;
  /** literal texts and fields in order */
  readonly parts: readonly (string | 'YYYY' | 'MM' | 'DD' | 'hh' | 'mm' | 'ss')[];
}

const FORMAT_FIELDS = ['YYYY', 'MM', 'DD', 'hh', 'mm', 'ss'] as const;

/**
 * Compiles a time format pattern (see TimeFormat).
 * @returns the format, or a message saying what is wrong with the pattern
 */
export function compileTimeFormat(pattern: string): TimeFormat | string {
  const parts: (string | (typeof FORMAT_FIELDS)[number])[] = [];
  const seen = new Set<string>();
  let literal = '';
  for (let i = 0; i < pattern.length; ) {
    const field = FORMAT_FIELDS.find((f) => pattern.startsWith(f, i));
    if (field !== undefined) {
      if (seen.has(field)) return `time_format ${JSON.stringify(pattern)} has ${field} twice`;
      seen.add(field);
      if (literal !== '') parts.push(literal);
      literal = '';
      parts.push(field);
      i += field.length;
      continue;
    }
    const c = pattern[i] as string;
    if (/[A-Za-z]/.test(c)) {
      return `time_format ${JSON.stringify(pattern)} has an unknown letter ${JSON.stringify(c)} at ${i}; use YYYY, MM, DD, hh, mm and ss (for example DD.MM.YYYY or YYYY-MM-DD hh:mm), other characters are taken as written`;
    }
    literal += c;
    i++;
  }
  if (literal !== '') parts.push(literal);
  for (const need of ['YYYY', 'MM', 'DD'] as const) {
    if (!seen.has(need)) return `time_format ${JSON.stringify(pattern)} has no ${need}; a time needs YYYY, MM and DD (for example DD.MM.YYYY)`;
  }
  if (seen.has('ss') && !seen.has('mm')) return `time_format ${JSON.stringify(pattern)} has ss without mm`;
  if (seen.has('mm') && !seen.has('hh')) return `time_format ${JSON.stringify(pattern)} has mm without hh`;
  return { pattern, parts };
}

/** Epoch milliseconds of a text written in the given format (UTC), or NaN when it does not match. */
export function parseFormattedTime(s: string, format: TimeFormat): number {
  const v: Record<string, number> = { YYYY: 0, MM: 0, DD: 0, hh: 0, mm: 0, ss: 0 };
  let i = 0;
  for (const part of format.parts) {
    if ((FORMAT_FIELDS as readonly string[]).includes(part)) {
      const value = digits(s, i, part.length);
      if (value < 0) return NaN;
      v[part] = value;
      i += part.length;
    } else {
      if (!s.startsWith(part, i)) return NaN;
      i += part.length;
    }
  }
  if (i !== s.length) return NaN;
  if (v.MM < 1 || v.MM > 12 || v.DD < 1 || v.DD > daysInMonth(v.YYYY, v.MM) || v.hh > 23 || v.mm > 59 || v.ss > 59) return NaN;
  return (daysFromCivil(v.YYYY, v.MM, v.DD) * 86_400 + (v.hh * 60 + v.mm) * 60 + v.ss) * 1000;
}


/** The message for a weight that is not a finite number ≥ 0. */
export function weightMessage(where: string, property: string, v: unknown): string {
  if (v === undefined) return `${where}: has no property "${property}" to weight it by; give every observation a weight (1 for a single sighting)`;
  if (typeof v === 'number') return `${where}: weight "${property}" is ${v}; weights must be finite numbers ≥ 0`;
  if (typeof v === 'string' && Number.isFinite(parseDecimal(v))) {
    return `${where}: weight "${property}" is ${describe(v)}; write it as a JSON number (${v.trim()}), not a string`;
  }
  return `${where}: weight "${property}" is ${describe(v)}; weights must be finite numbers ≥ 0`;
}

/**
 * Finds where a JSON text first breaks the grammar (RFC 8259), as a 0-based character offset, or
 * −1 when the text is valid JSON. Only called after JSON.parse has failed, to give a position
 * and line even when the engine's message has none. Iterative, so deep nesting cannot overflow.
 */
export function jsonErrorOffset(text: string): number {
  const n = text.length;
  const stack: number[] = []; // 1 = inside an object, 2 = inside an array
  let i = 0;
  const ws = (): void => {
    while (i < n) {
      const c = text.charCodeAt(i);
      if (c === 32 || c === 9 || c === 10 || c === 13) i++;
      else break;
    }
  };
  const str = (): boolean => {
    if (text.charCodeAt(i) !== 34) return false;
    i++;
    while (i < n) {
      const c = text.charCodeAt(i);
      if (c === 34) {
        i++;
        return true;
      }
      if (c < 32) return false;
      if (c === 92) {
        const e = text.charCodeAt(i + 1);
        if (e === 117) {
          for (let k = 2; k < 6; k++) {
            const h = text.charCodeAt(i + k);
            if (!((h >= 48 && h <= 57) || (h >= 65 && h <= 70) || (h >= 97 && h <= 102))) {
              i += k;
              return false;
            }
          }
          i += 6;
          continue;
        }
        if (e === 34 || e === 92 || e === 47 || e === 98 || e === 102 || e === 110 || e === 114 || e === 116) {
          i += 2;
          continue;
        }
        i++;
        return false;
      }
      i++;
    }
    return false;
  };
  const digitsRun = (): number => {
    const s = i;
    while (i < n) {
      const c = text.charCodeAt(i);
      if (c >= 48 && c <= 57) i++;
      else break;
    }
    return i - s;
  };
  const num = (): boolean => {
    if (text.charCodeAt(i) === 45) i++;
    const c = text.charCodeAt(i);
    if (c === 48) i++;
    else if (c >= 49 && c <= 57) digitsRun();
    else return false;
    if (text.charCodeAt(i) === 46) {
      i++;
      if (digitsRun() === 0) return false;
    }
    const e = text.charCodeAt(i);
    if (e === 101 || e === 69) {
      i++;
      const sgn = text.charCodeAt(i);
      if (sgn === 43 || sgn === 45) i++;
      if (digitsRun() === 0) return false;
    }
    return true;
  };
  const word = (w: string): boolean => {
    for (let k = 0; k < w.length; k++) {
      if (text.charCodeAt(i) !== w.charCodeAt(k)) return false;
      i++;
    }
    return true;
  };

  // Expect a value at i; after it, close containers and handle separators.
  for (;;) {
    ws();
    const c = text.charCodeAt(i);
    let ok: boolean;
    if (c === 123) {
      i++;
      ws();
      if (text.charCodeAt(i) === 125) {
        i++;
        ok = true;
      } else {
        if (!str()) return i;
        ws();
        if (text.charCodeAt(i) !== 58) return i;
        i++;
        stack.push(1);
        continue;
      }
    } else if (c === 91) {
      i++;
      ws();
      if (text.charCodeAt(i) === 93) {
        i++;
        ok = true;
      } else {
        stack.push(2);
        continue;
      }
    } else if (c === 34) ok = str();
    else if (c === 116) ok = word('true');
    else if (c === 102) ok = word('false');
    else if (c === 110) ok = word('null');
    else ok = num();
    if (!ok) return Math.min(i, n);
    // After a complete value: separators and closers.
    for (;;) {
      ws();
      if (stack.length === 0) return i === n ? -1 : i;
      const top = stack[stack.length - 1];
      const s = text.charCodeAt(i);
      if (s === 44) {
        i++;
        if (top === 1) {
          ws();
          if (!str()) return i;
          ws();
          if (text.charCodeAt(i) !== 58) return i;
          i++;
        }
        break;
      }
      if ((top === 1 && s === 125) || (top === 2 && s === 93)) {
        i++;
        stack.pop();
        continue;
      }
      return i;
    }
  }
}

/** 1-based line and column of a character offset. */
export function lineColumn(text: string, offset: number): { line: number; column: number } {
  let line = 1;
  let lineStart = 0;
  for (let k = text.indexOf('\n'); k !== -1 && k < offset; k = text.indexOf('\n', k + 1)) {
    line++;
    lineStart = k + 1;
  }
  return { line, column: offset - lineStart + 1 };
}

/**
 * The message for text that is not JSON: where it breaks (offset, line, column), what the engine
 * said, and the text around the spot.
 */
export function malformedJsonMessage(text: string, err: unknown, prefix = '', what = 'the text'): string {
  const offset = jsonErrorOffset(text);
  const engine = err instanceof Error ? err.message : String(err);
  if (offset < 0) return `${prefix}${what} is not valid JSON (${engine})`;
  const { line, column } = lineColumn(text, offset);
  const near = offset >= text.length ? 'the end of the text' : JSON.stringify(text.slice(Math.max(0, offset - 20), offset + 20));
  return `${prefix}${what} is not valid JSON: it breaks at line ${line}, column ${column} (character ${offset}) near ${near} (${engine})`;
}
