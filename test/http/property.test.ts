/**
 * Random and malformed input thrown at the endpoints: whatever arrives, the answer is never a
 * 500, always comes (no hang), and every error is a problem+json body valid against the spec.
 */
import fc from 'fast-check';
import type { FastifyInstance } from 'fastify';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { SETTING_NAMES } from '../../src/run/settings.js';
import { expectMatchesSpec, testApp } from './helper.js';

const MEDIA_TYPES = ['application/geo+json', 'application/json', 'text/csv', 'application/geo+json-seq'] as const;
/** runs per property (the fixed examples count among them, so at least 5); raise with ROOST_FC_RUNS for a longer hunt */
const RUNS = Math.max(5, Number(process.env.ROOST_FC_RUNS ?? 40));
/** fixed so every run draws the same cases; ROOST_FC_SEED varies it on purpose */
const SEED = Number(process.env.ROOST_FC_SEED ?? 20261202);
console.log(`test/http/property.test.ts: fast-check seed ${SEED} (set ROOST_FC_SEED to vary), ${RUNS} runs per property`);

const coordinate = fc.oneof(
  fc.double({ min: -200, max: 200, noNaN: true }),
  fc.double({ noDefaultInfinity: true, noNaN: true }),
  fc.constantFrom(0, -0, 180, -180, 90, -90, 1e308),
  fc.string({ maxLength: 6 }),
  fc.constant(null),
);

const geometry = fc.oneof(
  fc.record({ type: fc.constant('Point'), coordinates: fc.array(coordinate, { minLength: 0, maxLength: 4 }) }),
  fc.record({ type: fc.constantFrom('LineString', 'Polygon', 'MultiPoint', 'GeometryCollection', 'point'), coordinates: fc.jsonValue({ maxDepth: 2 }) }),
  fc.constant(null),
  fc.jsonValue({ maxDepth: 2 }),
);

const properties = fc.oneof(
  fc.constant(null),
  fc.record(
    {
      observed_at: fc.oneof(fc.date({ noInvalidDate: true }).map((d) => d.toISOString()), fc.string({ maxLength: 12 }), fc.integer()),
      count: fc.oneof(fc.integer({ min: -5, max: 50 }), fc.double(), fc.string({ maxLength: 3 })),
      kind: fc.constantFrom('a', 'b', 'c'),
    },
    { requiredKeys: [] },
  ),
  fc.jsonValue({ maxDepth: 2 }),
);

/** A point that is always valid, so that many collections reach the clustering itself. */
const goodFeature = fc
  .record({ lon: fc.double({ min: 8.5, max: 8.51, noNaN: true }), lat: fc.double({ min: 47.3, max: 47.31, noNaN: true }), id: fc.oneof(fc.string({ maxLength: 5 }), fc.integer()) })
  .map(({ lon, lat, id }) => ({ type: 'Feature', id, geometry: { type: 'Point', coordinates: [lon, lat] }, properties: { count: 1, kind: 'a' } }));

const feature = fc.oneof(
  { weight: 3, arbitrary: goodFeature },
  { weight: 2, arbitrary: fc.record({ type: fc.constantFrom('Feature', 'feature', 'Point'), id: fc.oneof(fc.string({ maxLength: 5 }), fc.integer(), fc.jsonValue({ maxDepth: 1 })), geometry, properties }, { requiredKeys: ['type'] }) },
  { weight: 1, arbitrary: fc.jsonValue({ maxDepth: 2 }) },
);

/** Collections of valid points only (ids made unique), which must cluster whenever the settings are valid. */
const validCollection = fc.array(goodFeature, { minLength: 1, maxLength: 40 }).map((features) => ({
  type: 'FeatureCollection',
  features: features.map((f, i) => ({ ...f, id: `f${i}` })),
}));

/** A fixed collection of valid points that clusters at eps 300 m, min_points 2. */
const VALID_DOC = {
  type: 'FeatureCollection',
  features: [0, 1, 2].map((i) => ({ type: 'Feature', id: `v${i}`, geometry: { type: 'Point', coordinates: [8.5 + i * 1e-4, 47.3] }, properties: { count: 1, kind: 'a' } })),
};

const collection = fc.oneof(
  { weight: 4, arbitrary: validCollection },
  { weight: 4, arbitrary: fc.record({ type: fc.constant('FeatureCollection'), features: fc.array(feature, { maxLength: 30 }) }) },
  { weight: 1, arbitrary: fc.record({ type: fc.constant('FeatureCollection'), features: fc.array(feature, { maxLength: 10 }), settings: fc.jsonValue({ maxDepth: 2 }) }) },
  { weight: 1, arbitrary: fc.record({ type: fc.jsonValue({ maxDepth: 1 }), features: fc.jsonValue({ maxDepth: 2 }) }, { requiredKeys: [] }) },
  { weight: 1, arbitrary: fc.jsonValue({ maxDepth: 3 }) },
);

/** Text that was JSON, cut, spliced or with bytes flipped. */
const mangled = fc.tuple(collection, fc.nat(), fc.nat(), fc.string({ maxLength: 4 })).map(([doc, a, b, insert]) => {
  const text = JSON.stringify(doc) ?? '';
  const i = text.length ? a % text.length : 0;
  const j = text.length ? b % text.length : 0;
  return text.slice(0, Math.min(i, j)) + insert + text.slice(Math.max(i, j));
});

const cell = fc.oneof(fc.double({ min: -200, max: 200, noNaN: true }).map(String), fc.string({ maxLength: 8 }), fc.constantFrom('', '"', '""', '"a,b"', 'NaN', '1e400', '\r'));
const validCsv = fc
  .array(fc.tuple(fc.double({ min: -179, max: 179, noNaN: true }), fc.double({ min: -89, max: 89, noNaN: true }), fc.nat(20)), { minLength: 1, maxLength: 30 })
  .map((rows) => ['lon,lat,count', ...rows.map(([x, y, c]) => `${x},${y},${c}`)].join('\n'));

const randomCsv = fc
  .tuple(
    fc.subarray(['longitude', 'latitude', 'lon', 'lat', 'x', 'y', 'id', 'observed_at', 'count', 'Lng', 'LAT'], { minLength: 0, maxLength: 5 }),
    fc.array(fc.array(cell, { minLength: 0, maxLength: 6 }), { maxLength: 25 }),
    fc.constantFrom(',', ';', '\t', '|'),
    fc.constantFrom('\n', '\r\n'),
  )
  .map(([header, rows, sep, eol]) => [header.join(sep), ...rows.map((r) => r.join(sep))].join(eol));

const csv = fc.oneof(validCsv, randomCsv);

const sequence = fc
  .tuple(fc.array(fc.oneof(goodFeature.map((f) => JSON.stringify(f)), feature.map((f) => JSON.stringify(f) ?? 'null'), fc.string({ maxLength: 10 })), { maxLength: 20 }), fc.boolean())
  .map(([records, rs]) => records.map((r) => (rs ? `\u001e${r}\n` : `${r}\n`)).join(''));

const settingValue = fc.oneof(
  fc.double({ noNaN: false }).map(String),
  fc.integer({ min: -10, max: 2000 }).map(String),
  fc.constantFrom('auto', 'dbscan', 'optics', 'convex', 'concave', 'eps', 'xi', '', 'kind=a', '2026-04-01T00:00:00Z', 'count'),
  fc.string({ maxLength: 10 }),
);
const randomQuery = fc
  .array(fc.tuple(fc.oneof({ weight: 4, arbitrary: fc.constantFrom(...SETTING_NAMES, 'layer') }, { weight: 1, arbitrary: fc.string({ maxLength: 8 }) }), settingValue), { maxLength: 6 })
  .map((pairs) => {
    // eps is present most of the time, so clustering is reached often
    const params = new URLSearchParams([['eps', '300'], ...pairs]);
    return params.toString();
  });
const query = fc.oneof(fc.constantFrom('eps=300', 'eps=50&min_points=2', 'eps=auto&min_points=3', 'eps=300&method=optics&optics_extraction=xi'), randomQuery);

describe('random and malformed input', { timeout: 300_000 }, () => {
  let app: FastifyInstance;
  beforeAll(async () => {
    app = await testApp({ workers: 1, queueSize: 2 });
  });
  afterAll(async () => {
    await app.close();
  });

  /** The generators reach both the clustering (200) and the checks (4xx); otherwise they test little. */
  const expectBoth = (key: string): void => {
    const statuses = [...(seen.get(key) ?? [])];
    expect(statuses.some((s) => s === 200), `${key}: ${statuses.join(',')}`).toBe(true);
    expect(statuses.some((s) => s >= 400), `${key}: ${statuses.join(',')}`).toBe(true);
  };

  const seen = new Map<string, Set<number>>();
  const check = async (url: string, contentType: string, payload: string | Buffer): Promise<void> => {
    const res = await app.inject({ method: 'POST', url, headers: { 'content-type': contentType }, payload });
    const key = `${url.split('?')[0]} ${contentType}`;
    if (!seen.has(key)) seen.set(key, new Set());
    seen.get(key)!.add(res.statusCode);
    if (res.statusCode >= 500) throw new Error(`${res.statusCode} for ${url} ${contentType} ${String(payload).slice(0, 200)}: ${res.body.slice(0, 300)}`);
    expectMatchesSpec(res, url.split('?')[0]!, 'POST');
  };

  it('GeoJSON-like documents, whole or mangled, with random settings', async () => {
    await fc.assert(
      fc.asyncProperty(fc.oneof(collection.map((d) => JSON.stringify(d) ?? 'null'), mangled), query, fc.constantFrom('/v1/cluster', '/v1/k-distance'), async (body, q, path) => {
        const url = path === '/v1/k-distance' ? `${path}?${q.replace(/(^|&)(eps|layer)=[^&]*/g, '')}` : `${path}?${q}`;
        await check(url, 'application/geo+json', body);
      }),
      // the examples reach the clustering whatever the random draws (a 200 on each path)
      { numRuns: RUNS, seed: SEED, examples: [[JSON.stringify(VALID_DOC), 'eps=300&min_points=2', '/v1/cluster'], [JSON.stringify(VALID_DOC), 'min_points=2', '/v1/k-distance'], ['{"type":', 'eps=300', '/v1/cluster'], ['{"type":', 'min_points=2', '/v1/k-distance']] },
    );
    expectBoth('/v1/cluster application/geo+json');
    expectBoth('/v1/k-distance application/geo+json');
  });

  it('CSV of random headers, cells and delimiters', async () => {
    await fc.assert(
      fc.asyncProperty(csv, fc.constantFrom('', '&min_points=2', '&lon_column=x&lat_column=y', '&weight=count'), async (body, extra) => {
        await check(`/v1/cluster?eps=500${extra}`, 'text/csv', body);
      }),
      { numRuns: RUNS, seed: SEED + 1, examples: [['lon,lat,count\n8.5,47.3,1\n8.5001,47.3001,2', '&min_points=2'], ['lon,lat\n8.5,not-a-number', '']] },
    );
    expectBoth('/v1/cluster text/csv');
  });

  it('GeoJSON text sequences with broken records', async () => {
    await fc.assert(
      fc.asyncProperty(sequence, async (body) => {
        await check('/v1/cluster?eps=500&min_points=2', 'application/geo+json-seq', body);
      }),
      { numRuns: RUNS, seed: SEED + 2, examples: [[VALID_DOC.features.map((f) => `\u001e${JSON.stringify(f)}\n`).join('')], ['{"type":']] },
    );
    expectBoth('/v1/cluster application/geo+json-seq');
  });

  it('arbitrary bytes under every accepted media type', async () => {
    await fc.assert(
      fc.asyncProperty(fc.uint8Array({ maxLength: 300 }), fc.constantFrom(...MEDIA_TYPES), fc.constantFrom('/v1/cluster?eps=100', '/v1/k-distance'), async (bytes, type, url) => {
        await check(url, type, Buffer.from(bytes));
      }),
      { numRuns: RUNS, seed: SEED + 3 },
    );
  });
});
