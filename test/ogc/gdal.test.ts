/**
 * GDAL, the reader under most desktop GIS, against a running service: it opens /features as an
 * OGC API – Features service (its OAPIF driver), reads every feature of a 10,000-feature
 * collection across pages, applies a bbox, types the fields as the service declares them, and
 * copies every layer into GeoPackage without a warning. The result-layer addresses are read as
 * plain GeoJSON files too, and the field types GDAL infers are the same from run to run whether
 * the values happen to be whole or not.
 *
 * source: GDAL OAPIF and GeoJSON driver documentation (gdal.org/drivers/vector/oapif.html,
 * geojson.html) for what the client requests and how it types fields; GDAL 3.6 as packaged by
 * Debian (gdal-bin).
 */
import { mkdtempSync, readFileSync, rmSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import type { FastifyInstance } from 'fastify';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { buildApp } from '../../src/http/app.js';
import { HOTSPOT_FIELDS } from '../../src/geometry/layer-fields.js';
import { gdal, gdalSkipReason } from '../reference/gdal.js';
import { pointsCollection, testConfig } from '../http/helper.js';

const skipReason = await gdalSkipReason();
const N = 10_000;
const GEO = { 'content-type': 'application/geo+json' };
const JSON_TYPE = { 'content-type': 'application/json' };

/** GDAL's field list from `ogrinfo -so`: name → type ("Real", "Integer", "String", "DateTime"). */
function fieldTypes(ogrinfo: string): Record<string, string> {
  const out: Record<string, string> = {};
  for (const m of ogrinfo.matchAll(/^(\S[^:\n]*): (\w+) \(/gm)) {
    if (['Layer name', 'Geometry', 'Feature Count', 'Extent', 'Layer SRS WKT', 'Data axis to CRS axis mapping', 'FID Column', 'Geometry Column'].includes(m[1]!)) continue;
    out[m[1]!] = m[2]!;
  }
  return out;
}

/** The number of features ogrinfo printed. */
const featureCount = (ogrinfo: string): number => (ogrinfo.match(/^OGRFeature\(/gm) ?? []).length;

async function waitForRun(app: FastifyInstance, location: string): Promise<void> {
  for (;;) {
    const run = (await app.inject({ method: 'GET', url: location })).json() as { status: string; error: string | null };
    if (run.status === 'succeeded') return;
    if (run.status !== 'queued' && run.status !== 'running') throw new Error(`run ${run.status}: ${run.error}`);
    await new Promise((r) => setTimeout(r, 50));
  }
}

describe.skipIf(skipReason !== null)(`GDAL reads the service${skipReason ? ` (skipped: ${skipReason})` : ''}`, () => {
  let app: FastifyInstance;
  let base: string;
  let dir: string;
  const data = pointsCollection(N, 11);
  const input = (JSON.parse(data) as { features: { id: string; geometry: { coordinates: [number, number] } }[] }).features;

  async function dataset(id: string, settings: Record<string, unknown>, body: string, extra: Record<string, unknown> = {}): Promise<void> {
    expect((await app.inject({ method: 'POST', url: '/v1/datasets', headers: JSON_TYPE, payload: JSON.stringify({ id, settings, ...extra }) })).statusCode).toBe(201);
    expect((await app.inject({ method: 'POST', url: `/v1/datasets/${id}/observations`, headers: GEO, payload: body })).statusCode).toBe(200);
    const run = await app.inject({ method: 'POST', url: `/v1/datasets/${id}/runs` });
    await waitForRun(app, run.headers.location as string);
  }

  beforeAll(async () => {
    dir = mkdtempSync(join(tmpdir(), 'roost-gdal-'));
    app = await buildApp({ config: testConfig({ dbPath: join(dir, 'gdal.db'), workers: 1 }), logger: false });
    await app.listen({ host: '127.0.0.1', port: 0 });
    const addr = app.server.address() as { port: number };
    base = `http://127.0.0.1:${addr.port}`;
    await dataset('survey', { eps: 60, min_points: 5, count_by: 'kind' }, data);
    // the same kind of data with fractional weights: weights, densities and radii no longer whole
    const weighted = JSON.parse(pointsCollection(2000, 12)) as { features: { properties: Record<string, unknown> }[] };
    weighted.features.forEach((f, i) => (f.properties.birds = 0.5 + (i % 7) * 0.25));
    await dataset('weighted', { eps: 60, min_points: 5, count_by: 'kind', weight: 'birds' }, JSON.stringify(weighted));
    // ids in a property (id_property), not in the GeoJSON id
    const byProperty = JSON.parse(pointsCollection(400, 13)) as { features: { id?: string; properties: Record<string, unknown> }[] };
    byProperty.features.forEach((f, i) => {
      delete f.id;
      f.properties.obs_id = `obs-${1000 + i}`;
    });
    await dataset('by-property', { eps: 60, min_points: 5 }, JSON.stringify(byProperty), { id_property: 'obs_id' });
  }, 300_000);

  afterAll(async () => {
    await app?.close();
    rmSync(dir, { recursive: true, force: true });
  });

  it('lists the collections of the landing page', async () => {
    const { stdout } = await gdal('ogrinfo', ['-ro', `OAPIF:${base}/features`]);
    for (const ds of ['survey', 'weighted', 'by-property']) {
      for (const kind of ['observations', 'hotspots', 'centres', 'noise', 'points']) expect(stdout).toContain(`: ${ds}.${kind} `);
    }
    expect(stdout).toMatch(/survey\.hotspots .*\(Polygon\)/);
    expect(stdout).toMatch(/survey\.centres .*\(Point\)/);
  });

  it('reads every feature of a 10,000-feature collection across pages, each once', async () => {
    for (const kind of ['observations', 'points']) {
      const { stdout } = await gdal('ogrinfo', ['-ro', '-q', `OAPIF:${base}/features`, `survey.${kind}`, '-fields=YES', '-geom=NO']);
      expect(featureCount(stdout), kind).toBe(N);
      const ids = [...stdout.matchAll(/^ {2}id \(String\) = (\S+)$/gm)].map((m) => m[1]!);
      expect(new Set(ids).size, kind).toBe(N);
      expect(new Set(ids)).toEqual(new Set(input.map((f) => f.id)));
    }
    const summary = await gdal('ogrinfo', ['-ro', '-so', `OAPIF:${base}/features`, 'survey.points']);
    expect(summary.stdout).toContain(`Feature Count: ${N}`);
  }, 300_000);

  it('applies a bbox (-spat): exactly the observations inside it, counted by brute force', async () => {
    const [w, s, e, n] = [8.545, 47.365, 8.575, 47.395];
    const want = input.filter((f) => {
      const [x, y] = f.geometry.coordinates;
      return x >= w && x <= e && y >= s && y <= n;
    });
    expect(want.length).toBeGreaterThan(100);
    expect(want.length).toBeLessThan(N);
    for (const kind of ['observations', 'points']) {
      const { stdout } = await gdal('ogrinfo', ['-ro', '-q', `OAPIF:${base}/features`, `survey.${kind}`, '-spat', String(w), String(s), String(e), String(n), '-geom=NO']);
      expect(featureCount(stdout), kind).toBe(want.length);
    }
  }, 120_000);

  it('types the hotspot fields as the layer declares them', async () => {
    const { stdout } = await gdal('ogrinfo', ['-ro', '-so', `OAPIF:${base}/features`, 'survey.hotspots']);
    const types = fieldTypes(stdout);
    const gdalType = { real: 'Real', integer: 'Integer', string: 'String', datetime: 'DateTime', boolean: 'Integer(Boolean)' } as const;
    for (const f of HOTSPOT_FIELDS) {
      // track_id is set in stored runs; null-only fields would be typed String anyway
      expect(types[f.name], f.name).toBe(gdalType[f.type]);
    }
    expect(types['count_a']).toBe('Integer');
    expect(types['count_b']).toBe('Integer');
  });

  it('infers the same field types from run to run, whether the values are whole or not', async () => {
    const layers = ['hotspots', 'centres'];
    for (const layer of layers) {
      const whole = fieldTypes((await gdal('ogrinfo', ['-ro', '-so', '-al', `${base}/v1/datasets/survey/runs/latest/${layer}`])).stdout);
      const fractional = fieldTypes((await gdal('ogrinfo', ['-ro', '-so', '-al', `${base}/v1/datasets/weighted/runs/latest/${layer}`])).stdout);
      // in the unweighted run every weight is a whole count; in the weighted one it is not
      const w = JSON.parse((await app.inject({ method: 'GET', url: `/v1/datasets/survey/runs/latest/${layer}` })).body) as { features: { properties: { weight: number } }[] };
      expect(w.features.every((f) => Number.isInteger(f.properties.weight))).toBe(true);
      expect(whole, layer).toEqual(fractional);
      expect(whole['weight']).toBe('Real');
      expect(whole['medoid_id']).toBe('String');
    }
  });

  it('names the medoid by the observation id held in the id property', async () => {
    const { stdout } = await gdal('ogrinfo', ['-ro', '-q', `OAPIF:${base}/features`, 'by-property.hotspots', '-geom=NO']);
    const medoids = [...stdout.matchAll(/^ {2}medoid_id \(String\) = (.+)$/gm)].map((m) => m[1]!);
    expect(medoids.length).toBeGreaterThan(0);
    for (const m of medoids) expect(m).toMatch(/^obs-1\d{3}$/);
  });

  it('opens a named run\'s layer by its collection URL and reads all of it', async () => {
    const run = (JSON.parse((await app.inject({ method: 'GET', url: '/v1/datasets/survey/runs/latest' })).body) as { id: string }).id;
    const { stdout } = await gdal('ogrinfo', ['-ro', '-so', `OAPIF:${base}/features/collections/survey@${run}.hotspots`, `survey@${run}.hotspots`]);
    const stored = JSON.parse((await app.inject({ method: 'GET', url: `/v1/datasets/survey/runs/${run}/hotspots` })).body) as { features: unknown[] };
    expect(stored.features.length).toBeGreaterThan(0);
    expect(stdout).toContain(`Feature Count: ${stored.features.length}`);
    expect(stdout).toContain('Geometry: Polygon');
  });

  it('copies every layer into GeoPackage with no warning, keeping every feature', async () => {
    for (const kind of ['observations', 'hotspots', 'centres', 'noise', 'points']) {
      const out = join(dir, `${kind}.gpkg`);
      const { stderr } = await gdal('ogr2ogr', ['-f', 'GPKG', out, `OAPIF:${base}/features`, `survey.${kind}`]);
      expect(stderr, kind).toBe('');
      const info = await gdal('ogrinfo', ['-ro', '-so', out, `survey.${kind}`]);
      const listed = JSON.parse((await app.inject({ method: 'GET', url: `/features/collections/survey.${kind}/items?limit=1` })).body) as { numberMatched: number };
      expect(info.stdout, kind).toContain(`Feature Count: ${listed.numberMatched}`);
    }
  }, 300_000);

  it('copies the hotspots into a Shapefile with only GDAL shortening the long field names', async () => {
    const out = join(dir, 'shp');
    const { stderr } = await gdal('ogr2ogr', ['-f', 'ESRI Shapefile', out, `${base}/v1/datasets/survey/runs/latest/hotspots`]);
    // what GDAL says it did, and nothing else: names cut to 10 characters, date-times kept as
    // dates (a Shapefile has no date-time type), as the README says
    const lines = stderr.split('\n').filter((l) => l.trim() !== '');
    expect(lines.length).toBeGreaterThan(0);
    for (const l of lines) expect(l).toMatch(/Normalized\/laundered field name|create as date field, though DateTime requested|does not natively support DateTime type/);
    const dbf = readFileSync(join(out, 'hotspots.dbf')).toString('latin1');
    for (const short of ['density_pe', 'centre_lon', 'centre_lat', 'medoid_id']) expect(dbf).toContain(short);
  });
});
