/**
 * CSV reader: a header row, then one observation per row, parsed with `csv-parse` (RFC 4180
 * quoting, CRLF or LF, a leading byte-order mark ignored).
 *
 * - The delimiter is `,` unless the header line has more `;`, tabs or `|` (outside quotes).
 * - Longitude and latitude come from the columns named in the options, or else from the first
 *   header matching (case-insensitive, spaces trimmed) `longitude, lon, lng, long, x` and
 *   `latitude, lat, y`. Numbers use a decimal point (`12.5`, not `12,5`).
 * - Rows become GeoJSON Point features. A column named `id` (any case) becomes the feature id, a
 *   string as written; empty means no id — unless an id property is named (a dataset's
 *   id_property): then the ids are that property's, and every column, `id` included, stays a
 *   property. Every other column except the two position columns
 *   becomes a property holding the cell text as written — only the weight column is turned into
 *   a number, because nothing else in the product needs numbers and guessing types loses
 *   leading zeros and codes like "007".
 * - `observed_at` (any case) is read like the GeoJSON property; an empty cell means no time.
 * - Blank lines are skipped. Problems name the 0-based data row and its line in the file.
 */
import { createRequire } from 'node:module';
import type { Options as CsvOptionsOfParser } from 'csv-parse/sync';
import type { InputFeature, Observations } from './types.js';
import { DEFAULT_TIME_RULE, ProblemList, TIME_PROPERTY, fail, parseDecimal, rangeProblem, readTime, timeMessage, weightMessage, type TimeRule } from './checks.js';
import { propertyListMessage } from './geojson.js';
import { contentProblem } from './limits.js';

/**
 * csv-parse's synchronous parser, loaded when first needed: text without quotes, carriage returns
 * or a byte-order mark never needs it, and a command that reads no such CSV is spared loading it.
 */
let csvParse: ((text: string, options: CsvOptionsOfParser) => unknown) | null = null;
function parse(text: string, options: CsvOptionsOfParser): unknown {
  csvParse ??= (createRequire(import.meta.url)('csv-parse/sync') as { parse: (text: string, options: CsvOptionsOfParser) => unknown }).parse;
  return csvParse(text, options);
}

/** What readRecords returns when a problem with the header makes the rows meaningless. */
const EMPTY: Observations = { points: { n: 0, lon: new Float64Array(0), lat: new Float64Array(0), weight: null }, features: [], observedAt: null };

/** Header names recognised for the position columns, in order of preference. */
export const LONGITUDE_HEADERS = ['longitude', 'lon', 'lng', 'long', 'x'] as const;
export const LATITUDE_HEADERS = ['latitude', 'lat', 'y'] as const;

export interface CsvOptions {
  weightProperty: string | null;
  /** the time column (matched exactly when named; `observed_at` in any case by default) and its format */
  time?: TimeRule;
  /** the column holding the observation ids (a dataset's id_property); null or absent: an `id` column becomes the feature id */
  idProperty?: string | null;
  lonColumn?: string;
  latColumn?: string;
  /** field delimiter, one character; sniffed from the header line when absent */
  delimiter?: string;
  maxProblems: number;
  maxFeatures: number;
  /** the rows are to be stored: cells are held to the storable-text rule (src/ingest/limits.ts) */
  storable?: boolean;
}

/** Reads CSV text with a header row into Observations. Throws InputError; never returns part of the input. */
export function readCsv(text: string, options: CsvOptions): Observations {
  // The quick pass keeps no per-record line numbers (csv-parse's `info` snapshots more than
  // double its cost); when anything is wrong, the input is read again with them for the messages.
  return readCsvPass(text, options, false);
}

interface RecordLines {
  /** line each record ends on (csv-parse `info.lines`) */
  end: number[];
  /** blank lines skipped so far at each record */
  empty: number[];
}

function readCsvPass(text: string, options: CsvOptions, withLines: boolean): Observations {
  const delimiter = options.delimiter ?? sniffDelimiter(text);
  let records: string[][];
  let lines: RecordLines | null = null;
  try {
    const base = { delimiter, bom: true, relax_column_count: true, skip_empty_lines: true };
    if (withLines) {
      const withInfo = parse(text, { ...base, info: true }) as unknown as { record: string[]; info: { lines: number; empty_lines: number } }[];
      records = withInfo.map((x) => x.record);
      lines = { end: withInfo.map((x) => x.info.lines), empty: withInfo.map((x) => x.info.empty_lines) };
    } else {
      records = simpleRecords(text, delimiter) ?? (parse(text, base) as string[][]);
    }
  } catch (err) {
    const e = err as { message?: string; lines?: number };
    fail('malformed-csv', `the CSV cannot be read near line ${e.lines ?? '?'}: ${e.message ?? String(err)}; check the quoting (a quote inside a quoted field is written "")`);
  }
  if (records.length === 0) fail('empty-input', 'the CSV is empty; send a header row and at least one data row');
  const problems = new ProblemList(options.maxProblems);
  const obs = readRecords(records, lines, delimiter, options, problems);
  if (problems.total > 0 && !withLines) return readCsvPass(text, options, true);
  problems.throwIfAny();
  return obs;
}

/**
 * The records csv-parse gives (with the options readCsvPass uses) for text it reads in the
 * simplest way, split without it: no quote character, no carriage return, no byte-order mark,
 * text that is well-formed UTF-16 (csv-parse reads UTF-8 bytes, which turns a lone surrogate
 * into U+FFFD) and a delimiter that is none of those. Then each line is a record (lines split at
 * \n, the one record delimiter csv-parse finds in such text), empty lines are skipped and the
 * fields are the line split at the delimiter. Returns null for any other text, which csv-parse
 * reads. A seeded fuzz test (test/ingest/csv.test.ts) holds the two to the same records.
 */
export function simpleRecords(text: string, delimiter: string): string[][] | null {
  if (delimiter.length !== 1 || delimiter === '"' || delimiter === '\n' || delimiter === '\r' || delimiter === '\ufeff') return null;
  if (text.charCodeAt(0) === 0xfeff || text.includes('"') || text.includes('\r')) return null;
  if (!(text as unknown as { isWellFormed(): boolean }).isWellFormed()) return null;
  const records: string[][] = [];
  for (let s = 0; s < text.length; ) {
    let e = text.indexOf('\n', s);
    if (e === -1) e = text.length;
    if (e > s) records.push(text.slice(s, e).split(delimiter));
    s = e + 1;
  }
  return records;
}

/** `row 3 (line 5) (id "a")`; the line where it is known. */
function rowName(r: number, lines: RecordLines | null, id: string | undefined): string {
  let s = `row ${r}`;
  if (lines !== null) {
    // csv-parse reports the line a record ends on; a record starts after the previous one and any blank lines.
    const start = (lines.end[r] as number) + 1 + ((lines.empty[r + 1] as number) - (lines.empty[r] as number));
    s += ` (line ${start})`;
  }
  return id !== undefined ? `${s} (id ${JSON.stringify(id)})` : s;
}

function readRecords(records: string[][], lines: RecordLines | null, delimiter: string, options: CsvOptions, problems: ProblemList): Observations {
  const header = (records[0] as string[]).map((h, k) => (h.trim() === '' ? `column_${k + 1}` : h.trim()));
  const lower = header.map((h) => h.toLowerCase());
  const dup = header.find((h, k) => header.indexOf(h) !== k);
  if (dup !== undefined) problems.add(null, undefined, 'bad-header', `the header names the column ${JSON.stringify(dup)} twice; give every column its own name`);

  const lonCol = findColumn(header, lower, options.lonColumn, LONGITUDE_HEADERS);
  const latCol = findColumn(header, lower, options.latColumn, LATITUDE_HEADERS);
  if (lonCol < 0 || latCol < 0 || lonCol === latCol) {
    const missing = [
      lonCol < 0 ? `longitude (${options.lonColumn !== undefined ? JSON.stringify(options.lonColumn) : `looked for ${LONGITUDE_HEADERS.join(', ')}`})` : '',
      latCol < 0 ? `latitude (${options.latColumn !== undefined ? JSON.stringify(options.latColumn) : `looked for ${LATITUDE_HEADERS.join(', ')}`})` : '',
    ].filter((s) => s !== '');
    const what = missing.length > 0 ? `no column for ${missing.join(' or ')}` : `longitude and latitude name the same column ${JSON.stringify(header[lonCol])}`;
    const dataLike = header.some((h) => Number.isFinite(parseDecimal(h))) ? '; the first row looks like data — a header row is required' : '';
    problems.add(null, undefined, 'missing-columns', `${what}; headers found: ${header.map((h) => JSON.stringify(h)).join(', ')}${dataLike}; name the position columns in the options`);
    return EMPTY;
  }

  const idProperty = options.idProperty ?? null;
  // with an id property the ids stay properties (where the id rule looks for them); the column
  // is still used to name rows in messages
  const idCol = idProperty === null ? lower.indexOf('id') : -1;
  const nameCol = idProperty === null ? idCol : header.indexOf(idProperty);
  const time = options.time ?? DEFAULT_TIME_RULE;
  const timeCol = time.property === TIME_PROPERTY ? lower.indexOf(TIME_PROPERTY) : header.indexOf(time.property);
  if (timeCol < 0 && time.property !== TIME_PROPERTY) {
    problems.add(null, undefined, 'unknown-property', `time_column: ${propertyListMessage(time.property, 'column', header).replace('properties found', 'columns found')}`);
  }
  const weightProperty = options.weightProperty;
  const weightCol = weightProperty === null ? -1 : header.indexOf(weightProperty);
  if (weightProperty !== null && weightCol < 0) {
    problems.add(null, undefined, 'unknown-property', propertyListMessage(weightProperty, 'column', header).replace('properties found', 'columns found'));
  }

  const n = records.length - 1;
  if (n === 0) fail('empty-input', 'the CSV has a header row but no data rows; send at least one observation');
  if (n > options.maxFeatures) fail('too-many-features', `the input has ${n} rows; at most ${options.maxFeatures} are accepted in one request — split it`);

  const lon = new Float64Array(n);
  const lat = new Float64Array(n);
  const weight = weightProperty === null ? null : new Float64Array(n);
  const observedAt = new Float64Array(n);
  let timed = 0;
  const features: InputFeature[] = new Array(n);
  const width = header.length;

  for (let r = 0; r < n; r++) {
    const record = records[r + 1] as string[];
    const idCell = nameCol >= 0 && nameCol < record.length ? (record[nameCol] as string) : '';
    const id = idCell === '' ? undefined : idCell;
    if (record.length !== width) {
      problems.add(r, id, 'bad-row', `${rowName(r, lines, id)}: has ${record.length} field${record.length === 1 ? '' : 's'}; the header has ${width} — check the delimiter ${JSON.stringify(delimiter)} and the quoting`);
      observedAt[r] = NaN;
      continue;
    }
    const lonCell = record[lonCol] as string;
    const latCell = record[latCol] as string;
    const x = parseDecimal(lonCell);
    const y = parseDecimal(latCell);
    if (x !== x || y !== y) {
      const bad = x !== x ? `longitude ${JSON.stringify(lonCell)}` : `latitude ${JSON.stringify(latCell)}`;
      const hint = /^\s*-?\d+,\d+\s*$/.test(x !== x ? lonCell : latCell) ? ' (write decimals with a point: 12.5, not 12,5)' : '';
      problems.add(r, id, 'bad-coordinates', `${rowName(r, lines, id)}: ${bad} is not a number${hint}; write decimal degrees`);
    } else {
      const range = rangeProblem(x, y);
      if (range !== null) problems.add(r, id, range.code, `${rowName(r, lines, id)}: ${range.message.replace('GeoJSON order is [longitude, latitude]', `check that column ${JSON.stringify(header[lonCol])} holds longitudes`)}`);
      lon[r] = x;
      lat[r] = y;
    }

    const properties: Record<string, unknown> = {};
    for (let k = 0; k < width; k++) {
      if (k === lonCol || k === latCol || k === idCol) continue;
      const name = header[k] as string;
      // Plain assignment to "__proto__" would change the prototype instead of adding a member.
      if (name === '__proto__') Object.defineProperty(properties, name, { value: record[k], enumerable: true, writable: true, configurable: true });
      else properties[name] = record[k];
    }
    if (weight !== null && weightCol >= 0) {
      const cell = record[weightCol] as string;
      const w = parseDecimal(cell);
      if (w >= 0) {
        weight[r] = w;
        Object.defineProperty(properties, weightProperty as string, { value: w, enumerable: true, writable: true, configurable: true });
      } else {
        problems.add(r, id, 'bad-weight', weightMessage(rowName(r, lines, id), weightProperty as string, cell.trim() === '' ? undefined : Number.isNaN(w) ? cell : w));
      }
    }
    observedAt[r] = NaN;
    if (timeCol >= 0) {
      const cell = (record[timeCol] as string).trim();
      if (cell !== '') {
        const ms = readTime(cell, time);
        if (ms === ms) {
          observedAt[r] = ms;
          timed++;
        } else {
          problems.add(r, id, 'bad-time', timeMessage(rowName(r, lines, id), cell, time));
        }
      }
    }
    const feature: InputFeature = { type: 'Feature', geometry: { type: 'Point', coordinates: [x, y] }, properties };
    if (id !== undefined && idCol >= 0) feature.id = id;
    features[r] = feature;
    const content = contentProblem(feature, options.storable ?? false);
    if (content !== null) {
      const named = content.code === 'bad-id' ? undefined : id;
      problems.add(r, named, content.code, `${rowName(r, lines, named)}: ${content.message.replace('member name', 'column name')}`);
    }
  }
  return { points: { n, lon, lat, weight }, features, observedAt: timed > 0 ? observedAt : null };
}

/** The column index for a position: the named one, or the first recognised header name; −1 when none. */
export function findColumn(header: string[], lower: string[], named: string | undefined, names: readonly string[]): number {
  if (named !== undefined) {
    const exact = header.indexOf(named);
    return exact >= 0 ? exact : lower.indexOf(named.toLowerCase());
  }
  for (const name of names) {
    const k = lower.indexOf(name);
    if (k >= 0) return k;
  }
  return -1;
}

/**
 * Picks the delimiter the header line uses most among `,` `;` tab `|` (outside double quotes);
 * `,` when none appears.
 */
export function sniffDelimiter(text: string): string {
  const candidates = [',', ';', '\t', '|'];
  const counts = [0, 0, 0, 0];
  let quoted = false;
  for (let i = 0; i < text.length; i++) {
    const c = text[i];
    if (c === '"') quoted = !quoted;
    else if (!quoted && (c === '\n' || c === '\r')) break;
    else if (!quoted) {
      const k = candidates.indexOf(c as string);
      if (k >= 0) counts[k]++;
    }
  }
  let best = 0;
  for (let k = 1; k < 4; k++) if (counts[k] > counts[best]) best = k;
  return candidates[best] as string;
}
