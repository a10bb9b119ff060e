/**
 * The one entry point for input: text or bytes in, checked Observations out, or an InputError
 * listing what is wrong (index, id, code, message) — never part of the input.
 */
import type { Observations } from './types.js';
import { DEFAULT_MAX_PROBLEMS, fail, timeRule, type TimeRule } from './checks.js';
import { readGeoJson } from './geojson.js';
import { readCsv } from './csv.js';
import { readGeoJsonSeq } from './seq.js';
import { readGeoJsonSource } from './geojson-bytes.js';
import { readCsvSource } from './csv-bytes.js';
import { InputFile, MemorySource } from './source.js';

export type InputFormat = 'geojson' | 'csv' | 'geojson-seq';

export const INPUT_FORMATS: readonly InputFormat[] = ['geojson', 'csv', 'geojson-seq'];

export interface ReadOptions {
  /** input format; sniffed with detectFormat when absent */
  format?: InputFormat;
  /** property (CSV: column) holding each observation's weight, a finite number ≥ 0; null or absent: weight 1 each */
  weightProperty?: string | null;
  /** CSV: header of the longitude column; default the first of longitude, lon, lng, long, x (any case) */
  lonColumn?: string;
  /** CSV: header of the latitude column; default the first of latitude, lat, y (any case) */
  latColumn?: string;
  /** property (CSV: column) holding each observation's time; default `observed_at` */
  timeColumn?: string | null;
  /** how that time is written (see TimeFormat: `DD.MM.YYYY`, `YYYY-MM-DD hh:mm`, …); default RFC 3339 */
  timeFormat?: string | null;
  /** CSV: the column holding observation ids (a dataset's id_property), kept as a property; default: an `id` column becomes the feature id */
  idProperty?: string | null;
  /** CSV: field delimiter, one character; default sniffed from the header line (`,` `;` tab `|`) */
  csvDelimiter?: string;
  /** most problems listed in the InputError (the total is still counted); default 100 */
  maxProblems?: number;
  /** most observations accepted; default unlimited */
  maxFeatures?: number;
  /** the observations are to be stored: string values are held to the storable-text rule (src/ingest/limits.ts) */
  storable?: boolean;
}

const RS = 0x1e;

/**
 * Guesses the format from the start of the text (a leading byte-order mark and spaces skipped):
 * - RS (U+001E) first → `geojson-seq` (RFC 8142);
 * - `{` first, and the first line is a whole JSON object followed by a line that also starts
 *   with `{` → `geojson-seq` (newline-delimited GeoJSON);
 * - `{` or `[` first otherwise → `geojson`;
 * - anything else → `csv`.
 * Only the first two lines are looked at.
 */
export function detectFormat(input: string | Buffer): InputFormat {
  // Bytes: decode only the head; the first two lines are all that matter.
  const text = typeof input === 'string' ? input : input.subarray(0, 1 << 20).toString('utf8');
  let i = 0;
  while (i < text.length) {
    const c = text.charCodeAt(i);
    if (c === 0xfeff || c === 32 || c === 9 || c === 10 || c === 13) i++;
    else break;
  }
  const first = text.charCodeAt(i);
  if (first === RS) return 'geojson-seq';
  if (first === 91) return 'geojson';
  if (first !== 123) return 'csv';
  const eol = text.indexOf('\n', i);
  if (eol === -1) return 'geojson';
  const line1 = text.slice(i, eol).trim();
  if (!line1.endsWith('}')) return 'geojson';
  let j = eol + 1;
  while (j < text.length) {
    const c = text.charCodeAt(j);
    if (c === 32 || c === 9 || c === 10 || c === 13) j++;
    else break;
  }
  if (text.charCodeAt(j) !== 123) return 'geojson';
  try {
    const v: unknown = JSON.parse(line1);
    return v !== null && typeof v === 'object' ? 'geojson-seq' : 'geojson';
  } catch {
    return 'geojson';
  }
}

/** The first MiB of a file, for detectFormat. */
function head(file: InputFile): Buffer {
  const b = Buffer.allocUnsafe(Math.min(file.size, 1 << 20));
  return b.subarray(0, file.readInto(b, 0, 0));
}

/**
 * The bytes as text for the parsing readers, or an InputError when they are more than one string
 * can hold (about 512 MiB; only the byte reader reads inputs that large, and only GeoJSON in it).
 */
function decode(bytes: Buffer, stopped: { feature: number; offset: number }): string {
  try {
    return bytes.toString('utf8');
  } catch (err) {
    if ((err as { code?: unknown }).code !== 'ERR_STRING_TOO_LONG') throw err;
    const where =
      stopped.feature >= 0
        ? `feature ${stopped.feature} (after byte ${stopped.offset}) is not a plain Point Feature of a FeatureCollection read that way, or is wrong`
        : 'only a GeoJSON FeatureCollection of Point features is read at that size';
    fail('input-too-large', `the input is ${Math.round(bytes.length / 2 ** 20)} MiB, more than can be read as one text; ${where} — split it into smaller files`);
  }
}

function timeRuleOrNull(column: string | null | undefined, format: string | null | undefined): TimeRule | null {
  try {
    return timeRule(column, format);
  } catch {
    return null;
  }
}

/**
 * Reads observations from GeoJSON (FeatureCollection or Feature), CSV with a header row, or a
 * GeoJSON text sequence / newline-delimited GeoJSON. Bytes are decoded as UTF-8 and a leading
 * byte-order mark is dropped.
 * @throws InputError with every problem found (at most `maxProblems` listed, `total` counted);
 *   RangeError for bad options.
 */
export function readObservations(input: string | Buffer | InputFile, options: ReadOptions = {}): Observations {
  const maxProblems = options.maxProblems ?? DEFAULT_MAX_PROBLEMS;
  const maxFeatures = options.maxFeatures ?? Number.MAX_SAFE_INTEGER;
  if (!Number.isInteger(maxProblems) || maxProblems < 1) throw new RangeError(`maxProblems must be a whole number ≥ 1, got ${maxProblems}`);
  if (!Number.isInteger(maxFeatures) || maxFeatures < 1) throw new RangeError(`maxFeatures must be a whole number ≥ 1, got ${maxFeatures}`);
  if (options.format !== undefined && !INPUT_FORMATS.includes(options.format)) {
    throw new RangeError(`format must be one of ${INPUT_FORMATS.join(', ')}, got ${JSON.stringify(options.format)}`);
  }
  if (options.csvDelimiter !== undefined && options.csvDelimiter.length !== 1) {
    throw new RangeError(`csvDelimiter must be one character, got ${JSON.stringify(options.csvDelimiter)}`);
  }
  const weightProperty = options.weightProperty ?? null;
  if (weightProperty === '') throw new RangeError('weightProperty must name a property (or be null for weight 1 each)');

  // GeoJSON FeatureCollections and text sequences of the usual shape are read from the bytes
  // without parsing them into objects (src/ingest/geojson-bytes.ts), a file in windows without holding it whole;
  // anything else goes on to the parsing readers below. Text that is not well-formed UTF-16 is
  // left to them; bytes that are not UTF-8 are found by the byte reader.
  const stopped = { feature: -1, offset: 0 };
  const sniffed = options.format ?? detectFormat(input instanceof InputFile ? head(input) : input);
  if (!options.storable && sniffed !== 'csv') {
    const source = input instanceof InputFile ? input : typeof input !== 'string' ? new MemorySource(input) : (input as unknown as { isWellFormed(): boolean }).isWellFormed() ? new MemorySource(Buffer.from(input, 'utf8')) : null;
    // a time format that cannot be used is reported below, after the checks that come first
    const time = source === null ? null : timeRuleOrNull(options.timeColumn, options.timeFormat);
    const fast = source === null || time === null ? null : readGeoJsonSource(source, { weightProperty, time, maxFeatures, sequence: sniffed === 'geojson-seq' }, stopped);
    if (fast !== null) return fast;
  }
  // CSV as csv.ts splits it without csv-parse is read from the bytes too (src/ingest/csv-bytes.ts)
  if (!options.storable && sniffed === 'csv') {
    const source = input instanceof InputFile ? input : typeof input !== 'string' ? new MemorySource(input) : (input as unknown as { isWellFormed(): boolean }).isWellFormed() ? new MemorySource(Buffer.from(input, 'utf8')) : null;
    const time = source === null ? null : timeRuleOrNull(options.timeColumn, options.timeFormat);
    const fast =
      source === null || time === null
        ? null
        : readCsvSource(source, { weightProperty, time, idProperty: options.idProperty, lonColumn: options.lonColumn, latColumn: options.latColumn, delimiter: options.csvDelimiter, maxFeatures });
    if (fast !== null) return fast;
  }

  let text = typeof input === 'string' ? input : decode(input instanceof InputFile ? input.readAll() : input, stopped);
  if (text.charCodeAt(0) === 0xfeff) text = text.slice(1);
  if (text.trim().length === 0) fail('empty-input', 'the input is empty; send a GeoJSON FeatureCollection of Point features or a CSV with a header row');

  const time = timeRule(options.timeColumn, options.timeFormat);
  const format = options.format ?? detectFormat(text);
  switch (format) {
    case 'geojson':
      return readGeoJson(text, weightProperty, maxProblems, maxFeatures, time, options.storable);
    case 'geojson-seq':
      return readGeoJsonSeq(text, weightProperty, maxProblems, maxFeatures, time, options.storable);
    case 'csv':
      return readCsv(text, {
        weightProperty,
        time,
        idProperty: options.idProperty,
        lonColumn: options.lonColumn,
        latColumn: options.latColumn,
        delimiter: options.csvDelimiter,
        maxProblems,
        maxFeatures,
        storable: options.storable,
      });
  }
}
