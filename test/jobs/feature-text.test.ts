/**
 * Stored runs write their points and noise layers from the stored feature texts; the result must
 * be the bytes the parsed-feature writer gives (POST /v1/cluster), whatever the feature holds,
 * and the same whether they are written from the texts or from their UTF-8 bytes (SQLite keeps
 * them as bytes).
 */
import fc from 'fast-check';
import { describe, expect, it } from 'vitest';
import { pointFeature, pointFeatureBytes, pointFeatureFromText } from '../../src/run/cluster.js';
import { PackedTexts } from '../../src/storage/columns.js';
import type { InputFeature } from '../../src/ingest/types.js';

const key = fc.oneof(fc.constantFrom('role', 'hotspot_id', 'properties', 'id', 'geometry', '2', '__proto__', 'a"b', 'x\\y', 'é😀', '\n'), fc.string({ maxLength: 6 }));
const value = fc.jsonValue({ maxDepth: 3 });
const props = fc.oneof(fc.constant(null), fc.constant({}), fc.dictionary(key, value, { maxKeys: 5 }));
const coordinate = fc.oneof(fc.double({ min: -180, max: 180, noNaN: true }), fc.constantFrom(0, -0, 1e-9, 179.99999995, -0.00000005, 1e-7));
// null: an id the reader takes for no id
const id = fc.option(fc.oneof(fc.string({ maxLength: 8 }), fc.integer(), fc.double({ noNaN: true, noDefaultInfinity: true }), fc.constant('"\\\n'), fc.constant(null)), { nil: undefined });

const feature = fc
  .record({
    id,
    coords: fc.array(coordinate, { minLength: 2, maxLength: 3 }),
    properties: props,
    geometryExtra: fc.boolean(),
    extra: fc.option(fc.dictionary(key, value, { maxKeys: 2 }), { nil: undefined }),
    order: fc.constantFrom(0, 1, 2),
  })
  .map(({ id, coords, properties, geometryExtra, extra, order }) => {
    const geometry: Record<string, unknown> = geometryExtra ? { coordinates: coords, type: 'Point' } : { type: 'Point', coordinates: coords };
    const members: [string, unknown][] = [['type', 'Feature'], ['geometry', geometry], ['properties', properties]];
    if (id !== undefined) members.splice(1, 0, ['id', id]);
    if (extra !== undefined) members.push(['extra', extra]);
    if (order === 1) members.reverse();
    if (order === 2) members.push(members.shift()!);
    return Object.fromEntries(members) as unknown as InputFeature;
  });

describe('point features from stored texts', () => {
  it('gives the bytes of the parsed-feature writer for any feature', () => {
    fc.assert(
      fc.property(feature, fc.integer({ min: -1, max: 40 }), fc.integer({ min: 0, max: 2 }), (f, hotspot, role) => {
        // the stored text is JSON.stringify of the parsed feature (src/ingest/records.ts)
        const text = JSON.stringify(f);
        const parsed = JSON.parse(text) as InputFeature;
        let want: string;
        try {
          want = pointFeature(parsed, hotspot, role);
        } catch (e) {
          expect(() => pointFeatureFromText(text, hotspot, role)).toThrow((e as Error).message);
          return;
        }
        expect(pointFeatureFromText(text, hotspot, role)).toBe(want);
      }),
      { numRuns: 3000, seed: 20260401 },
    );
  });

  it('leaves out an id of null from a stored text, as the parsed-feature writer does', () => {
    const text = '{"type":"Feature","id":null,"geometry":{"type":"Point","coordinates":[1,2]},"properties":{"a":1}}';
    const want = '{"type":"Feature","geometry":{"type":"Point","coordinates":[1,2]},"properties":{"a":1,"hotspot_id":null,"role":"noise"}}';
    expect(pointFeatureFromText(text, -1, 0)).toBe(want);
    expect(pointFeature(JSON.parse(text) as InputFeature, -1, 0)).toBe(want);
  });

  it('copies properties holding nested "properties", "id" or line breaks as text', () => {
    const f = { type: 'Feature', id: 7, geometry: { type: 'Point', coordinates: [8.123456789, -47.00000004, 400] }, properties: { properties: { id: 'x' }, note: 'a\nb "q"', n: [1, { geometry: 2 }] } };
    const text = JSON.stringify(f);
    expect(pointFeatureFromText(text, 2, 1)).toBe(
      '{"type":"Feature","id":7,"geometry":{"type":"Point","coordinates":[8.1234568,-47,400]},"properties":{"properties":{"id":"x"},"note":"a\\nb \\"q\\"","n":[1,{"geometry":2}],"hotspot_id":3,"role":"core"}}',
    );
    expect(pointFeatureFromText(text, 2, 1)).toBe(pointFeature(JSON.parse(text) as InputFeature, 2, 1));
  });

  it('from the texts\' UTF-8 bytes: the same bytes, or none (the text is written instead)', () => {
    const extras = fc.constantFrom('', ',"optics_order":3,"reachability_m":12.5', ',"x":"é😀"');
    let written = 0;
    fc.assert(
      fc.property(fc.array(feature, { minLength: 1, maxLength: 4 }), fc.integer({ min: -1, max: 40 }), fc.integer({ min: 0, max: 2 }), extras, (features, hotspot, role, extra) => {
        // the texts joined as SQLite gives them, so that each lies between other bytes
        const texts = features.map((f) => JSON.stringify(f));
        const packed = new PackedTexts();
        expect(packed.addJoinedBytes(Buffer.from(texts.join('\n'), 'utf8'), texts.length)).toBe(true);
        texts.forEach((text, k) => {
          expect(packed.at(k)).toBe(text);
          const out = Buffer.alloc(4096, 0x7e);
          const write = (): number => pointFeatureBytes(packed.bytesOf(k)!, packed.byteStart(k), packed.byteEnd(k), hotspot, role, extra, out, 7, 4000);
          let want: string;
          try {
            want = pointFeatureFromText(text, hotspot, role, extra);
          } catch (e) {
            // the bytes are never written in place of an error
            let end = -1;
            try {
              end = write();
            } catch (e2) {
              expect((e2 as Error).message).toBe((e as Error).message);
            }
            expect(end).toBe(-1);
            return;
          }
          const end = write();
          if (end < 0) return;
          written++;
          expect(out.toString('utf8', 7, end)).toBe(want);
          expect(out[end]).toBe(0x7e); // nothing written past its end
        });
      }),
      { numRuns: 2000, seed: 20261203 },
    );
    // most of the generated features take the byte path
    expect(written).toBeGreaterThan(1000);
  });

  it('from bytes: coordinates of few decimals, copied as they are, are what coordText writes', () => {
    // positions as surveys store them (0 to 9 decimals, some at the 7th), altitudes, and texts
    // at the edges of the copied form: 8 whole digits, −0, exponents, trailing zeros
    const decimals = fc.integer({ min: 0, max: 9 });
    const scaled = fc.tuple(fc.double({ min: -1e9, max: 1e9, noNaN: true }), decimals).map(([x, d]) => Number(x.toFixed(d)));
    const near = fc.tuple(fc.integer({ min: -1800000000, max: 1800000000 }), fc.integer({ min: 0, max: 9 })).map(([n, d]) => n / 10 ** d);
    const edge = fc.constantFrom(0, -0, 99999999.9999999, -99999999.9999999, 100000000.5, 12345678.1234567, 1e21, 1.5e-7, -5e-8, 0.00000005, 179.99999995, -179.9999999);
    const coord = fc.oneof(scaled, near, edge);
    const out = Buffer.alloc(1024, 0x7e);
    fc.assert(
      fc.property(fc.array(coord, { minLength: 2, maxLength: 3 }), fc.integer({ min: -1, max: 40 }), fc.integer({ min: 0, max: 2 }), (coords, hotspot, role) => {
        const f = { type: 'Feature', id: 'b1', properties: { count: 2 }, geometry: { type: 'Point', coordinates: coords } } as unknown as InputFeature;
        const text = JSON.stringify(f);
        const b = Buffer.from(text);
        const end = pointFeatureBytes(b, 0, b.length, hotspot, role, '', out, 0, 1000);
        expect(end).toBeGreaterThan(0);
        expect(out.toString('utf8', 0, end)).toBe(pointFeature(JSON.parse(text) as InputFeature, hotspot, role));
      }),
      { numRuns: 20000, seed: 20261204 },
    );
  });

  it('from bytes: the usual stored feature is written without its text, and a feature that does not fit is left to the text', () => {
    const text = '{"type":"Feature","id":"b7","properties":{"observed_at":"2026-05-08T12:00:00Z","count":4},"geometry":{"type":"Point","coordinates":[-3.18812345678,55.95]}}';
    const b = Buffer.from(text);
    const out = Buffer.alloc(1024);
    const end = pointFeatureBytes(b, 0, b.length, 4, 1, '', out, 0, 1024);
    expect(out.toString('utf8', 0, end)).toBe(pointFeatureFromText(text, 4, 1));
    expect(out.toString('utf8', 0, end)).toBe(
      '{"type":"Feature","id":"b7","geometry":{"type":"Point","coordinates":[-3.1881235,55.95]},"properties":{"observed_at":"2026-05-08T12:00:00Z","count":4,"hotspot_id":5,"role":"core"}}',
    );
    expect(pointFeatureBytes(b, 0, b.length, 4, 1, '', out, 0, 100)).toBe(-1);
  });
});
