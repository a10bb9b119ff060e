/**
 * Robustness: whatever arrives, the readers either return well-formed Observations or throw an
 * InputError with well-formed problems — never another exception, never a partial result.
 */
import { describe, expect, it } from 'vitest';
import fc from 'fast-check';
import { createRequire } from 'node:module';
import { readObservations, type InputFormat, type ReadOptions } from '../../src/ingest/read.js';
import { InputError } from '../../src/ingest/types.js';

const gjv = createRequire(import.meta.url)('geojson-validation') as { isFeature(f: unknown): boolean };

const seen = { accepted: 0, rejected: 0 };

function check(input: string | Buffer, options: ReadOptions): void {
  let result;
  try {
    result = readObservations(input, options);
  } catch (err) {
    seen.rejected++;
    expect(err).toBeInstanceOf(InputError);
    const e = err as InputError;
    expect(e.problems.length).toBeGreaterThan(0);
    expect(e.problems.length).toBeLessThanOrEqual(options.maxProblems ?? 100);
    expect(e.total).toBeGreaterThanOrEqual(e.problems.length);
    for (const p of e.problems) {
      expect(typeof p.code).toBe('string');
      expect(typeof p.message).toBe('string');
      expect(p.message.length).toBeGreaterThan(0);
      if (p.index !== null) expect(Number.isInteger(p.index) && p.index >= 0).toBe(true);
    }
    return;
  }
  seen.accepted++;
  const { points, features, observedAt } = result;
  expect(points.n).toBeGreaterThan(0);
  expect(features.length).toBe(points.n);
  for (let i = 0; i < points.n; i++) {
    expect(points.lon[i]).toBeGreaterThanOrEqual(-180);
    expect(points.lon[i]).toBeLessThanOrEqual(180);
    expect(points.lat[i]).toBeGreaterThanOrEqual(-90);
    expect(points.lat[i]).toBeLessThanOrEqual(90);
    if (points.weight) expect(points.weight[i]! >= 0 && Number.isFinite(points.weight[i])).toBe(true);
    // source: geojson-validation package — what we accept is a valid GeoJSON Feature
    expect(gjv.isFeature(features[i])).toBe(true);
    expect(features[i]!.geometry.coordinates.slice(0, 2)).toEqual([points.lon[i], points.lat[i]]);
  }
  if (observedAt) expect(observedAt.length).toBe(points.n);
}

const formats = fc.option(fc.constantFrom<InputFormat>('geojson', 'csv', 'geojson-seq'), { nil: undefined });
const options = fc.record({
  format: formats,
  weightProperty: fc.option(fc.constantFrom('n', 'n', 'n', 'count', 'x', 'constructor', '__proto__'), { nil: undefined, freq: 2 }),
  maxProblems: fc.option(fc.integer({ min: 1, max: 5 }), { nil: undefined }),
});

/** Values shaped like features, with every member sometimes wrong. */
const number = fc.oneof(fc.double({ noNaN: true, noDefaultInfinity: true, min: -400, max: 400 }), fc.integer({ min: -200, max: 200 }));
const loosePoint = fc.record(
  {
    type: fc.constantFrom('Feature', 'Feature', 'Feature', 'Point', 'feature'),
    id: fc.oneof(fc.string(), fc.integer(), fc.constant(null), fc.boolean()),
    bbox: fc.oneof(fc.array(number, { maxLength: 6 }), fc.string()),
    geometry: fc.oneof(
      fc.record({ type: fc.constantFrom('Point', 'Point', 'Point', 'MultiPoint', 'LineString', 'Polygon'), coordinates: fc.oneof(fc.array(number, { maxLength: 4 }), fc.jsonValue()) }, { requiredKeys: ['type'] }),
      fc.constant(null),
      fc.jsonValue(),
    ),
    properties: fc.oneof(
      fc.record(
        {
          n: fc.oneof(number, fc.string(), fc.constant(null)),
          observed_at: fc.oneof(fc.date({ noInvalidDate: true }).map((d) => d.toISOString()), fc.string(), fc.constant(null)),
          note: fc.jsonValue(),
        },
        { requiredKeys: [] },
      ),
      fc.constant(null),
      fc.jsonValue(),
    ),
  },
  { requiredKeys: ['type', 'geometry'] },
);

/** Mostly valid features, so that acceptance is exercised too. */
const goodPoint = fc.record({
  type: fc.constant('Feature'),
  id: fc.oneof(fc.string(), fc.integer()),
  geometry: fc.record({
    type: fc.constant('Point'),
    coordinates: fc.tuple(fc.double({ min: -180, max: 180, noNaN: true }), fc.double({ min: -90, max: 90, noNaN: true })),
  }),
  properties: fc.record({ n: fc.nat(), observed_at: fc.date({ noInvalidDate: true, min: new Date(0), max: new Date(4e12) }).map((d) => d.toISOString()), note: fc.jsonValue() }, { requiredKeys: ['n'] }),
});
const anyPoint = fc.oneof({ arbitrary: goodPoint, weight: 12 }, { arbitrary: loosePoint, weight: 1 });

describe('readers never throw anything but InputError', () => {
  it('random JSON values', () => {
    fc.assert(
      fc.property(fc.jsonValue(), options, (value, opts) => check(JSON.stringify(value) ?? '', opts)),
      { numRuns: 1500, seed: 1 },
    );
  });

  it('random feature-like collections, sequences and single features', () => {
    fc.assert(
      fc.property(fc.array(anyPoint, { maxLength: 8 }), fc.constantFrom('collection', 'ndjson', 'rs', 'single'), options, (items, shape, opts) => {
        const text =
          shape === 'collection'
            ? JSON.stringify({ type: 'FeatureCollection', features: items })
            : shape === 'ndjson'
              ? items.map((f) => JSON.stringify(f)).join('\n')
              : shape === 'rs'
                ? items.map((f) => `\u001e${JSON.stringify(f)}\n`).join('')
                : JSON.stringify(items[0] ?? {});
        check(text, opts);
      }),
      { numRuns: 1500, seed: 2 },
    );
    // both outcomes must have been exercised for the property to mean anything
    expect(seen.accepted).toBeGreaterThan(20);
    expect(seen.rejected).toBeGreaterThan(20);
  });

  it('random bytes and random text', () => {
    fc.assert(
      fc.property(fc.oneof(fc.uint8Array({ maxLength: 300 }).map((b) => Buffer.from(b)), fc.string({ maxLength: 300 }), fc.string({ unit: 'binary', maxLength: 300 })), options, (input, opts) =>
        check(input, opts),
      ),
      { numRuns: 1500, seed: 3 },
    );
  });

  it('random CSV-like text', () => {
    const before = seen.accepted;
    const cell = fc.oneof(fc.constantFrom('', '1', '-45.5', '200', '"q,"', '""', '"', 'x', '2024-05-01T00:00:00Z', '1e999', ' 3 '), fc.string({ maxLength: 6 }));
    const header = fc.array(fc.constantFrom('lon', 'lat', 'x', 'y', 'id', 'n', 'observed_at', '', 'Lat'), { minLength: 1, maxLength: 6 });
    fc.assert(
      fc.property(header, fc.array(fc.array(cell, { maxLength: 7 }), { maxLength: 8 }), fc.constantFrom(',', ';', '\t'), fc.constantFrom('\n', '\r\n'), options, (h, rows, sep, eol, opts) => {
        const text = [h.join(sep), ...rows.map((r) => r.join(sep))].join(eol);
        check(text, { ...opts, format: 'csv' });
      }),
      { numRuns: 1500, seed: 4 },
    );
    const goodRow = fc.tuple(fc.double({ min: -180, max: 180, noNaN: true }), fc.double({ min: -90, max: 90, noNaN: true }), fc.nat(), fc.string({ maxLength: 5 }));
    fc.assert(
      fc.property(fc.array(fc.oneof({ arbitrary: goodRow.map((r) => [String(r[0]), String(r[1]), String(r[2]), JSON.stringify(r[3])]), weight: 20 }, { arbitrary: fc.array(cell, { maxLength: 5 }), weight: 1 }), { minLength: 1, maxLength: 6 }), options, (rows, opts) => {
        const text = ['lon,lat,n,note', ...rows.map((r) => r.join(','))].join('\n');
        check(text, { ...opts, format: 'csv' });
      }),
      { numRuns: 1500, seed: 4 },
    );
    expect(seen.accepted).toBeGreaterThan(before + 20);
  });
});
