/**
 * Stored runs write their points and noise layers from the stored feature texts; the result must
 * be the bytes the parsed-feature writer gives (POST /v1/cluster), whatever the feature holds.
 */
import fc from 'fast-check';
import { describe, expect, it } from 'vitest';
import { pointFeature, pointFeatureFromText } from '../../src/run/cluster.js';
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
});
