import { describe, expect, it } from 'vitest';
import { createRequire } from 'node:module';
import { readObservations } from '../../src/ingest/read.js';
import { cities, collection, inputError, point } from './helpers.js';

const gjv = createRequire(import.meta.url)('geojson-validation') as { isFeature(f: unknown): boolean };

describe('GeoJSON: accepted input', () => {
  it('reads a FeatureCollection of open-dataset cities into typed arrays, keeping the parsed features', () => {
    const sample = cities(997, 150);
    const text = collection(sample.map((c, i) => point([Number(c.lng), Number(c.lat)], { name: c.name }, `c${i}`)));
    const obs = readObservations(text);
    expect(obs.points.n).toBe(sample.length);
    expect(obs.points.weight).toBeNull();
    expect(obs.observedAt).toBeNull();
    sample.forEach((c, i) => {
      expect(obs.points.lon[i]).toBe(Number(c.lng));
      expect(obs.points.lat[i]).toBe(Number(c.lat));
      expect(obs.features[i]!.id).toBe(`c${i}`);
      expect(obs.features[i]!.properties).toEqual({ name: c.name });
      // source: geojson-validation package — every accepted feature is a valid GeoJSON Feature
      expect(gjv.isFeature(obs.features[i])).toBe(true);
    });
  });

  it('reads a single Feature', () => {
    const obs = readObservations(JSON.stringify(point([10.5, -33.25], { a: 1 }, 7)));
    expect(obs.points.n).toBe(1);
    expect([obs.points.lon[0], obs.points.lat[0]]).toEqual([10.5, -33.25]);
    expect(obs.features[0]!.id).toBe(7);
  });

  it('accepts a third coordinate (altitude or depth) and ignores it', () => {
    const obs = readObservations(collection([point([1, 2, 350.5]), point([3, 4, -12])]));
    expect(Array.from(obs.points.lon)).toEqual([1, 3]);
    expect(Array.from(obs.points.lat)).toEqual([2, 4]);
    expect(obs.features[0]!.geometry.coordinates).toEqual([1, 2, 350.5]);
  });

  it('accepts the range limits exactly', () => {
    const obs = readObservations(collection([point([-180, -90]), point([180, 90])]));
    expect(Array.from(obs.points.lon)).toEqual([-180, 180]);
    expect(Array.from(obs.points.lat)).toEqual([-90, 90]);
  });

  it('reads a feature without a properties member as properties null, and id null as no id', () => {
    const text = JSON.stringify({ type: 'FeatureCollection', features: [{ type: 'Feature', id: null, geometry: { type: 'Point', coordinates: [1, 2] } }] });
    const obs = readObservations(text);
    expect(obs.features[0]!.properties).toBeNull();
  });

  it('accepts a valid bbox on a feature and on its geometry', () => {
    const f = { type: 'Feature', bbox: [1, 2, 1, 2], geometry: { type: 'Point', bbox: [1, 2, 1, 2], coordinates: [1, 2] }, properties: {} };
    const obs = readObservations(collection([f]));
    expect([obs.points.lon[0], obs.points.lat[0]]).toEqual([1, 2]);
  });

  it('keeps the feature objects themselves, not copies', () => {
    const obs = readObservations(collection([point([1, 2], { a: { deep: [1] } })]));
    const again = obs.features[0]!;
    expect(again.properties).toEqual({ a: { deep: [1] } });
    expect(obs.features.length).toBe(1);
  });

  it('reads Buffer input with a byte-order mark', () => {
    const obs = readObservations(Buffer.from('\ufeff' + collection([point([5, 6])]), 'utf8'));
    expect([obs.points.lon[0], obs.points.lat[0]]).toEqual([5, 6]);
  });
});

describe('GeoJSON: weights', () => {
  it('takes finite numbers ≥ 0 from the named property', () => {
    const obs = readObservations(collection([point([1, 2], { n: 3 }), point([3, 4], { n: 0 }), point([5, 6], { n: 2.5 })]), { weightProperty: 'n' });
    expect(Array.from(obs.points.weight!)).toEqual([3, 0, 2.5]);
  });

  it('reports negative, string, missing and null weights as bad-weight naming index and id', () => {
    const err = inputError(() =>
      readObservations(collection([point([1, 2], { n: -1 }, 'a'), point([1, 2], { n: '3' }, 'b'), point([1, 2], {}, 'c'), point([1, 2], { n: null }), point([1, 2], { n: 1 })]), {
        weightProperty: 'n',
      }),
    );
    expect(err.total).toBe(4);
    expect(err.problems.map((p) => [p.index, p.id, p.code])).toEqual([
      [0, 'a', 'bad-weight'],
      [1, 'b', 'bad-weight'],
      [2, 'c', 'bad-weight'],
      [3, undefined, 'bad-weight'],
    ]);
    expect(err.problems[0]!.message).toMatch(/^feature 0 \(id "a"\): weight "n" is -1/);
    expect(err.problems[1]!.message).toMatch(/^feature 1 \(id "b"\): .*the string "3".*JSON number \(3\)/);
    expect(err.problems[2]!.message).toMatch(/^feature 2 \(id "c"\): has no property "n"/);
    expect(err.problems[3]!.message).toMatch(/^feature 3: weight "n" is null/);
  });

  it('reports a weight property no feature has as one unknown-property problem listing what exists', () => {
    const err = inputError(() => readObservations(collection([point([1, 2], { count: 1, species: 'ibis' }), point([1, 2], { Count: 2 })]), { weightProperty: 'cnt' }));
    expect(err.total).toBe(1);
    expect(err.problems[0]).toMatchObject({ index: null, code: 'unknown-property' });
    expect(err.problems[0]!.message).toContain('"cnt"');
    expect(err.problems[0]!.message).toContain('"count", "species", "Count"');
  });

  it('suggests a name differing only in case', () => {
    const err = inputError(() => readObservations(collection([point([1, 2], { Count: 1 })]), { weightProperty: 'count' }));
    expect(err.problems[0]!.message).toContain('did you mean "Count"');
  });

  it('does not read inherited object members as weights', () => {
    const err = inputError(() => readObservations(collection([point([1, 2], { a: 1 })]), { weightProperty: 'constructor' }));
    expect(err.problems[0]!.code).toBe('unknown-property');
  });
});

describe('GeoJSON: observed_at', () => {
  it('stores epoch milliseconds, NaN where absent or null', () => {
    const obs = readObservations(
      collection([point([1, 2], { observed_at: '2024-05-01T06:30:00Z' }), point([1, 2], {}), point([1, 2], { observed_at: null }), point([1, 2], { observed_at: '2024-05-01T08:30:00.5+02:00' })]),
    );
    const t = obs.observedAt!;
    // source: ECMAScript Date.parse of the same ISO 8601 strings
    expect(t[0]).toBe(Date.parse('2024-05-01T06:30:00Z'));
    expect(t[1]).toBeNaN();
    expect(t[2]).toBeNaN();
    expect(t[3]).toBe(Date.parse('2024-05-01T08:30:00.500+02:00'));
  });

  it('reports unparseable, offset-less and non-string times as bad-time', () => {
    const bad = ['yesterday', '2024-05-01T06:30:00', '2024-02-30T00:00:00Z', '', 1714545000000];
    const err = inputError(() => readObservations(collection(bad.map((v, i) => point([1, 2], { observed_at: v }, i)))));
    expect(err.total).toBe(bad.length);
    err.problems.forEach((p, i) => {
      expect(p).toMatchObject({ index: i, id: i, code: 'bad-time' });
      expect(p.message).toMatch(new RegExp(`^feature ${i} \\(id ${i}\\): observed_at is .*RFC 3339`));
    });
  });
});

describe('GeoJSON: problems with features', () => {
  const cases: [string, unknown, string, RegExp][] = [
    ['not-a-feature', 5, 'not-a-feature', /is the number 5, not a Feature object/],
    ['bare geometry', { type: 'Point', coordinates: [1, 2] }, 'not-a-feature', /bare Point geometry; wrap it in a Feature/],
    ['wrong type', { type: 'Feat', geometry: null, properties: {} }, 'not-a-feature', /"type" the string "Feat"; expected "Feature"/],
    ['null geometry', { type: 'Feature', geometry: null, properties: {} }, 'null-geometry', /null geometry/],
    ['missing geometry', { type: 'Feature', properties: {} }, 'null-geometry', /no geometry member/],
    ['polygon', { type: 'Feature', geometry: { type: 'Polygon', coordinates: [] }, properties: {} }, 'not-a-point', /geometry is a Polygon/],
    ['multipoint', { type: 'Feature', geometry: { type: 'MultiPoint', coordinates: [[1, 2]] }, properties: {} }, 'not-a-point', /a MultiPoint.*one Feature per point/],
    ['geometry string', { type: 'Feature', geometry: 'POINT(1 2)', properties: {} }, 'not-a-point', /geometry is the string/],
    ['one number', point([1]), 'bad-coordinates', /have 1 value; a position needs 2/],
    ['four numbers', point([1, 2, 3, 4]), 'bad-coordinates', /have 4 values/],
    ['string number', point(['1', 2]), 'bad-coordinates', /the string "1" at position 0/],
    ['not an array', point({ lon: 1, lat: 2 }), 'bad-coordinates', /are an object, not an array/],
    ['non-finite altitude', point([1, 2, 'x']), 'bad-coordinates', /at position 2/],
    ['longitude out of range', point([200, 10]), 'out-of-range', /longitude 200 is out of range/],
    ['both out of range', point([200, 100]), 'out-of-range', /latitude 100 is out of range.*longitude 200/],
    ['bad bbox', { ...point([1, 2]), bbox: [1, 2, 3] }, 'bad-bbox', /bbox is an array of 3/],
    ['bad properties', { ...point([1, 2]), properties: [1] }, 'bad-properties', /properties is an array of 1/],
    ['bad id', { ...point([1, 2]), id: { x: 1 } }, 'bad-id', /id is an object/],
  ];
  for (const [name, item, code, message] of cases) {
    it(`${name} → ${code}, naming the feature index`, () => {
      const err = inputError(() => readObservations(collection([point([0, 0]), point([0, 0]), item])));
      expect(err.total).toBe(1);
      expect(err.problems[0]).toMatchObject({ index: 2, code });
      expect(err.problems[0]!.message).toMatch(/^feature 2: /);
      expect(err.problems[0]!.message).toMatch(message);
      expect(err.message).toBe(err.problems[0]!.message);
    });
  }

  it('names the id of the feature when it has one', () => {
    const err = inputError(() => readObservations(collection([point([0, 0], {}, 'nest-17'), { type: 'Feature', id: 'nest-18', geometry: null, properties: {} }])));
    expect(err.problems[0]).toMatchObject({ index: 1, id: 'nest-18', code: 'null-geometry' });
    expect(err.problems[0]!.message).toMatch(/^feature 1 \(id "nest-18"\): /);
  });

  it('reads 1e999 (parsed as Infinity) as a coordinate problem', () => {
    const err = inputError(() => readObservations('{"type":"FeatureCollection","features":[{"type":"Feature","geometry":{"type":"Point","coordinates":[1e999,2]},"properties":{}}]}'));
    expect(err.problems[0]!.code).toBe('bad-coordinates');
    expect(err.problems[0]!.message).toMatch(/Infinity at position 0; every value must be finite/);
  });

  it('reports every problem of one feature', () => {
    const err = inputError(() => readObservations(collection([{ type: 'Feature', id: true, geometry: { type: 'Point', coordinates: [500, 1] }, properties: { observed_at: 'soon' } }])));
    expect(err.problems.map((p) => p.code).sort()).toEqual(['bad-id', 'bad-time', 'out-of-range']);
  });
});

describe('GeoJSON: swapped coordinates', () => {
  it('flags one pair that reads as [latitude, longitude]', () => {
    const err = inputError(() => readObservations(collection([point([10, 20]), point([45.2, 120.5], {}, 'x')])));
    expect(err.total).toBe(1);
    expect(err.problems[0]).toMatchObject({ index: 1, id: 'x', code: 'swapped-coordinates' });
    expect(err.problems[0]!.message).toBe(
      'feature 1 (id "x"): latitude 120.5 is out of range (−90 to 90); the pair looks like [latitude, longitude] — GeoJSON order is [longitude, latitude]',
    );
  });

  it('does not call a pair swapped when swapping would not help', () => {
    const err = inputError(() => readObservations(collection([point([100, 95])])));
    expect(err.problems[0]!.code).toBe('out-of-range');
  });

  it('adds a whole-input note when open-dataset cities east of 90°E are given latitude first', () => {
    // Cities with |longitude| > 90 go out of range when written [lat, lng]; the others stay in range.
    const sample = cities(7, 30000)
      .filter((c) => Number(c.lng) > 60)
      .slice(0, 300);
    const far = sample.filter((c) => Math.abs(Number(c.lng)) > 90).length;
    expect(far).toBeGreaterThan(sample.length / 5);
    const err = inputError(() => readObservations(collection(sample.map((c) => point([Number(c.lat), Number(c.lng)]))), { maxProblems: 1000 }));
    expect(err.total).toBe(far + 1);
    expect(err.problems[0]).toMatchObject({ index: null, code: 'swapped-coordinates' });
    expect(err.problems[0]!.message).toContain(`${far} of ${sample.length} positions`);
  });

  it('makes no whole-input note for a lone swapped pair among many good ones', () => {
    const good = cities(211, 100).map((c) => point([Number(c.lng), Number(c.lat)]));
    const err = inputError(() => readObservations(collection([...good, point([45, 120])])));
    expect(err.total).toBe(1);
    expect(err.problems[0]!.index).toBe(100);
  });
});

describe('GeoJSON: problems with the input as a whole', () => {
  it('empty text, empty collection → empty-input', () => {
    expect(inputError(() => readObservations('  \n')).problems[0]!.code).toBe('empty-input');
    expect(inputError(() => readObservations(collection([]))).problems[0]!.code).toBe('empty-input');
  });

  it('a bare array → not-geojson saying how to wrap it', () => {
    const err = inputError(() => readObservations(JSON.stringify([point([1, 2])])));
    expect(err.problems[0]).toMatchObject({ index: null, code: 'not-geojson' });
    expect(err.problems[0]!.message).toContain('"FeatureCollection"');
  });

  it('other roots → not-geojson', () => {
    for (const root of [{ type: 'Point', coordinates: [1, 2] }, { type: 'Topology' }, { type: 'FeatureCollection', features: {} }, 'text', 12, null]) {
      expect(inputError(() => readObservations(JSON.stringify(root), { format: 'geojson' })).problems[0]!.code).toBe('not-geojson');
    }
  });

  it('too many features → too-many-features before any other check', () => {
    const err = inputError(() => readObservations(collection([point([1, 2]), point([1, 2]), 7]), { maxFeatures: 2 }));
    expect(err.problems).toEqual([expect.objectContaining({ index: null, code: 'too-many-features' })]);
  });

  it('malformed JSON → malformed-json with line, column and offset', () => {
    const text = '{"type":"FeatureCollection",\n "features":[\n  {"type":"Feature",}\n]}';
    const err = inputError(() => readObservations(text));
    expect(err.problems[0]).toMatchObject({ index: null, code: 'malformed-json' });
    // The stray '}' after the trailing comma: line 3 is `  {"type":"Feature",}`, so column 21.
    const offset = text.indexOf('",}') + 2;
    expect(text[offset]).toBe('}');
    expect(err.problems[0]!.message).toContain('line 3, column 21');
    expect(err.problems[0]!.message).toContain(`character ${offset}`);
    // source: V8's own JSON.parse message on Node 20 names the same position
    expect(err.problems[0]!.message).toContain(`at position ${offset}`);
  });
});

describe('GeoJSON: many bad features', () => {
  it('lists every problem up to the cap and counts them all', () => {
    const items = Array.from({ length: 250 }, (_, i) => (i % 2 === 0 ? point([0, 0]) : point([100, 91 + (i % 50)], {}, `f${i}`)));
    const all = inputError(() => readObservations(collection(items), { maxProblems: 1000 }));
    expect(all.total).toBe(125);
    expect(all.problems.length).toBe(125);
    all.problems.forEach((p, k) => {
      expect(p.index).toBe(2 * k + 1);
      expect(p.id).toBe(`f${2 * k + 1}`);
      expect(p.message.startsWith(`feature ${2 * k + 1} (id "f${2 * k + 1}"): `)).toBe(true);
    });
    const capped = inputError(() => readObservations(collection(items)));
    expect(capped.total).toBe(125);
    expect(capped.problems.length).toBe(100);
    expect(capped.problems).toEqual(all.problems.slice(0, 100));
    expect(capped.message).toMatch(/\(and 124 more problems\)$/);
    const small = inputError(() => readObservations(collection(items), { maxProblems: 3 }));
    expect(small.problems.length).toBe(3);
    expect(small.total).toBe(125);
  });

  it('rejects bad options with a RangeError', () => {
    expect(() => readObservations(collection([point([1, 2])]), { maxProblems: 0 })).toThrow(RangeError);
    expect(() => readObservations(collection([point([1, 2])]), { maxFeatures: 1.5 })).toThrow(RangeError);
    expect(() => readObservations(collection([point([1, 2])]), { weightProperty: '' })).toThrow(RangeError);
  });
});
