/**
 * The byte reader (src/ingest/geojson-bytes.ts) against the parsing reader (src/ingest/geojson.ts)
 * on seeded random and hostile GeoJSON: both must give the same observations (positions,
 * weights, times, features as JSON.parse builds them) or the same InputError problems, and the
 * point features written from the byte spans must be byte for byte those written from the parsed
 * features. JSON.parse is the reference for what a text means (source: ECMA-262 §25.5.1
 * JSON.parse, whose objects keep the last of duplicate member names).
 *
 * Seed: ROOST_SEED (printed); cases: ROOST_CASES.
 */
import { mkdtempSync, rmSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { describe, expect, it } from 'vitest';
import { readObservations, type ReadOptions } from '../../src/ingest/read.js';
import { readGeoJson } from '../../src/ingest/geojson.js';
import { readGeoJsonSeq } from '../../src/ingest/seq.js';
import { timeRule } from '../../src/ingest/checks.js';
import { readGeoJsonBytes, type SpannedObservations } from '../../src/ingest/geojson-bytes.js';
import { InputError, type Observations } from '../../src/ingest/types.js';
import { InputFile } from '../../src/ingest/source.js';
import { pointFeature, pointFeatureFromSpans } from '../../src/run/cluster.js';
import { rng } from '../reference/seeded.js';

const SEED = Number(process.env.ROOST_SEED ?? 16);
const CASES = Number(process.env.ROOST_CASES ?? 1500);

/** The parsing reader as readObservations ran it before the byte reader: decode, drop a BOM, read. */
function parsingRead(input: string | Buffer, options: ReadOptions): Observations {
  let text = typeof input === 'string' ? input : input.toString('utf8');
  if (text.charCodeAt(0) === 0xfeff) text = text.slice(1);
  if (text.trim().length === 0) throw new Error('empty inputs are not generated');
  const time = timeRule(options.timeColumn, options.timeFormat);
  return readGeoJson(text, options.weightProperty ?? null, 100, options.maxFeatures ?? Number.MAX_SAFE_INTEGER, time, false);
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

/**
 * Expects two readings to agree: the same problems and total when the expected one refused, or
 * the same positions, weights, times and features. Returns both observations, or null when refused.
 */
function expectSameReading(actual: Outcome, expected: Outcome, context: string): { a: Observations; e: Observations } | null {
  if ('error' in expected) {
    expect('error' in actual ? actual.error : actual, context).toEqual(expected.error);
    return null;
  }
  expect('ok' in actual, context).toBe(true);
  const a = (actual as { ok: Observations }).ok;
  const e = expected.ok;
  expect(sameNumbers(a.points.lon, e.points.lon) && sameNumbers(a.points.lat, e.points.lat), context).toBe(true);
  expect(sameNumbers(a.points.weight, e.points.weight) && sameNumbers(a.observedAt, e.observedAt), context).toBe(true);
  expect(Array.from(a.features), context).toEqual(Array.from(e.features));
  return { a, e };
}

function pick<T>(r: () => number, xs: readonly T[]): T {
  return xs[Math.floor(r() * xs.length)]!;
}

const NUMBER_FORMS = (v: number): string[] => {
  const s = String(v);
  return [s, s.includes('.') ? s + '0' : s + '.0', v.toExponential(), v.toExponential().toUpperCase(), v === 0 ? '-0' : s, v.toFixed(17).replace(/\.?0+$/, '') || '0'];
};
const STRINGS = ['plain', '', 'Grey heron', 'Reiher über dem Teich', '鷺', '🐦 flock', 'tab\\there', 'quote\\"d', 'back\\\\slash', 'sol\\/idus', '\\u0041\\u00e9', '\\ud83d\\udc26', '\\ud800 lone', 'nul\\u0000', 'line\\nbreak', '\\b\\f\\r', '\u2028sep', 'x'.repeat(70)];
const KEYS = ['species', 'note', 'count', 'observed_at', 'when', '1', '01', '10', 'hotspot_id', 'role', '__proto__', 'constructor', 'a\\u0062', 'Übung', '鷺', 'sp ecies', 'type', 'id'];
const TIMES = ['"2024-05-01T06:30:00Z"', '"2024-05-01 06:30:00.250+02:00"', '"2024-13-01T00:00:00Z"', '"01.05.2024"', '""', 'null', '12', '"2024-05-01T06:30:00"', '"2024\\u002d05-01T06:30:00Z"'];

function ws(r: () => number, hostile: boolean): string {
  return hostile && r() < 0.15 ? pick(r, [' ', '\n', '\t', '\r\n  ']) : '';
}

function numberText(r: () => number, v: number, hostile: boolean): string {
  return hostile ? pick(r, NUMBER_FORMS(v)) : String(v);
}

function value(r: () => number, depth: number, hostile: boolean): string {
  const k = r();
  if (k < 0.35) return `"${pick(r, hostile ? STRINGS : STRINGS.slice(0, 6))}"`;
  if (k < 0.6) return numberText(r, Math.round((r() - 0.3) * 10 ** Math.floor(r() * 8)) / 10 ** Math.floor(r() * 4), hostile);
  if (k < 0.7) return pick(r, ['true', 'false', 'null']);
  if (depth > 3 || k < 0.85) return `[${Array.from({ length: Math.floor(r() * 3) }, () => value(r, depth + 1, hostile)).join(',' + ws(r, hostile))}]`;
  return object(r, depth + 1, hostile, {});
}

function object(r: () => number, depth: number, hostile: boolean, fixed: Record<string, string>): string {
  const members: [string, string][] = Object.entries(fixed);
  const extra = Math.floor(r() * 4);
  for (let k = 0; k < extra; k++) members.push([pick(r, hostile ? KEYS : KEYS.slice(0, 2)), value(r, depth, hostile)]);
  if (hostile && members.length > 0 && r() < 0.2) members.push([members[0]![0], value(r, depth, hostile)]); // duplicate name
  for (let k = members.length - 1; k > 0; k--) {
    const j = Math.floor(r() * (k + 1));
    [members[k], members[j]] = [members[j]!, members[k]!];
  }
  return `{${ws(r, hostile)}${members.map(([key, v]) => `"${key}"${ws(r, hostile)}:${ws(r, hostile)}${v}`).join(`,${ws(r, hostile)}`)}${ws(r, hostile)}}`;
}

function feature(r: () => number, hostile: boolean, weighted: boolean, timeKey: string): string {
  const lon = Math.round((r() * 360 - 180) * 1e6) / 1e6;
  const lat = Math.round((r() * 180 - 90) * 1e6) / 1e6;
  const coords = [numberText(r, lon, hostile), numberText(r, lat, hostile)];
  if (r() < 0.1) coords.push(numberText(r, Math.round(r() * 3000), hostile));
  if (hostile && r() < 0.05) coords.push('1');
  if (hostile && r() < 0.05) coords.reverse();
  if (hostile && r() < 0.03) coords[0] = '"12.5"';
  if (hostile && r() < 0.03) coords[1] = '1e400';
  let geometry = `{"type":"Point","coordinates":[${coords.join(',' + ws(r, hostile))}]}`;
  if (hostile && r() < 0.1) geometry = pick(r, ['null', '{"type":"MultiPoint","coordinates":[[1,2]]}', `{"coordinates":[${coords.join(',')}],"type":"Point"}`, `{"type":"Point","coordinates":[${coords.join(',')}],"bbox":[1,2,1,2]}`, `{"type":"Point","crs":{"a":1},"coordinates":[${coords.join(',')}]}`, '[]']);
  const fixedProps: Record<string, string> = {};
  if (weighted && !(hostile && r() < 0.05)) fixedProps.count = hostile && r() < 0.1 ? pick(r, ['-1', '"3"', 'null', '1e400', '2.50', '0']) : String(Math.floor(r() * 9));
  if (r() < 0.7) fixedProps[timeKey] = hostile ? pick(r, TIMES) : TIMES[0]!;
  let properties = object(r, 2, hostile, fixedProps);
  if (hostile && r() < 0.08) properties = pick(r, ['null', '[]', '"text"', '{}']);
  const members: [string, string][] = [
    ['type', hostile && r() < 0.03 ? '"Feature "' : '"Feature"'],
    ['geometry', geometry],
  ];
  if (!(hostile && r() < 0.08)) members.push(['properties', properties]);
  const idKind = r();
  if (idKind < 0.5) members.push(['id', `"${hostile ? pick(r, STRINGS) : 'a' + Math.floor(r() * 1e6)}"`]);
  else if (idKind < 0.8) members.push(['id', numberText(r, Math.floor(r() * 1e6), hostile)]);
  else if (hostile && idKind < 0.85) members.push(['id', pick(r, ['null', 'true', '{}', '[1]', '1e400', '12345678901234567890'])]);
  if (hostile && r() < 0.05) members.push(['bbox', '[1,2,3,4]']);
  if (hostile && r() < 0.1) members.push([pick(r, ['title', 'when', 'typ\\u0065', 'type', 'geometry']), value(r, 2, hostile)]);
  for (let k = members.length - 1; k > 0; k--) {
    const j = Math.floor(r() * (k + 1));
    [members[k], members[j]] = [members[j]!, members[k]!];
  }
  return `{${members.map(([key, v]) => `${ws(r, hostile)}"${key}"${ws(r, hostile)}:${ws(r, hostile)}${v}`).join(',')}${ws(r, hostile)}}`;
}

/** Records of features: after RS characters (RFC 8142) or one a line, with blank lines, CRLF and hostile joins now and then. */
function sequence(r: () => number, options: ReadOptions): string {
  const hostile = r() < 0.6;
  const n = 1 + Math.floor(r() * 8);
  const features = Array.from({ length: n }, () => feature(r, hostile && r() < 0.3, options.weightProperty != null, options.timeColumn ?? 'observed_at'));
  const rs = r() < 0.4;
  let text = '';
  for (const f of features) {
    if (rs) text += pick(r, ['\u001e', '\u001e', '\u001e\u001e', ' \u001e']) + f + pick(r, ['\n', '\n', '', ' \n\n', hostile ? '\u00a0\n' : '\n']);
    else text += f + pick(r, ['\n', '\n', '\r\n', '\n\n  \n', hostile ? ' {"type":"Feature"}\n' : '\n', hostile ? '\u001e\n' : '\n']);
  }
  if (r() < 0.3) text = text.replace(/\n$/, '');
  if (r() < 0.1) text = '\ufeff' + text;
  return text;
}

function collection(r: () => number, options: ReadOptions): string | Buffer {
  const hostile = r() < 0.6;
  const n = 1 + Math.floor(r() * 12);
  const timeKey = options.timeColumn ?? 'observed_at';
  const features = Array.from({ length: n }, () => feature(r, hostile && r() < 0.3, options.weightProperty != null, timeKey));
  const members = [`"type":"FeatureCollection"`, `"features":[${features.join(',' + ws(r, hostile))}]`];
  if (hostile && r() < 0.2) members.push(pick(r, ['"bbox":[0,0,1,1]', '"name":"survey \\u00e9"', '"features":[]', '"type":"Feature"', '"crs":{"type":"name"}']));
  if (r() < 0.5) members.reverse();
  let text = `${ws(r, hostile)}{${members.join(',')}}${ws(r, hostile)}`;
  if (hostile && r() < 0.05) text = text.slice(0, Math.floor(r() * text.length)) || '{';
  if (hostile && r() < 0.03) text += ' x';
  if (r() < 0.1) text = '\ufeff' + text;
  const k = r();
  if (hostile && k < 0.05) return Buffer.concat([Buffer.from(text, 'utf8'), Buffer.from([0xff, 0xfe])]);
  if (hostile && k < 0.08) return text.replace('"features":[', '"note":"\ud800","features":[');
  return k < 0.5 ? Buffer.from(text, 'utf8') : text;
}

describe('byte GeoJSON reader', () => {
  it('agrees with the parsing reader, and writes the same point features, on random and hostile input', () => {
    console.info(`byte reader seed ${SEED} (ROOST_SEED), ${CASES} cases (ROOST_CASES)`);
    const r = rng(SEED).next;
    let fast = 0;
    let accepted = 0;
    let rejected = 0;
    let verbatim = 0;
    for (let c = 0; c < CASES; c++) {
      const options: ReadOptions = {
        format: 'geojson',
        weightProperty: r() < 0.3 ? 'count' : null,
        timeColumn: r() < 0.2 ? 'when' : undefined,
        timeFormat: r() < 0.1 ? 'DD.MM.YYYY' : undefined,
        maxFeatures: r() < 0.05 ? 3 : undefined,
      };
      const input = collection(r, options);
      const context = `case ${c}: ${JSON.stringify(options)} ${JSON.stringify(typeof input === 'string' ? input : input.toString('latin1'))}`;
      const expected = outcome(() => parsingRead(input, options));
      const actual = outcome(() => readObservations(input, options));
      if ('error' in expected) {
        rejected++;
        expect('error' in actual ? actual.error : actual, context).toEqual(expected.error);
        continue;
      }
      accepted++;
      expect('ok' in actual, context).toBe(true);
      const a = (actual as { ok: Observations }).ok;
      const e = expected.ok;
      expect(a.points.n, context).toBe(e.points.n);
      expect(sameNumbers(a.points.lon, e.points.lon), context).toBe(true);
      expect(sameNumbers(a.points.lat, e.points.lat), context).toBe(true);
      expect(sameNumbers(a.points.weight, e.points.weight), context).toBe(true);
      expect(sameNumbers(a.observedAt, e.observedAt), context).toBe(true);
      expect(Array.from(a.features), context).toEqual(e.features);
      const spans = (a as Partial<SpannedObservations>).spans;
      if (spans === undefined) continue;
      fast++;
      for (let i = 0; i < a.points.n; i++) {
        if (spans.verbatim[i] === 1) verbatim++;
        const hotspot = (i % 3) - 1;
        const role = i % 3;
        const extra = i % 2 === 0 ? '' : `,"optics_order":${i},"reachability_m":null`;
        expect(pointFeatureFromSpans(spans, i, a.points.lon[i]!, a.points.lat[i]!, hotspot, role, extra), context).toBe(pointFeature(e.features[i]!, hotspot, role, extra));
      }
    }
    console.info(`accepted ${accepted} (${fast} by the byte reader, ${verbatim} features copied verbatim), rejected ${rejected}`);
    // the seeded mix must exercise both readers and both ways of writing
    expect(fast).toBeGreaterThan(CASES / 10);
    expect(accepted - fast).toBeGreaterThan(CASES / 100);
    expect(rejected).toBeGreaterThan(CASES / 10);
    expect(verbatim).toBeGreaterThan(CASES);
  });

  it('reads a file in windows cut at random places exactly as the same bytes in memory', () => {
    console.info(`byte reader windows seed ${SEED} (ROOST_SEED), ${Math.ceil(CASES / 3)} cases`);
    const r = rng(SEED + 1).next;
    const dir = mkdtempSync(join(tmpdir(), 'roost-windows-'));
    let fast = 0;
    let moved = 0;
    try {
      for (let c = 0; c < CASES / 3; c++) {
        const options: ReadOptions = { format: 'geojson', weightProperty: r() < 0.3 ? 'count' : null, timeColumn: r() < 0.2 ? 'when' : undefined };
        const input = collection(r, options);
        const bytes = typeof input === 'string' ? Buffer.from(input, 'utf8') : input;
        const path = join(dir, `case-${c}.geojson`);
        writeFileSync(path, bytes);
        // windows from 16 bytes (every feature cut, the window grown) to more than the whole input
        const windowBytes = 16 + Math.floor(r() ** 2 * (bytes.length + 32));
        const context = `case ${c}: window ${windowBytes} of ${bytes.length} bytes, ${JSON.stringify(options)} ${JSON.stringify(bytes.toString('latin1'))}`;
        const expected = outcome(() => readObservations(bytes, options));
        const actual = outcome(() => readObservations(new InputFile(path, windowBytes), options));
        const same = expectSameReading(actual, expected, context);
        if (same === null) continue;
        const { a, e } = same;
        // the file goes the byte reader's way exactly when the bytes in memory do
        const spans = (a as Partial<SpannedObservations>).spans;
        expect(spans !== undefined, context).toBe((e as Partial<SpannedObservations>).spans !== undefined);
        if (spans === undefined) continue;
        fast++;
        if (windowBytes < bytes.length) moved++;
        const memory = (e as SpannedObservations).spans;
        for (let i = 0; i < a.points.n; i++) {
          const extra = i % 2 === 0 ? '' : `,"optics_order":${i},"reachability_m":null`;
          expect(pointFeatureFromSpans(spans, i, a.points.lon[i]!, a.points.lat[i]!, i % 3 - 1, i % 3, extra), context).toBe(pointFeatureFromSpans(memory, i, e.points.lon[i]!, e.points.lat[i]!, i % 3 - 1, i % 3, extra));
        }
      }
    } finally {
      rmSync(dir, { recursive: true, force: true });
    }
    console.info(`${fast} files read by the byte reader, ${moved} of them through a window smaller than the file`);
    expect(moved).toBeGreaterThan(CASES / 30);
  });

  it('reads text sequences and newline-delimited GeoJSON as the parsing reader does, in memory and from files in windows', () => {
    console.info(`byte reader sequences seed ${SEED} (ROOST_SEED), ${Math.ceil(CASES / 3)} cases`);
    const r = rng(SEED + 2).next;
    const dir = mkdtempSync(join(tmpdir(), 'roost-seq-'));
    let fast = 0;
    let accepted = 0;
    let rejected = 0;
    try {
      for (let c = 0; c < CASES / 3; c++) {
        const options: ReadOptions = { format: 'geojson-seq', weightProperty: r() < 0.3 ? 'count' : null, timeColumn: r() < 0.2 ? 'when' : undefined, maxFeatures: r() < 0.05 ? 3 : undefined };
        const bytes = Buffer.from(sequence(r, options), 'utf8');
        const path = join(dir, `case-${c}.geojsonl`);
        writeFileSync(path, bytes);
        const windowBytes = 16 + Math.floor(r() ** 2 * (bytes.length + 32));
        const context = `case ${c}: window ${windowBytes}, ${JSON.stringify(options)} ${JSON.stringify(bytes.toString('utf8'))}`;
        const time = timeRule(options.timeColumn, options.timeFormat);
        let text = bytes.toString('utf8');
        if (text.charCodeAt(0) === 0xfeff) text = text.slice(1);
        const expected = outcome(() => readGeoJsonSeq(text, options.weightProperty ?? null, 100, options.maxFeatures ?? Number.MAX_SAFE_INTEGER, time, false));
        for (const input of [bytes, new InputFile(path, windowBytes)]) {
          const same = expectSameReading(outcome(() => readObservations(input, options)), expected, context);
          if (same === null) continue;
          const { a, e } = same;
          const spans = (a as Partial<SpannedObservations>).spans;
          if (spans === undefined) continue;
          fast++;
          for (let i = 0; i < a.points.n; i++) {
            expect(pointFeatureFromSpans(spans, i, a.points.lon[i]!, a.points.lat[i]!, i % 3 - 1, i % 3), context).toBe(pointFeature(e.features[i]!, i % 3 - 1, i % 3));
          }
        }
        if ('error' in expected) rejected++;
        else accepted++;
      }
    } finally {
      rmSync(dir, { recursive: true, force: true });
    }
    console.info(`sequences: accepted ${accepted} (${fast} reads by the byte reader, memory and file counted apart), rejected ${rejected}`);
    expect(fast).toBeGreaterThan(CASES / 15);
    expect(accepted * 2 - fast).toBeGreaterThan(CASES / 50);
    expect(rejected).toBeGreaterThan(CASES / 30);
  });

  it('reads thousands of features whose length changes partway, from a file in small windows, as the parsing reader does', () => {
    // short features first, from which the columns are sized, then long ones that outgrow that size
    const r = rng(SEED + 3).next;
    const features = Array.from({ length: 3000 }, (_, i) => {
      const note = i < 2048 ? '' : `,"note":"${'x'.repeat(Math.floor(r() * 400))}"`;
      return `{"type":"Feature","id":"f${i}","geometry":{"type":"Point","coordinates":[${(r() * 360 - 180).toFixed(6)},${(r() * 180 - 90).toFixed(6)}]},"properties":{"count":${i % 7}${note}}}`;
    });
    const text = `{"type":"FeatureCollection","features":[${features.join(',\n')}]}`;
    const dir = mkdtempSync(join(tmpdir(), 'roost-long-'));
    try {
      const path = join(dir, 'long.geojson');
      writeFileSync(path, text);
      const options: ReadOptions = { format: 'geojson', weightProperty: 'count' };
      const e = parsingRead(text, options);
      for (const input of [Buffer.from(text), new InputFile(path, 4096)]) {
        const a = readObservations(input, options) as SpannedObservations;
        expect(a.spans).toBeDefined();
        expect(a.points.n).toBe(3000);
        expect(sameNumbers(a.points.lon, e.points.lon) && sameNumbers(a.points.lat, e.points.lat) && sameNumbers(a.points.weight, e.points.weight)).toBe(true);
        for (let i = 0; i < 3000; i += 7) expect(pointFeatureFromSpans(a.spans, i, a.points.lon[i]!, a.points.lat[i]!, -1, 0)).toBe(pointFeature(e.features[i]!, -1, 0));
        expect(a.features[2999]).toEqual(e.features[2999]);
      }
    } finally {
      rmSync(dir, { recursive: true, force: true });
    }
  });

  it('names the feature where it stopped when the input is too large for the parsing reader', () => {
    // a file over 512 MiB is too large to build here; its bytes stand in, refusing to become one string as such a file's do
    const text = '{"type":"FeatureCollection","features":[{"type":"Feature","geometry":{"type":"Point","coordinates":[1,2]},"properties":{}},{"type":"Feature","bbox":[1,2,1,2],"geometry":{"type":"Point","coordinates":[1,2]},"properties":{}}]}';
    const bytes = Buffer.from(text);
    bytes.toString = () => {
      throw Object.assign(new Error('Cannot create a string longer than 0x1fffffe8 characters'), { code: 'ERR_STRING_TOO_LONG' });
    };
    const got = outcome(() => readObservations(bytes, { format: 'geojson' }));
    expect('error' in got && got.error.problems).toEqual([
      {
        index: null,
        code: 'input-too-large',
        message: `the input is 0 MiB, more than can be read as one text; feature 1 (after byte ${text.indexOf('},{') + 1}) is not a plain Point Feature of a FeatureCollection read that way, or is wrong — split it into smaller files`,
      },
    ]);
  });

  it('leaves to the parsing reader what it does not read exactly', () => {
    const time = timeRule(undefined, undefined);
    const read = (text: string): SpannedObservations | null => readGeoJsonBytes(Buffer.from(text), { weightProperty: null, time, maxFeatures: 100 });
    const point = '"geometry":{"type":"Point","coordinates":[1,2]}';
    expect(read(`{"type":"FeatureCollection","features":[{"type":"Feature",${point},"properties":{"a":1}}]}`)?.points.n).toBe(1);
    for (const odd of [
      `{"type":"FeatureCollection","features":[{"type":"Feature",${point},"bbox":[1,2,1,2],"properties":{}}]}`,
      `{"type":"FeatureCollection","features":[{"type":"Feature",${point},"properties":{"a\\u0062":1}}]}`,
      `{"type":"FeatureCollection","features":[{"type":"Feature",${point},${point},"properties":{}}]}`,
      `{"type":"FeatureCollection","features":[{"type":"Feature",${point},"properties":{"observed_at":"yesterday"}}]}`,
      `{"type":"FeatureCollection","features":[{"type":"Feature",${point},"properties":[]}]}`,
      `{"type":"FeatureCollection","features":[]}`,
      `{"type":"Feature",${point},"properties":{}}`,
      `{"type":"FeatureCollection","features":[{"type":"Feature",${point}}]} x`,
    ]) {
      expect(read(odd), odd).toBeNull();
    }
  });

  it('marks for copying only properties written as JSON.stringify writes them', () => {
    const time = timeRule(undefined, undefined);
    const verbatim = (props: string): number =>
      readGeoJsonBytes(Buffer.from(`{"type":"FeatureCollection","features":[{"type":"Feature","geometry":{"type":"Point","coordinates":[1,2]},"properties":${props}}]}`), {
        weightProperty: null,
        time,
        maxFeatures: 10,
      })!.spans.verbatim[0]!;
    expect(verbatim('{"a":1,"b":"x","c":[1,2.5,null]}')).toBe(1);
    for (const odd of ['{"a":1.0}', '{"a": 1}', '{"a":1,"a":2}', '{"b":1,"1":2}', '{"a":{"b":1}}', '{"a":"\\/"}', '{"a":"\\u0041"}', '{"a":-0}', '{"a":1E3}', '{"role":"x"}']) {
      expect(verbatim(odd), odd).toBe(0);
    }
  });
});
