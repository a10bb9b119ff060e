/**
 * The CSV byte reader (src/ingest/csv-bytes.ts) against the parsing reader (src/ingest/csv.ts) on
 * seeded random and hostile CSV: both must give the same observations (positions, weights,
 * times, features as the parsing reader builds them) or the same InputError problems, a file read
 * in chunks cut at random places must read as the same bytes in memory, and the point layer
 * written from the rows' bytes must be byte for byte the one written from the parsed features.
 *
 * Seed: ROOST_SEED (printed); cases: ROOST_CASES.
 */
import { mkdtempSync, rmSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { describe, expect, it } from 'vitest';
import { readObservations, type ReadOptions } from '../../src/ingest/read.js';
import { readCsv } from '../../src/ingest/csv.js';
import { DEFAULT_MAX_PROBLEMS, fail, timeRule } from '../../src/ingest/checks.js';
import type { CsvObservations } from '../../src/ingest/csv-bytes.js';
import { InputError, type Observations } from '../../src/ingest/types.js';
import { InputFile } from '../../src/ingest/source.js';
import { csvPointLayerBytes, pointFeature } from '../../src/run/cluster.js';
import { rng } from '../reference/seeded.js';

const SEED = Number(process.env.ROOST_SEED ?? 16);
const CASES = Number(process.env.ROOST_CASES ?? 1500);

/** The parsing reader as readObservations ran it before the byte reader: decode, drop a BOM, read. */
function parsingRead(input: string | Buffer, options: ReadOptions): Observations {
  let text = typeof input === 'string' ? input : input.toString('utf8');
  if (text.charCodeAt(0) === 0xfeff) text = text.slice(1);
  if (text.trim().length === 0) fail('empty-input', 'the input is empty; send a GeoJSON FeatureCollection of Point features or a CSV with a header row');
  return readCsv(text, {
    weightProperty: options.weightProperty ?? null,
    time: timeRule(options.timeColumn, options.timeFormat),
    idProperty: options.idProperty,
    lonColumn: options.lonColumn,
    latColumn: options.latColumn,
    delimiter: options.csvDelimiter,
    maxProblems: DEFAULT_MAX_PROBLEMS,
    maxFeatures: options.maxFeatures ?? Number.MAX_SAFE_INTEGER,
  });
}

type Outcome = { ok: Observations } | { error: { problems: unknown; total: number } };

function outcome(read: () => Observations): Outcome {
  try {
    return { ok: read() };
  } catch (err) {
    if (!(err instanceof InputError)) throw err;
    return { error: { problems: err.problems, total: err.total } };
  }
}

function sameNumbers(a: ArrayLike<number> | null, b: ArrayLike<number> | null): boolean {
  if (a === null || b === null) return a === b;
  if (a.length !== b.length) return false;
  for (let i = 0; i < a.length; i++) if (!Object.is(a[i], b[i])) return false;
  return true;
}

/** Expects two readings to agree; returns both observations, or null when both refused. */
function expectSameReading(actual: Outcome, expected: Outcome, context: string): { a: Observations; e: Observations } | null {
  if ('error' in expected) {
    expect('error' in actual ? actual.error : actual, context).toEqual(expected.error);
    return null;
  }
  expect('ok' in actual, context).toBe(true);
  const a = (actual as { ok: Observations }).ok;
  const e = expected.ok;
  expect(a.points.n, context).toBe(e.points.n);
  expect(sameNumbers(a.points.lon, e.points.lon) && sameNumbers(a.points.lat, e.points.lat), context).toBe(true);
  expect(sameNumbers(a.points.weight, e.points.weight) && sameNumbers(a.observedAt, e.observedAt), context).toBe(true);
  const af = Array.from(a.features);
  expect(af, context).toEqual(Array.from(e.features));
  // the same members in the same order (toEqual does not look at the order)
  expect(JSON.stringify(af), context).toBe(JSON.stringify(e.features));
  return { a, e };
}

function pick<T>(r: () => number, xs: readonly T[]): T {
  return xs[Math.floor(r() * xs.length)]!;
}

const EXTRA_HEADERS = ['name', 'note', 'count', 'observed_at', 'Observed_At', 'when', 'id', 'ID ', '0', '7', '01', 'hotspot_id', 'role', '__proto__', 'constructor', '', ' ', 'Übung', '鷺', 'a\\b', 'tab\there', 'x', 'y', 'lon', 'count'];
const LON_HEADERS = ['lon', 'longitude', 'Lng', 'x', 'long', 'X'];
const LAT_HEADERS = ['lat', 'latitude', 'Y', 'y'];
const TEXTS = ['plain', '', 'Grey heron', 'Reiher über dem Teich', '鷺', '🐦 flock', ' padded ', '007', 'back\\slash', 'tab\there', '\u2028sep', 'nul\u0000', 'ctl\u0001', 'x'.repeat(300), '12.5', 'null'];
const HOSTILE_TEXTS = ['"quoted"', 'cr\r', 'a"b', '\ufeff', '\r\n'];
const TIMES = ['2024-05-01T06:30:00Z', '2024-05-01 06:30:00.250+02:00', '2024-13-01T00:00:00Z', '01.05.2024', '', ' ', ' 2024-05-01T06:30:00Z ', 'soon', '2024-05-01T06:30:00'];

function numberCell(r: () => number, v: number, hostile: boolean): string {
  const s = String(v);
  if (!hostile || r() < 0.6) return r() < 0.5 ? v.toFixed(Math.floor(r() * 8)) : s;
  return pick(r, [s + '0', v.toExponential(), ' ' + s, s + ' ', '+' + s, '0x1F', '', '-', '.5', '12.', '-0', '00', s.replace('.', ','), 'Infinity', '1e400', '9'.repeat(20), '0.' + '1'.repeat(17), '200', '-95', 'abc', '1_0']);
}

/** A random CSV text (or bytes) with the columns the options name most of the time. */
function csv(r: () => number, options: ReadOptions): string | Buffer {
  const hostile = r() < 0.5;
  const delimiter = options.csvDelimiter ?? pick(r, [',', ',', ';', '\t', '|']);
  const headers: string[] = [];
  if (r() < 0.95) headers.push(options.lonColumn ?? pick(r, LON_HEADERS));
  if (r() < 0.95) headers.push(options.latColumn ?? pick(r, LAT_HEADERS));
  if (r() < 0.6) headers.push(pick(r, ['id', 'Id', 'ID']));
  if (options.weightProperty && r() < 0.95) headers.push(options.weightProperty);
  if (r() < 0.5) headers.push(options.timeColumn ?? 'observed_at');
  const extra = Math.floor(r() * 4);
  for (let k = 0; k < extra; k++) headers.push(pick(r, hostile ? EXTRA_HEADERS : EXTRA_HEADERS.slice(0, 3)));
  for (let k = headers.length - 1; k > 0; k--) {
    const j = Math.floor(r() * (k + 1));
    [headers[k], headers[j]] = [headers[j]!, headers[k]!];
  }
  const lower = headers.map((h) => h.trim().toLowerCase());
  const lines = [headers.join(delimiter)];
  const rows = 1 + Math.floor(r() * 7);
  for (let row = 0; row < rows; row++) {
    const cells = lower.map((h, k) => {
      if (LON_HEADERS.some((x) => x.toLowerCase() === h)) return numberCell(r, Math.round((r() * 360 - 180) * 1e7) / 1e7, hostile);
      if (LAT_HEADERS.some((x) => x.toLowerCase() === h)) return numberCell(r, Math.round((r() * 180 - 90) * 1e7) / 1e7, hostile);
      if (headers[k] === options.weightProperty) return hostile && r() < 0.2 ? pick(r, ['-1', '', 'x', ' 2', '1e3']) : String(1 + Math.floor(r() * 4));
      if (h === 'observed_at' || headers[k] === options.timeColumn) return pick(r, hostile ? TIMES : TIMES.slice(0, 2));
      if (h === 'id') return r() < 0.1 ? '' : hostile && r() < 0.1 ? pick(r, ['a'.repeat(300), 'nul\u0000', 'é']) : `b${row}`;
      if (r() < 0.02) return `"${pick(r, TEXTS.slice(0, 7))}"`; // quoted: read by csv-parse
      return hostile && r() < 0.05 ? pick(r, HOSTILE_TEXTS) : pick(r, hostile ? TEXTS : TEXTS.slice(0, 7));
    });
    if (hostile && r() < 0.05) cells.push('extra');
    if (hostile && r() < 0.05) cells.pop();
    lines.push(cells.join(delimiter));
    if (r() < 0.1) lines.push('');
  }
  if (r() < 0.1) lines.unshift('');
  let text = lines.join('\n') + (r() < 0.7 ? '\n' : '');
  if (r() < 0.1) text = '\ufeff' + text;
  if (r() < 0.05) text = text.replace(/\n/g, '\r\n');
  if (r() < 0.02) text = '\ufeff\ufeff' + text;
  const k = r();
  if (hostile && k < 0.04) return Buffer.concat([Buffer.from(text, 'utf8'), Buffer.from([0xff, 0xfe])]);
  if (hostile && k < 0.06) return text + '\ud800';
  return k < 0.5 ? Buffer.from(text, 'utf8') : text;
}

function randomOptions(r: () => number): ReadOptions {
  return {
    format: 'csv',
    weightProperty: r() < 0.3 ? 'count' : null,
    timeColumn: r() < 0.15 ? 'when' : undefined,
    timeFormat: r() < 0.1 ? 'DD.MM.YYYY' : undefined,
    idProperty: r() < 0.1 ? 'id' : undefined,
    lonColumn: r() < 0.1 ? 'x' : undefined,
    latColumn: r() < 0.1 ? 'y' : undefined,
    csvDelimiter: r() < 0.1 ? pick(r, [';', '\t', 'a', '\\']) : undefined,
    maxFeatures: r() < 0.05 ? 3 : undefined,
  };
}

/** The point layer written from the rows' bytes, and the one written from the parsed features. */
function pointLayers(a: Observations, e: Observations): [string, string] {
  const n = a.points.n;
  const kept = Int32Array.from({ length: n }, (_, i) => i);
  const labels = Int32Array.from({ length: n }, (_, i) => (i % 3) - 1);
  const roles = Uint8Array.from({ length: n }, (_, i) => i % 3);
  const extra = (i: number): string => (i % 2 === 0 ? '' : `,"optics_order":${i},"reachability_m":null`);
  const head = '{"type":"FeatureCollection","features":[';
  const rows = { n, lon: a.points.lon, lat: a.points.lat, kept, labels, roles };
  const bytes = Buffer.concat([...csvPointLayerBytes(head, (a as CsvObservations).csvRows, a.features, rows, extra, false)]).toString('utf8');
  const texts = Array.from({ length: n }, (_, i) => pointFeature(e.features[i]!, labels[i]!, roles[i]!, extra(i)));
  return [bytes, head + texts.join(',') + ']}'];
}

describe('CSV byte reader', () => {
  it('agrees with the parsing reader, and writes the same point features, on random and hostile CSV', () => {
    console.info(`CSV byte reader seed ${SEED} (ROOST_SEED), ${CASES} cases (ROOST_CASES)`);
    const r = rng(SEED).next;
    let fast = 0;
    let accepted = 0;
    let rejected = 0;
    let verbatim = 0;
    for (let c = 0; c < CASES; c++) {
      const options = randomOptions(r);
      const input = csv(r, options);
      const context = `case ${c}: ${JSON.stringify(options)} ${JSON.stringify(typeof input === 'string' ? input : input.toString('latin1'))}`;
      const expected = outcome(() => parsingRead(input, options));
      const actual = outcome(() => readObservations(input, options));
      const same = expectSameReading(actual, expected, context);
      if (same === null) {
        rejected++;
        continue;
      }
      accepted++;
      const { a, e } = same;
      const rows = (a as Partial<CsvObservations>).csvRows;
      if (rows === undefined) continue;
      fast++;
      for (let i = 0; i < a.points.n; i++) verbatim += rows.verbatim[i]!;
      const [bytes, texts] = pointLayers(a, e);
      expect(bytes, context).toBe(texts);
    }
    console.info(`accepted ${accepted} (${fast} by the byte reader, ${verbatim} rows written from their bytes), rejected ${rejected}`);
    // the seeded mix must exercise both readers and both ways of writing
    expect(fast).toBeGreaterThan(CASES / 10);
    expect(accepted - fast).toBeGreaterThan(CASES / 100);
    expect(rejected).toBeGreaterThan(CASES / 10);
    expect(verbatim).toBeGreaterThan(CASES / 2);
  });

  it('reads a file in chunks cut at random places exactly as the same bytes in memory', () => {
    console.info(`CSV byte reader chunks seed ${SEED} (ROOST_SEED), ${Math.ceil(CASES / 3)} cases`);
    const r = rng(SEED + 1).next;
    const dir = mkdtempSync(join(tmpdir(), 'roost-csv-chunks-'));
    let fast = 0;
    let moved = 0;
    try {
      for (let c = 0; c < CASES / 3; c++) {
        const options = randomOptions(r);
        const input = csv(r, options);
        const bytes = typeof input === 'string' ? Buffer.from(input, 'utf8') : input;
        const path = join(dir, `case-${c}.csv`);
        writeFileSync(path, bytes);
        // chunks from 16 bytes (every row cut, the chunk grown) to more than the whole input
        const windowBytes = 16 + Math.floor(r() ** 2 * (bytes.length + 32));
        const context = `case ${c}: chunk ${windowBytes} of ${bytes.length} bytes, ${JSON.stringify(options)} ${JSON.stringify(bytes.toString('latin1'))}`;
        const expected = outcome(() => readObservations(bytes, options));
        const actual = outcome(() => readObservations(new InputFile(path, windowBytes), options));
        const same = expectSameReading(actual, expected, context);
        if (same === null) continue;
        const { a, e } = same;
        // the file goes the byte reader's way exactly when the bytes in memory do
        const rows = (a as Partial<CsvObservations>).csvRows;
        expect(rows !== undefined, context).toBe((e as Partial<CsvObservations>).csvRows !== undefined);
        if (rows === undefined) continue;
        fast++;
        if (windowBytes < bytes.length) moved++;
        const [fromFile] = pointLayers(a, e);
        const [fromMemory] = pointLayers(e, e);
        expect(fromFile, context).toBe(fromMemory);
      }
    } finally {
      rmSync(dir, { recursive: true, force: true });
    }
    console.info(`${fast} files read by the byte reader, ${moved} of them in chunks smaller than the file`);
    expect(moved).toBeGreaterThan(CASES / 30);
  });

  it('leaves quotes, carriage returns, two byte-order marks and bytes that are not UTF-8 to the parsing reader', () => {
    const fast = (input: string | Buffer): boolean => (readObservations(input, { format: 'csv' }) as Partial<CsvObservations>).csvRows !== undefined;
    expect(fast('lon,lat,name\n1,2,a\n')).toBe(true);
    expect(fast('\ufefflon,lat,name\n1,2,a\n')).toBe(true);
    expect(fast('lon,lat,name\n1,2,"a"\n')).toBe(false);
    expect(fast('lon,lat,name\r\n1,2,a\r\n')).toBe(false);
    expect(fast('\ufeff\ufefflon,lat,name\n1,2,a\n')).toBe(false);
    expect(fast(Buffer.concat([Buffer.from('lon,lat,name\n1,2,a'), Buffer.from([0xff]), Buffer.from('\n')]))).toBe(false);
  });
});
