import { describe, expect, it } from 'vitest';
import {
  bboxOf, bboxOfPositions, COORDINATE_DECIMALS, coordText, featureCollectionChunks, featureCollectionString,
  featureString, roundCoord, writeCoord, type GeometryLike,
} from '../../src/geometry/geojson.js';
import { hotspotHull, type HullGeometry } from '../../src/geometry/hull.js';
// source: geojson-schema package (GeoJSON JSON Schemas), see test/reference/geojson-schema.ts
import { validateCollection } from '../reference/geojson-schema.js';
import { discPositions, rng } from '../reference/seeded.js';



/** Hulls of the awkward kinds: mid-latitude, across ±180°, around a pole, single member. */
function sampleHulls(): HullGeometry[] {
  const a = discPositions(1, 300, 8.5, 47, 2_000);
  const b = discPositions(2, 300, 180, 65, 3_000);
  const c = discPositions(3, 300, 0, 90, 10_000);
  return [
    hotspotHull(a.lon, a.lat, { bufferMeters: 50 }),
    hotspotHull(b.lon, b.lat, { bufferMeters: 50 }),
    hotspotHull(c.lon, c.lat, { bufferMeters: 50 }),
    hotspotHull([-0.1276], [51.5072], { bufferMeters: 125 }),
    hotspotHull(a.lon, a.lat, { kind: 'concave', bufferMeters: 50 }),
  ];
}

function shoelace(ring: number[][]): number {
  let s = 0;
  for (let i = 0; i + 1 < ring.length; i++) s += ring[i][0] * ring[i + 1][1] - ring[i + 1][0] * ring[i][1];
  return s / 2;
}

describe('coordinates', () => {
  it('rounds to COORDINATE_DECIMALS and prints the shortest text', () => {
    expect(COORDINATE_DECIMALS).toBeGreaterThanOrEqual(6); // product contract: at least 6 decimals
    expect(coordText(1.5)).toBe('1.5');
    expect(coordText(1.50000001)).toBe('1.5');
    expect(coordText(-0)).toBe('0');
    expect(coordText(-1e-9)).toBe('0');
    expect(coordText(180)).toBe('180');
    expect(coordText(-33.123456789)).toBe('-33.1234568');
    expect(Object.is(roundCoord(-1e-12), 0)).toBe(true);
    expect(() => coordText(NaN)).toThrow(/finite/);
  });

  it('stays within half a unit of the last decimal and reads back exactly', () => {
    const r = rng(40);
    let bad = 0;
    for (let k = 0; k < 20_000; k++) {
      const x = (r.next() - 0.5) * 360;
      const text = coordText(x);
      const back = Number(text);
      // source: RFC 7946 §11.2 (precision) — the written value is x to 7 decimals
      if (Math.abs(back - x) > 0.5e-7 + 1e-12) bad++;
      if ((text.split('.')[1] ?? '').length > COORDINATE_DECIMALS) bad++;
      if (coordText(back) !== text) bad++;
    }
    expect(bad).toBe(0);
  });

  it('writeCoord writes the bytes of coordText, on random and awkward values', () => {
    const seed = Number(process.env.ROOST_SEED ?? 41);
    console.info(`writeCoord seed ${seed} (ROOST_SEED)`);
    const r = rng(seed);
    const values = [0, -0, 1e-9, -1e-9, 5e-8, -5e-8, 4.9999999e-8, 1, -1, 10, 180, -180, 90.00000005, 1.5, 0.1, 0.0000001, -0.0000001, 99.9999999, 99.99999995, 8848.86, -10994, 1e8, 9e8 + 0.5, 2 ** 53 / 1e7, 1e15, -1e20, 1e300];
    for (let k = 0; k < 50_000; k++) {
      const scale = 10 ** Math.floor(r.next() * 12 - 8);
      let x = (r.next() - 0.5) * 2 * scale;
      // values on and near the rounding edges, and with few decimals
      if (k % 3 === 0) x = Math.round(x * 1e7) / 1e7 + (k % 2 === 0 ? 5e-8 : 0);
      values.push(x);
    }
    const out = new Uint8Array(64);
    const bad: number[] = [];
    for (const x of values) {
      const end = writeCoord(out, 3, x);
      if (Buffer.from(out.subarray(3, end)).toString('latin1') !== coordText(x)) bad.push(x);
    }
    expect(bad).toEqual([]);
    expect(() => writeCoord(out, 0, Infinity)).toThrow(/finite/);
  });
});

describe('featureString', () => {
  it('writes a Feature with rounded coordinates, id, properties and no crs', () => {
    const text = featureString({ type: 'Point', coordinates: [12.345678912, -0.00000001] }, { n: 3, name: 'a "b"' }, 7);
    expect(text).toBe('{"type":"Feature","id":7,"geometry":{"type":"Point","coordinates":[12.3456789,0]},"properties":{"n":3,"name":"a \\"b\\""}}');
    expect(text).not.toContain('crs');
    expect(JSON.parse(featureString(null, null, 'x'))).toEqual({ type: 'Feature', id: 'x', geometry: null, properties: null });
    expect(JSON.parse(featureString({ type: 'Point', coordinates: [1, 2, 3.25] }, {}))).toEqual({ type: 'Feature', geometry: { type: 'Point', coordinates: [1, 2, 3.25] }, properties: {} });
    expect(() => featureString(null, null, NaN)).toThrow(/id/);
  });

  it('drops positions that rounding makes equal to the previous one', () => {
    const ring = [[0, 0], [1, 0], [1, 0.00000001], [1, 1], [0, 1], [0, 0]];
    const g = JSON.parse(featureString({ type: 'Polygon', coordinates: [ring] }, null)).geometry;
    expect(g.coordinates[0]).toEqual([[0, 0], [1, 0], [1, 1], [0, 1], [0, 0]]);
  });

  it('refuses a ring that rounding collapses', () => {
    const tiny = [[0, 0], [1e-9, 0], [0, 1e-9], [0, 0]];
    expect(() => featureString({ type: 'Polygon', coordinates: [tiny] }, null)).toThrow(/at least 4 positions/);
  });
});

describe('featureCollectionString and featureCollectionChunks', () => {
  it('write hull collections that pass the GeoJSON schema and the RFC 7946 ring rules', () => {
    const hulls = sampleHulls();
    const features = hulls.map((g, i) => featureString(g, { hotspot_id: i + 1, area_km2: 1.25 }, i + 1));
    const text = featureCollectionString(features, bboxOf(hulls), { run: 'nightly' });
    const doc = JSON.parse(text);
    // source: geojson-schema package (GeoJSON JSON Schemas)
    expect(validateCollection(doc), JSON.stringify(validateCollection.errors)).toBe(true);
    expect(Object.keys(doc)).toEqual(['type', 'bbox', 'run', 'features']);
    expect(text).not.toContain('"crs"');
    for (const f of doc.features) {
      const polys: number[][][][] = f.geometry.type === 'Polygon' ? [f.geometry.coordinates] : f.geometry.coordinates;
      for (const ring of polys.flat()) {
        // source: RFC 7946 §3.1.6 — rings closed, exterior counter-clockwise
        expect(ring[ring.length - 1]).toEqual(ring[0]);
        expect(shoelace(ring)).toBeGreaterThan(0);
        for (let i = 0; i + 1 < ring.length; i++) expect(ring[i]).not.toEqual(ring[i + 1]);
      }
    }
  });

  it('stream the same text in bounded chunks', () => {
    const features: string[] = [];
    const r = rng(41);
    for (let i = 0; i < 5_000; i++) features.push(featureString({ type: 'Point', coordinates: [r.next() * 10, r.next() * 10] }, { i }, i));
    const whole = featureCollectionString(features, [0, 0, 10, 10]);
    const chunks = [...featureCollectionChunks(features, [0, 0, 10, 10], undefined, 4_096)];
    expect(chunks.join('')).toBe(whole);
    expect(chunks.length).toBeGreaterThan(10);
    const longest = Math.max(...features.map((f) => f.length));
    for (const c of chunks) expect(c.length).toBeLessThan(4_096 + longest + 2);
    // source: geojson-schema package (GeoJSON JSON Schemas)
    expect(validateCollection(JSON.parse(whole))).toBe(true);
    expect(featureCollectionString([], null)).toBe('{"type":"FeatureCollection","features":[]}');
  });

  it('refuse foreign members that would clash with GeoJSON members', () => {
    expect(() => featureCollectionString([], null, { crs: {} })).toThrow(/crs/);
    expect(() => featureCollectionString([], null, { features: [] })).toThrow(/features/);
    expect(() => featureCollectionString([], [1, 2, 3])).toThrow(/bbox/);
  });
});

describe('bboxOf', () => {
  it('is west, south, east, north of the positions', () => {
    expect(bboxOf([{ type: 'Point', coordinates: [3, 4] }, { type: 'LineString', coordinates: [[-1, 2], [5, -6]] }])).toEqual([-1, -6, 5, 4]);
    expect(bboxOf([])).toBeNull();
    expect(bboxOf([null])).toBeNull();
    expect(bboxOfPositions([], [])).toBeNull();
  });

  it('crosses the antimeridian (west > east) when that box is smaller', () => {
    // source: RFC 7946 §5.2 — a bbox crossing the antimeridian has west > east
    expect(bboxOfPositions([179, -179.5, 178.5], [1, 2, 3])).toEqual([178.5, 1, -179.5, 3]);
    const b = discPositions(2, 300, 180, 65, 3_000);
    const g = hotspotHull(b.lon, b.lat, { bufferMeters: 50 });
    const box = bboxOf([g]);
    if (!box) throw new Error('expected a box');
    expect(box[0]).toBeGreaterThan(box[2]);
    expect(box[0]).toBeGreaterThan(179.9);
    expect(box[2]).toBeLessThan(-179.9);
    // Every position of the hull lies in the box read the §5.2 way.
    const polys = g.type === 'Polygon' ? [g.coordinates] : g.coordinates;
    for (const p of polys.flat(2)) {
      expect(p[0] >= box[0] || p[0] <= box[2]).toBe(true);
      expect(p[1] >= box[1] && p[1] <= box[3]).toBe(true);
    }
  });

  it('keeps the plain box for wide polygons whose edges span the middle', () => {
    const wide: GeometryLike = { type: 'Polygon', coordinates: [[[-100, 0], [100, 0], [100, 10], [-100, 10], [-100, 0]]] };
    expect(bboxOf([wide])).toEqual([-100, 0, 100, 10]);
    // The same longitudes as bare points are best covered across the antimeridian.
    expect(bboxOfPositions([-100, 100], [0, 10])).toEqual([100, 0, -100, 10]);
  });

  it('spans all longitudes for a hull around a pole', () => {
    const c = discPositions(3, 300, 0, 90, 10_000);
    const box = bboxOf([hotspotHull(c.lon, c.lat, { bufferMeters: 50 })]);
    // source: RFC 7946 §5.3 — a bbox containing a pole spans −180..180 and reaches ±90
    expect(box?.[0]).toBe(-180);
    expect(box?.[2]).toBe(180);
    expect(box?.[3]).toBe(90);
  });

  it('places points on ±180 on the nearer edge', () => {
    expect(bboxOfPositions([175, -180, 170], [0, 0, 0])).toEqual([170, 0, 180, 0]);
    expect(bboxOfPositions([-175, 180, -170], [0, 0, 0])).toEqual([-180, 0, -170, 0]);
  });
});
