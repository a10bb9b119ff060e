import { describe, expect, it } from 'vitest';
import { detectFormat, readObservations } from '../../src/ingest/read.js';
import { cities, collection, inputError, point } from './helpers.js';

const RS = '\u001e';
const sample = cities(2003, 40);
const features = sample.map((c, i) => point([Number(c.lng), Number(c.lat)], { name: c.name }, i));

describe('GeoJSON text sequences (RFC 8142)', () => {
  it('reads RS-separated records ending with LF', () => {
    const text = features.map((f) => `${RS}${JSON.stringify(f)}\n`).join('');
    const obs = readObservations(text);
    expect(obs.points.n).toBe(sample.length);
    sample.forEach((c, i) => {
      expect([obs.points.lon[i], obs.points.lat[i]]).toEqual([Number(c.lng), Number(c.lat)]);
      expect(obs.features[i]!.id).toBe(i);
    });
  });

  it('reads pretty-printed records spanning lines, and a last record without its LF', () => {
    const text = `${RS}${JSON.stringify(features[0], null, 2)}\n${RS}${RS}\n${RS}${JSON.stringify(features[1])}`;
    const obs = readObservations(text);
    expect(obs.points.n).toBe(2);
    expect(obs.features[1]!.id).toBe(1);
  });

  it('reports a broken record and a non-feature record with their record index', () => {
    const text = `${RS}${JSON.stringify(features[0])}\n${RS}{"type":"Feature",\n${RS}${collection([features[1]])}\n${RS}${JSON.stringify(point([0, 100], {}, 'z'))}\n`;
    const err = inputError(() => readObservations(text));
    expect(err.problems.map((p) => [p.index, p.code])).toEqual([
      [1, 'malformed-json'],
      [2, 'not-a-feature'],
      [3, 'swapped-coordinates'],
    ]);
    expect(err.problems[0]!.message).toMatch(/^record 1: the record is not valid JSON/);
    expect(err.problems[1]!.message).toMatch(/^record 2: is a FeatureCollection; each record must be one Feature/);
    expect(err.problems[2]!.message).toMatch(/^record 3 \(id "z"\): latitude 100/);
  });
});

describe('newline-delimited GeoJSON', () => {
  it('reads one Feature per line, CRLF and blank lines allowed', () => {
    const text = features.map((f) => JSON.stringify(f)).join('\r\n\r\n') + '\r\n';
    const obs = readObservations(text);
    expect(obs.points.n).toBe(sample.length);
    expect(Array.from(obs.points.lon)).toEqual(sample.map((c) => Number(c.lng)));
  });

  it('names record index and line in problems', () => {
    const lines = [JSON.stringify(features[0]), '', JSON.stringify(point([1, 2], { observed_at: 'noon' })), '{nope', JSON.stringify(features[1])];
    const err = inputError(() => readObservations(lines.join('\n'), { format: 'geojson-seq' }));
    expect(err.problems.map((p) => [p.index, p.code])).toEqual([
      [1, 'bad-time'],
      [2, 'malformed-json'],
    ]);
    expect(err.problems[0]!.message).toMatch(/^record 1 \(line 3\): observed_at/);
    expect(err.problems[1]!.message).toMatch(/^record 2 \(line 4\): the record is not valid JSON: it breaks at line 1, column 2/);
  });

  it('reads weights and reports a weight property no record has', () => {
    const text = [point([1, 2], { n: 2 }), point([3, 4], { n: 5 })].map((f) => JSON.stringify(f)).join('\n');
    expect(Array.from(readObservations(text, { weightProperty: 'n' }).points.weight!)).toEqual([2, 5]);
    const err = inputError(() => readObservations(text, { weightProperty: 'm' }));
    expect(err.problems[0]!.code).toBe('unknown-property');
    expect(err.problems[0]!.message).toMatch(/^no record has the property "m"; properties found: "n"/);
  });

  it('empty-input and too-many-features', () => {
    expect(inputError(() => readObservations(`${RS}\n${RS}\n`)).problems[0]!.code).toBe('empty-input');
    const text = features.slice(0, 3).map((f) => JSON.stringify(f)).join('\n');
    expect(inputError(() => readObservations(text, { maxFeatures: 2 })).problems[0]!.code).toBe('too-many-features');
  });
});

describe('detectFormat', () => {
  const one = JSON.stringify(features[0]);
  const cases: [string, string | Buffer, string][] = [
    ['RS first', `${RS}${one}\n`, 'geojson-seq'],
    ['newline-delimited features', `${one}\n${one}\n`, 'geojson-seq'],
    ['minified collection', collection(features), 'geojson'],
    ['pretty collection', JSON.stringify({ type: 'FeatureCollection', features }, null, 2), 'geojson'],
    ['one feature on one line', `${one}\n`, 'geojson'],
    ['bare array', '[1,2]', 'geojson'],
    ['BOM and spaces before {', `\ufeff \n${collection(features)}`, 'geojson'],
    ['CSV', 'lon,lat\n1,2\n', 'csv'],
    ['CSV with BOM as bytes', Buffer.from('\ufeffx;y\n1;2\n'), 'csv'],
    ['bytes of a sequence', Buffer.from(`${one}\n${one}\n`), 'geojson-seq'],
    ['an object line followed by a pretty object', `{"a":1}\n{\n"b":2}`, 'geojson-seq'],
    ['a first line that only looks whole', '{"a":"}\n{"}', 'geojson'],
  ];
  for (const [name, input, format] of cases) {
    it(`${name} → ${format}`, () => expect(detectFormat(input)).toBe(format));
  }
});
