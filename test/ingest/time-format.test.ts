/**
 * Times that are not RFC 3339: a named time column and a format such as DD.MM.YYYY, in GeoJSON,
 * CSV and text sequences.
 */
import fc from 'fast-check';
import { describe, expect, it } from 'vitest';
import { compileTimeFormat, parseFormattedTime, type TimeFormat } from '../../src/ingest/checks.js';
import { readObservations } from '../../src/ingest/read.js';
import { inputError } from './helpers.js';

const SEED = Number(process.env.ROOST_FC_SEED ?? 20261203);

function compiled(pattern: string): TimeFormat {
  const f = compileTimeFormat(pattern);
  if (typeof f === 'string') throw new Error(f);
  return f;
}

const pad = (v: number, n: number): string => String(v).padStart(n, '0');

describe('time formats', () => {
  it('reads DD.MM.YYYY, MM/DD/YYYY hh:mm, YYYYMMDD and YYYY-MM-DD hh:mm:ss as UTC', () => {
    // source: ECMAScript Date.UTC (ECMA-262 MakeDay / MakeDate), an independent calendar computation
    expect(parseFormattedTime('31.03.2026', compiled('DD.MM.YYYY'))).toBe(Date.UTC(2026, 2, 31));
    expect(parseFormattedTime('02/29/2024 23:59', compiled('MM/DD/YYYY hh:mm'))).toBe(Date.UTC(2024, 1, 29, 23, 59));
    expect(parseFormattedTime('20260101', compiled('YYYYMMDD'))).toBe(Date.UTC(2026, 0, 1));
    expect(parseFormattedTime('1999-12-31 06:07:08', compiled('YYYY-MM-DD hh:mm:ss'))).toBe(Date.UTC(1999, 11, 31, 6, 7, 8));
  });

  it('agrees with Date.UTC on any valid date and time', () => {
    console.log(`test/ingest/time-format.test.ts: fast-check seed ${SEED} (set ROOST_FC_SEED to vary)`);
    const f = compiled('DD.MM.YYYY hh:mm:ss');
    fc.assert(
      fc.property(fc.date({ min: new Date(Date.UTC(1000, 0, 1)), max: new Date(Date.UTC(9999, 11, 31, 23, 59, 59)), noInvalidDate: true }), (d) => {
        const text = `${pad(d.getUTCDate(), 2)}.${pad(d.getUTCMonth() + 1, 2)}.${pad(d.getUTCFullYear(), 4)} ${pad(d.getUTCHours(), 2)}:${pad(d.getUTCMinutes(), 2)}:${pad(d.getUTCSeconds(), 2)}`;
        // source: ECMAScript Date.UTC
        expect(parseFormattedTime(text, f)).toBe(Date.UTC(d.getUTCFullYear(), d.getUTCMonth(), d.getUTCDate(), d.getUTCHours(), d.getUTCMinutes(), d.getUTCSeconds()));
      }),
      { seed: SEED, numRuns: 300 },
    );
  });

  it('gives NaN for text that does not fit or a day the month does not have', () => {
    const f = compiled('DD.MM.YYYY');
    for (const bad of ['31.04.2026', '29.02.2025', '1.3.2026', '01.13.2026', '2026-03-01', '01.03.2026 ', '01.03.26', '']) {
      expect(parseFormattedTime(bad, f), bad).toBeNaN();
    }
  });

  it('refuses patterns it cannot use, saying what to write', () => {
    expect(compileTimeFormat('DD.MM.YY')).toMatch(/unknown letter "Y"|no YYYY/);
    expect(compileTimeFormat('dd.mm.yyyy')).toMatch(/unknown letter "d".*use YYYY, MM, DD, hh, mm and ss/);
    expect(compileTimeFormat('YYYY-MM')).toMatch(/has no DD/);
    expect(compileTimeFormat('YYYY-MM-DD mm')).toMatch(/mm without hh/);
    expect(compileTimeFormat('YYYY-MM-DD-DD')).toMatch(/DD twice/);
  });
});

describe('a named time column', () => {
  const csv = 'id,lon,lat,Datum\na,8.5,47.2,31.03.2026\nb,8.6,47.3,01.04.2026\nc,8.7,47.4,\n';

  it('reads the CSV column with its format; an empty cell is no time', () => {
    const obs = readObservations(csv, { format: 'csv', timeColumn: 'Datum', timeFormat: 'DD.MM.YYYY' });
    expect(Array.from(obs.observedAt!)).toEqual([Date.UTC(2026, 2, 31), Date.UTC(2026, 3, 1), NaN]);
  });

  it('reads a GeoJSON property and a text sequence the same way', () => {
    const features = [
      { type: 'Feature', geometry: { type: 'Point', coordinates: [8.5, 47.2] }, properties: { Datum: '31.03.2026' } },
      { type: 'Feature', geometry: { type: 'Point', coordinates: [8.6, 47.3] }, properties: { Datum: null } },
    ];
    const fcText = JSON.stringify({ type: 'FeatureCollection', features });
    const seqText = features.map((f) => JSON.stringify(f)).join('\n') + '\n';
    for (const [text, format] of [[fcText, 'geojson'], [seqText, 'geojson-seq']] as const) {
      const obs = readObservations(text, { format, timeColumn: 'Datum', timeFormat: 'DD.MM.YYYY' });
      expect(Array.from(obs.observedAt!), format).toEqual([Date.UTC(2026, 2, 31), NaN]);
    }
  });

  it('names a column that is not there, and a time not in the format', () => {
    const missing = inputError(() => readObservations(csv, { format: 'csv', timeColumn: 'Date', timeFormat: 'DD.MM.YYYY' }));
    expect(missing.problems[0]).toMatchObject({ index: null, code: 'unknown-property' });
    expect(missing.problems[0]!.message).toMatch(/^time_column: .*"Date".*"Datum"/);
    const wrong = inputError(() => readObservations(csv, { format: 'csv', timeColumn: 'Datum', timeFormat: 'MM/DD/YYYY' }));
    expect(wrong.problems[0]).toMatchObject({ index: 0, code: 'bad-time' });
    expect(wrong.problems[0]!.message).toMatch(/Datum is the string "31\.03\.2026", which is not a time written MM\/DD\/YYYY/);
    const pattern = inputError(() => readObservations(csv, { format: 'csv', timeColumn: 'Datum', timeFormat: 'dd.mm.yyyy' }));
    expect(pattern.problems[0]).toMatchObject({ index: null, code: 'bad-time-format' });
  });
});
