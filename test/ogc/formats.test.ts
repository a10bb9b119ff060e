/**
 * The result layers as FlatGeobuf and CSV, read back by GDAL (ogrinfo, ogr2ogr): the same
 * number of features and the same field values as the GeoJSON layer, the same field types from a
 * run with whole values as from one with fractional values, chosen by `f=` or by `Accept`.
 *
 * source: GDAL FlatGeobuf and CSV driver documentation (gdal.org/drivers/vector/flatgeobuf.html,
 * csv.html: X_POSSIBLE_NAMES, Y_POSSIBLE_NAMES, GEOM_POSSIBLE_NAMES, AUTODETECT_TYPE,
 * EMPTY_STRING_AS_NULL open options); GDAL 3.6 as packaged by Debian (gdal-bin); RFC 4180 (CSV).
 */
import { mkdtempSync, readFileSync, rmSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import type { FastifyInstance } from 'fastify';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { buildApp } from '../../src/http/app.js';
import { csvLines, layerColumns, wkt } from '../../src/ogc/formats.js';
import { gdal, gdalSkipReason } from '../reference/gdal.js';
import { pointsCollection, testConfig } from '../http/helper.js';

const skipReason = await gdalSkipReason();
const GEO = { 'content-type': 'application/geo+json' };
const JSON_TYPE = { 'content-type': 'application/json' };
const LAYERS = ['hotspots', 'centres', 'noise', 'points'] as const;

type Feature = { id?: string | number; geometry: { type: string; coordinates: unknown } | null; properties: Record<string, unknown> };

/** GDAL's field list from `ogrinfo -so`: name → type. */
function fieldTypes(ogrinfo: string): Record<string, string> {
  const out: Record<string, string> = {};
  for (const m of ogrinfo.matchAll(/^(\S[^:\n]*): (\w+(?:\(\w+\))?) \(/gm)) {
    if (['Layer name', 'Geometry', 'Feature Count', 'Extent', 'Layer SRS WKT', 'Data axis to CRS axis mapping', 'FID Column', 'Geometry Column'].includes(m[1]!)) continue;
    out[m[1]!] = m[2]!;
  }
  return out;
}

/** A value as GDAL gives it back in GeoJSON: date-times in its own writing, compared as instants. */
function comparable(v: unknown): unknown {
  if (typeof v === 'string' && /^\d{4}[-/]\d{2}[-/]\d{2}[T ]\d{2}:\d{2}/.test(v)) return new Date(v.replace(/\//g, '-').replace(' ', 'T').replace(/\+00$/, 'Z')).getTime();
  return v;
}

describe('layer formats: unit', () => {
  it('writes WKT of every geometry kind a layer holds (OGC 06-103r4 §7 examples)', () => {
    expect(wkt({ type: 'Point', coordinates: [8.5, 47.25] })).toBe('POINT (8.5 47.25)');
    expect(wkt({ type: 'Polygon', coordinates: [[[0, 0], [1, 0], [1, 1], [0, 0]]] })).toBe('POLYGON ((0 0, 1 0, 1 1, 0 0))');
    expect(wkt({ type: 'MultiPolygon', coordinates: [[[[0, 0], [1, 0], [1, 1], [0, 0]]], [[[5, 5], [6, 5], [6, 6], [5, 5]]]] })).toBe('MULTIPOLYGON (((0 0, 1 0, 1 1, 0 0)), ((5 5, 6 5, 6 6, 5 5)))');
    expect(wkt({ type: 'LineString', coordinates: [[0, 0], [1, 1]] })).toBe('LINESTRING (0 0, 1 1)');
  });

  it('quotes CSV cells as RFC 4180 says, writes reals with a decimal point and nested values as JSON', () => {
    const features: Feature[] = [
      { id: 'a,1', geometry: { type: 'Point', coordinates: [1, 2] }, properties: { note: 'say "hi"\nthen go', ratio: 1, tags: ['x', 'y'], n: 3 } },
      { id: 'b', geometry: { type: 'Point', coordinates: [3.5, -4] }, properties: { note: null, ratio: 0.5, tags: null, n: 4 } },
    ];
    const columns = layerColumns(features, null);
    expect(columns).toEqual([
      { name: 'id', type: 'string' },
      { name: 'note', type: 'string' },
      { name: 'ratio', type: 'real' },
      { name: 'tags', type: 'json' },
      { name: 'n', type: 'integer' },
    ]);
    expect([...csvLines(features, columns)].join('')).toBe('lon,lat,id,note,ratio,tags,n\r\n1,2,"a,1","say ""hi""\nthen go",1.0,"[""x"",""y""]",3\r\n3.5,-4,b,,0.5,,4\r\n');
  });
});

describe.skipIf(skipReason !== null)(`layer formats read back by GDAL${skipReason ? ` (skipped: ${skipReason})` : ''}`, () => {
  let app: FastifyInstance;
  let dir: string;

  async function waitForRun(location: string): Promise<void> {
    for (;;) {
      const run = (await app.inject({ method: 'GET', url: location })).json() as { status: string; error: string | null };
      if (run.status === 'succeeded') return;
      if (run.status !== 'queued' && run.status !== 'running') throw new Error(`run ${run.status}: ${run.error}`);
      await new Promise((r) => setTimeout(r, 50));
    }
  }

  async function dataset(id: string, settings: Record<string, unknown>, body: string): Promise<void> {
    expect((await app.inject({ method: 'POST', url: '/v1/datasets', headers: JSON_TYPE, payload: JSON.stringify({ id, settings }) })).statusCode).toBe(201);
    expect((await app.inject({ method: 'POST', url: `/v1/datasets/${id}/observations`, headers: GEO, payload: body })).statusCode).toBe(200);
    const run = await app.inject({ method: 'POST', url: `/v1/datasets/${id}/runs` });
    await waitForRun(run.headers.location as string);
  }

  beforeAll(async () => {
    dir = mkdtempSync(join(tmpdir(), 'roost-formats-'));
    app = await buildApp({ config: testConfig({ workers: 1 }), logger: false });
    await app.ready();
    await dataset('survey', { eps: 60, min_points: 5, count_by: 'kind' }, pointsCollection(1500, 21));
    const weighted = JSON.parse(pointsCollection(1500, 22)) as { features: { properties: Record<string, unknown> }[] };
    weighted.features.forEach((f, i) => (f.properties.birds = 0.5 + (i % 7) * 0.25));
    await dataset('weighted', { eps: 60, min_points: 5, count_by: 'kind', weight: 'birds' }, JSON.stringify(weighted));
  }, 180_000);

  afterAll(async () => {
    await app?.close();
    if (dir) rmSync(dir, { recursive: true, force: true });
  });

  const geojson = async (ds: string, layer: string, query = ''): Promise<Feature[]> => {
    const res = await app.inject({ method: 'GET', url: `/v1/datasets/${ds}/runs/latest/${layer}${query}` });
    expect(res.statusCode, res.body).toBe(200);
    return (res.json() as { features: Feature[] }).features;
  };

  /** Fetches a layer in a format into a file and has GDAL turn it back into GeoJSON. */
  async function readBack(ds: string, layer: string, format: 'fgb' | 'csv', query = ''): Promise<{ features: Feature[]; types: Record<string, string>; count: number }> {
    const res = await app.inject({ method: 'GET', url: `/v1/datasets/${ds}/runs/latest/${layer}?f=${format}${query}` });
    expect(res.statusCode, res.body).toBe(200);
    const file = join(dir, `${ds}-${layer}${query.replace(/\W/g, '_')}.${format}`);
    writeFileSync(file, res.rawPayload);
    const oo =
      format === 'csv'
        ? ['-oo', 'AUTODETECT_TYPE=YES', '-oo', 'EMPTY_STRING_AS_NULL=YES', '-oo', 'KEEP_GEOM_COLUMNS=NO', ...(layer === 'hotspots' ? ['-oo', 'GEOM_POSSIBLE_NAMES=wkt'] : ['-oo', 'X_POSSIBLE_NAMES=lon', '-oo', 'Y_POSSIBLE_NAMES=lat'])]
        : [];
    const info = await gdal('ogrinfo', ['-ro', '-so', '-al', ...oo, file]);
    const count = Number(/Feature Count: (\d+)/.exec(info.stdout)?.[1] ?? NaN);
    const out = join(dir, `${ds}-${layer}${query.replace(/\W/g, '_')}.${format}.json`);
    const { stderr } = await gdal('ogr2ogr', ['-f', 'GeoJSON', ...oo, out, file]);
    expect(stderr, `${ds} ${layer} ${format}`).toBe('');
    return { features: (JSON.parse(readFileSync(out, 'utf8')) as { features: Feature[] }).features, types: fieldTypes(info.stdout), count };
  }

  function expectSameFeatures(got: Feature[], want: Feature[], what: string): void {
    expect(got.length, what).toBe(want.length);
    for (let k = 0; k < want.length; k++) {
      const w = want[k]!;
      const g = got[k]!;
      const props: Record<string, unknown> = { ...w.properties };
      if (w.id !== undefined && !('hotspot_id' in props && props.hotspot_id === w.id && what.match(/hotspots|centres/))) props.id = String(w.id);
      for (const [name, value] of Object.entries(props)) {
        const back = g.properties[name];
        if (typeof value === 'number') expect(back, `${what} #${k} ${name}`).toBe(value);
        else expect(comparable(back ?? null), `${what} #${k} ${name}`).toEqual(comparable(value));
      }
      if (w.geometry?.type === 'Point') {
        const [x, y] = w.geometry.coordinates as number[];
        const [gx, gy] = g.geometry!.coordinates as number[];
        expect(gx, `${what} #${k} lon`).toBeCloseTo(x!, 9);
        expect(gy, `${what} #${k} lat`).toBeCloseTo(y!, 9);
      } else {
        expect(g.geometry?.type, `${what} #${k} geometry`).toBe(w.geometry?.type);
        expect(JSON.stringify(g.geometry?.coordinates).length, `${what} #${k} geometry`).toBeGreaterThan(10);
      }
    }
  }

  it('FlatGeobuf: GDAL reads every layer with the same features, field values and positions as the GeoJSON', async () => {
    for (const layer of LAYERS) {
      const want = await geojson('survey', layer);
      expect(want.length, layer).toBeGreaterThan(0);
      const back = await readBack('survey', layer, 'fgb');
      expect(back.count, layer).toBe(want.length);
      expectSameFeatures(back.features, want, `fgb ${layer}`);
    }
  }, 120_000);

  it('CSV: GDAL reads every layer (lon,lat points; hulls as WKT) with the same features and field values as the GeoJSON', async () => {
    for (const layer of LAYERS) {
      const want = await geojson('survey', layer);
      const back = await readBack('survey', layer, 'csv');
      expect(back.count, layer).toBe(want.length);
      expectSameFeatures(back.features, want, `csv ${layer}`);
    }
  }, 120_000);

  it('keeps the field types from a run with whole values to one with fractional values, in both formats', async () => {
    for (const format of ['fgb', 'csv'] as const) {
      for (const layer of ['hotspots', 'centres'] as const) {
        const whole = await readBack('survey', layer, format);
        const fractional = await readBack('weighted', layer, format);
        const weights = (await geojson('survey', layer)).map((f) => f.properties.weight as number);
        expect(weights.every((w) => Number.isInteger(w)), 'the unweighted run has whole weights').toBe(true);
        expect(whole.types, `${format} ${layer}`).toEqual(fractional.types);
        expect(whole.types['weight'], `${format} ${layer}`).toBe('Real');
        expect(whole.types['count'], `${format} ${layer}`).toBe('Integer');
        expect(whole.types['medoid_id'], `${format} ${layer}`).toBe('String');
      }
    }
  }, 120_000);

  it('takes bbox and limit like the GeoJSON address, with a Link to the next page', async () => {
    const q = '&bbox=8.53,47.36,8.58,47.41&limit=50';
    const want = await geojson('survey', 'points', `?${q.slice(1)}`);
    expect(want.length).toBe(50);
    const back = await readBack('survey', 'points', 'fgb', q);
    expectSameFeatures(back.features, want, 'fgb points page');
    const res = await app.inject({ method: 'GET', url: `/v1/datasets/survey/runs/latest/points?f=csv${q}` });
    expect(res.headers['link']).toMatch(/<\/v1\/datasets\/survey\/runs\/latest\/points\?.*cursor=50.*>; rel="next"/);
    expect(Number(res.headers['x-roost-number-matched'])).toBeGreaterThan(50);
  }, 60_000);

  it('the changes layer: GDAL types every field the same whether the ratios came out whole or not', async () => {
    // 'same' runs twice on the same data: every survival's ratios are exactly 1 and nothing moved;
    // 'grown' gets more observations between its runs, so its ratios are fractional
    const again = async (ds: string): Promise<void> => {
      const run = await app.inject({ method: 'POST', url: `/v1/datasets/${ds}/runs` });
      await waitForRun(run.headers.location as string);
    };
    await dataset('same', { eps: 60, min_points: 5 }, pointsCollection(800, 31));
    await again('same');
    await dataset('grown', { eps: 60, min_points: 5 }, pointsCollection(800, 32));
    const more = JSON.parse(pointsCollection(300, 33)) as { features: { id: string }[] };
    more.features.forEach((f) => (f.id = `more-${f.id}`));
    expect((await app.inject({ method: 'POST', url: '/v1/datasets/grown/observations', headers: GEO, payload: JSON.stringify(more) })).statusCode).toBe(200);
    await again('grown');
    const types: Record<string, Record<string, string>> = {};
    for (const ds of ['same', 'grown']) {
      const res = await app.inject({ method: 'GET', url: `/v1/datasets/${ds}/changes?format=geojson` });
      expect(res.statusCode, res.body).toBe(200);
      const fc = res.json() as { features: Feature[] };
      const survivals = fc.features.filter((f) => f.properties.transition === 'survival');
      expect(survivals.length, ds).toBeGreaterThan(0);
      if (ds === 'same') {
        expect(survivals.every((f) => f.properties.count_ratio === 1 && f.properties.moved_m === 0), ds).toBe(true);
        // written as reals: 1.0, not 1
        expect(res.body).toContain('"count_ratio":1.0');
      } else expect(survivals.some((f) => !Number.isInteger(f.properties.count_ratio)), ds).toBe(true);
      // every feature has the same fields, whatever its transition
      const names = new Set(fc.features.map((f) => Object.keys(f.properties).join(',')));
      expect(names.size, ds).toBe(1);
      const file = join(dir, `${ds}-changes.geojson`);
      writeFileSync(file, res.body);
      types[ds] = fieldTypes((await gdal('ogrinfo', ['-ro', '-so', '-al', file])).stdout);
    }
    expect(types['same']).toEqual(types['grown']);
    for (const f of ['count_ratio', 'density_ratio', 'moved_m', 'area_delta_km2', 'count_delta', 'area_km2', 'centre_lon']) expect(types['same']![f], f).toBe('Real');
    expect(types['same']!['from_track_ids']).toBe('String');
    expect(types['same']!['shrink']).toBe('Integer(Boolean)');
  }, 180_000);

  it('OGC API items as FlatGeobuf and CSV: GDAL reads the page with the features and values of the GeoJSON page', async () => {
    for (const [coll, format] of [['survey.points', 'fgb'], ['survey.hotspots', 'csv'], ['survey.observations', 'csv'], ['survey.observations', 'fgb']] as const) {
      const page = await app.inject({ method: 'GET', url: `/features/collections/${coll}/items?limit=300` });
      expect(page.statusCode, page.body).toBe(200);
      const want = (page.json() as { features: Feature[] }).features;
      const res = await app.inject({ method: 'GET', url: `/features/collections/${coll}/items?limit=300&f=${format}` });
      expect(res.statusCode, res.body).toBe(200);
      expect(res.headers['content-type']).toMatch(format === 'fgb' ? /^application\/flatgeobuf/ : /^text\/csv/);
      const file = join(dir, `${coll}.${format}`);
      writeFileSync(file, res.rawPayload);
      const oo = format === 'csv' ? ['-oo', 'AUTODETECT_TYPE=YES', '-oo', 'EMPTY_STRING_AS_NULL=YES', '-oo', 'KEEP_GEOM_COLUMNS=NO', ...(coll.endsWith('hotspots') ? ['-oo', 'GEOM_POSSIBLE_NAMES=wkt'] : ['-oo', 'X_POSSIBLE_NAMES=lon', '-oo', 'Y_POSSIBLE_NAMES=lat'])] : [];
      const out = `${file}.json`;
      const { stderr } = await gdal('ogr2ogr', ['-f', 'GeoJSON', ...oo, out, file]);
      expect(stderr, coll).toBe('');
      expectSameFeatures((JSON.parse(readFileSync(out, 'utf8')) as { features: Feature[] }).features, want, `items ${coll} ${format}`);
      if (want.length === 300) expect(res.headers['link'], coll).toMatch(new RegExp(`/features/collections/${coll.replace('.', '\\.')}/items\\?.*f=${format}.*>; rel="next"`));
    }
    const byAccept = await app.inject({ method: 'GET', url: '/features/collections/survey.centres/items', headers: { accept: 'text/csv' } });
    expect(byAccept.headers['content-type']).toMatch(/^text\/csv/);
    expect(byAccept.body.split('\r\n')[0]).toMatch(/^lon,lat,hotspot_id,/);
    // the answer depends on Accept, so a shared cache must key on it (RFC 9110 §12.5.5)
    expect(byAccept.headers['vary']).toMatch(/(^|,\s*)Accept(\s*,|$)/);
  }, 120_000);

  it('is chosen by Accept as by f, and says so in Content-Type; a conditional GET is answered 304', async () => {
    const byF = await app.inject({ method: 'GET', url: '/v1/datasets/survey/runs/latest/centres?f=fgb' });
    const byAccept = await app.inject({ method: 'GET', url: '/v1/datasets/survey/runs/latest/centres', headers: { accept: 'application/flatgeobuf' } });
    expect(byAccept.headers['content-type']).toBe('application/flatgeobuf');
    expect(Buffer.compare(byAccept.rawPayload, byF.rawPayload)).toBe(0);
    expect(byAccept.headers['vary']).toMatch(/(^|,\s*)Accept(\s*,|$)/);
    const csv = await app.inject({ method: 'GET', url: '/v1/datasets/survey/runs/latest/centres', headers: { accept: 'text/csv, application/geo+json;q=0.5' } });
    expect(csv.headers['content-type']).toMatch(/^text\/csv/);
    expect(csv.body.split('\r\n')[0]).toMatch(/^lon,lat,hotspot_id,/);
    const again = await app.inject({ method: 'GET', url: '/v1/datasets/survey/runs/latest/centres?f=fgb', headers: { 'if-none-match': String(byF.headers['etag']) } });
    expect(again.statusCode).toBe(304);
    const bad = await app.inject({ method: 'GET', url: '/v1/datasets/survey/runs/latest/centres?f=shp' });
    expect(bad.statusCode).toBe(400);
    expect(bad.headers['content-type']).toMatch(/^application\/problem\+json/);
    expect(bad.json().parameter).toBe('f');
  });
});
