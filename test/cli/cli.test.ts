import { execFileSync, spawnSync } from 'node:child_process';
import { existsSync, mkdtempSync, readFileSync, readdirSync, rmSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { run } from '../../src/cli/main.js';
// source: geojson-schema package (GeoJSON JSON Schemas), see test/reference/geojson-schema.ts
import { validateCollection } from '../reference/geojson-schema.js';

const DEMO = new URL('../../data/demo/observations.geojson', import.meta.url).pathname;
const DEMO_CSV = new URL('../../data/demo/observations.csv', import.meta.url).pathname;
const BIN = new URL('../../dist/cli/bin.js', import.meta.url).pathname;
const LAYERS = ['hotspots.geojson', 'centres.geojson', 'noise.geojson', 'points.geojson'];


/** Signed area of a ring in lon/lat (shoelace): positive when counter-clockwise. */
const ringArea = (ring: number[][]): number => {
  let a = 0;
  for (let i = 0; i + 1 < ring.length; i++) a += ring[i][0] * ring[i + 1][1] - ring[i + 1][0] * ring[i][1];
  return a / 2;
};

/** Folders the tests write into, removed when the file's tests are done. */
const made: string[] = [];
const tmp = (): string => {
  const dir = mkdtempSync(join(tmpdir(), 'roost-cli-'));
  made.push(dir);
  return dir;
};
afterAll(() => {
  for (const dir of made) rmSync(dir, { recursive: true, force: true });
});
const read = (dir: string, name: string) => readFileSync(join(dir, name), 'utf8');
const json = (dir: string, name: string) => JSON.parse(read(dir, name));

describe('roost cluster', () => {
  let out: string;
  beforeAll(async () => {
    out = join(tmp(), 'result');
    expect(await run(['cluster', DEMO, '--eps', '75', '--min-points', '10', '--count-by', 'plant', '--out-dir', out])).toBe(0);
  });

  it('writes the five result files', () => {
    expect(readdirSync(out).sort()).toEqual([...LAYERS, 'summary.json'].sort());
  });

  it('keeps every input feature, in input order, with its id and properties, plus hotspot_id and role', () => {
    const input = JSON.parse(readFileSync(DEMO, 'utf8'));
    const points = json(out, 'points.geojson');
    expect(points.features).toHaveLength(input.features.length);
    for (let i = 0; i < input.features.length; i += 97) {
      const a = input.features[i];
      const b = points.features[i];
      expect(b.id).toBe(a.id);
      expect(b.geometry.coordinates).toEqual(a.geometry.coordinates);
      const { hotspot_id, role, ...rest } = b.properties;
      expect(rest).toEqual(a.properties);
      expect(['core', 'border', 'noise']).toContain(role);
      expect(hotspot_id === null).toBe(role === 'noise');
    }
  });

  it('every layer is a valid RFC 7946 FeatureCollection with a bbox, no crs, closed counter-clockwise hulls', () => {
    for (const name of LAYERS) {
      const fc = json(out, name);
      expect(validateCollection(fc), `${name}: ${JSON.stringify(validateCollection.errors?.slice(0, 3))}`).toBe(true);
      expect(fc.bbox).toHaveLength(4);
      expect(fc).not.toHaveProperty('crs');
    }
    for (const f of json(out, 'hotspots.geojson').features) {
      const polygons = f.geometry.type === 'Polygon' ? [f.geometry.coordinates] : f.geometry.coordinates;
      for (const rings of polygons) {
        const outer = rings[0];
        // source: RFC 7946 §3.1.6 (exterior rings counter-clockwise, first and last positions equal)
        expect(outer[0]).toEqual(outer[outer.length - 1]);
        expect(ringArea(outer)).toBeGreaterThan(0);
      }
    }
  });

  it('noise.geojson holds exactly the points without a hotspot', () => {
    const points = json(out, 'points.geojson').features;
    const noise = json(out, 'noise.geojson').features;
    expect(noise.map((f: { id: string }) => f.id)).toEqual(points.filter((f: { properties: { role: string } }) => f.properties.role === 'noise').map((f: { id: string }) => f.id));
  });

  it('summary has figures, parameters, version, timings per stage and the cautions', () => {
    const s = json(out, 'summary.json');
    const hotspots = json(out, 'hotspots.geojson').features;
    expect(s.figures.hotspots).toBe(hotspots.length);
    expect(s.figures.hotspots).toBeGreaterThan(3);
    expect(s.figures.clustered + s.figures.noise).toBe(s.figures.observations);
    expect(s.parameters).toMatchObject({ eps: 75, min_points: 10, method: 'dbscan', count_by: 'plant' });
    expect(s.roost_version).toBe(JSON.parse(readFileSync(new URL('../../package.json', import.meta.url), 'utf8')).version);
    for (const stage of ['read', 'index', 'cluster', 'figures', 'write']) expect(typeof s.timings_ms[stage]).toBe('number');
    expect(s.cautions.join(' ')).toMatch(/observers/);
    // per-hotspot counts by category add up to the hotspot's size
    for (const h of s.hotspots) expect(Object.values(h.categories as Record<string, number>).reduce((a, b) => a + b, 0)).toBe(h.count);
  });

  it('hotspot and centre features share ids and figures; counts agree with points', () => {
    const hotspots = json(out, 'hotspots.geojson').features;
    const centres = json(out, 'centres.geojson').features;
    const points = json(out, 'points.geojson').features;
    expect(centres.map((f: { id: number }) => f.id)).toEqual(hotspots.map((f: { id: number }) => f.id));
    for (const h of hotspots) {
      const members = points.filter((p: { properties: { hotspot_id: number } }) => p.properties.hotspot_id === h.properties.hotspot_id);
      expect(members).toHaveLength(h.properties.count);
      expect(h.properties.area_km2).toBeGreaterThan(0);
    }
  });

  it('gives byte-identical layers on a second run', async () => {
    const again = join(tmp(), 'again');
    expect(await run(['cluster', DEMO, '--eps', '75', '--min-points', '10', '--count-by', 'plant', '--out-dir', again])).toBe(0);
    for (const name of LAYERS) expect(read(again, name)).toBe(read(out, name));
    const a = json(out, 'summary.json');
    const b = json(again, 'summary.json');
    delete a.timings_ms;
    delete b.timings_ms;
    expect(b).toEqual(a);
  });

  it('reads CSV with longitude/latitude columns to the same hotspots as GeoJSON', async () => {
    const dir = join(tmp(), 'csv');
    expect(await run(['cluster', DEMO_CSV, '--eps', '75', '--min-points', '10', '--count-by', 'plant', '--out-dir', dir])).toBe(0);
    expect(read(dir, 'hotspots.geojson')).toBe(read(out, 'hotspots.geojson'));
  });

  it('filters by time window and property', async () => {
    const dir = join(tmp(), 'window');
    const code = await run(['cluster', DEMO, '--eps', '75', '--min-points', '5', '--since', '2026-06-01T00:00:00Z', '--until', '2026-07-01T00:00:00Z', '--where', 'plant=balsam', '--out-dir', dir]);
    expect(code).toBe(0);
    const points = json(dir, 'points.geojson').features;
    expect(points.length).toBeGreaterThan(0);
    for (const p of points) {
      expect(p.properties.plant).toBe('balsam');
      expect(p.properties.observed_at >= '2026-06-01' && p.properties.observed_at < '2026-07-01').toBe(true);
    }
    expect(json(dir, 'summary.json').input.left_out_by_filter).toBeGreaterThan(0);
  });

  it('accepts positions with a third value', async () => {
    const dir = tmp();
    const file = join(dir, 'alt.geojson');
    const features = Array.from({ length: 12 }, (_, i) => ({
      type: 'Feature',
      properties: { n: i },
      geometry: { type: 'Point', coordinates: [10 + (i % 4) * 0.0002, 50 + Math.floor(i / 4) * 0.0002, -3.5] },
    }));
    writeFileSync(file, JSON.stringify({ type: 'FeatureCollection', features }));
    expect(await run(['cluster', file, '--eps', '50', '--min-points', '3', '--out-dir', join(dir, 'out')])).toBe(0);
    expect(json(join(dir, 'out'), 'summary.json').figures.hotspots).toBe(1);
  });
});

describe('roost cluster with bad input', () => {
  const bad = (features: unknown[]) => {
    const dir = tmp();
    const file = join(dir, 'bad.geojson');
    writeFileSync(file, JSON.stringify({ type: 'FeatureCollection', features }));
    return { dir, file, out: join(dir, 'out') };
  };
  const pt = (c: number[]) => ({ type: 'Feature', properties: {}, geometry: { type: 'Point', coordinates: c } });

  it.each([
    ['not a Point', [pt([1, 2]), { type: 'Feature', properties: {}, geometry: { type: 'LineString', coordinates: [[0, 0], [1, 1]] } }], /feature 1.*LineString/i],
    ['latitude out of range, looks swapped', [pt([1, 2]), pt([3, 4]), pt([45.2, 120.5])], /feature 2.*(swapped|\[latitude, longitude\])/i],
    ['empty input', [], /no observations|empty/i],
  ])('%s: exit 3, message names the feature, nothing written', async (_name, features, message) => {
    const { file, out } = bad(features);
    const errors: string[] = [];
    const write = process.stderr.write.bind(process.stderr);
    process.stderr.write = ((chunk: string) => (errors.push(String(chunk)), true)) as typeof process.stderr.write;
    try {
      expect(await run(['cluster', file, '--eps', '50', '--min-points', '3', '--out-dir', out])).toBe(3);
    } finally {
      process.stderr.write = write;
    }
    expect(errors.join('')).toMatch(message);
    expect(existsSync(out)).toBe(false);
  });

  it('an unknown weight property is refused with the property named', async () => {
    const { file, out } = bad([pt([1, 2]), pt([1.0001, 2])]);
    expect(await run(['cluster', file, '--eps', '50', '--min-points', '2', '--weight', 'animals', '--out-dir', out])).toBe(3);
    expect(existsSync(out)).toBe(false);
  });

  it('a failed run leaves an earlier result in place untouched', async () => {
    const dir = tmp();
    const out = join(dir, 'result');
    expect(await run(['cluster', DEMO, '--eps', '75', '--min-points', '10', '--out-dir', out])).toBe(0);
    const before = read(out, 'hotspots.geojson');
    const file = join(dir, 'bad.geojson');
    writeFileSync(file, '{"type":"FeatureCollection","features":[{"type":"Feature"');
    expect(await run(['cluster', file, '--eps', '75', '--min-points', '10', '--out-dir', out])).toBe(3);
    expect(read(out, 'hotspots.geojson')).toBe(before);
    expect(readdirSync(dir).filter((n) => n.startsWith('.'))).toEqual([]);
  });

  it('missing eps is a usage error (exit 2)', async () => {
    expect(await run(['cluster', DEMO, '--out-dir', join(tmp(), 'x')])).toBe(2);
  });
});

describe('the compiled command', () => {
  it('runs from dist with stdin input and suggests eps', { timeout: 60_000 }, () => {
    expect(existsSync(BIN)).toBe(true);
    const version = execFileSync(process.execPath, [BIN, '--version'], { encoding: 'utf8' }).trim();
    expect(version).toMatch(/^\d+\.\d+\.\d+$/);
    const out = join(tmp(), 'stdin');
    const r = spawnSync(process.execPath, [BIN, 'cluster', '-', '--eps', '75', '--min-points', '10', '--out-dir', out], { input: readFileSync(DEMO) });
    expect(r.status).toBe(0);
    expect(JSON.parse(read(out, 'summary.json')).figures.observations).toBe(3976);
    const s = spawnSync(process.execPath, [BIN, 'suggest-eps', DEMO, '--min-points', '10', '--json'], { encoding: 'utf8' });
    expect(s.status).toBe(0);
    const answer = JSON.parse(s.stdout);
    expect(answer.k).toBe(9);
    expect(answer.eps_m).toBeGreaterThan(10);
    expect(answer.curve.meters.length).toBe(answer.curve.rank.length);
  });

  it('says once, in plain words, when the k-distance curve has no knee', { timeout: 60_000 }, () => {
    const three = JSON.stringify({
      type: 'FeatureCollection',
      features: [[8, 47], [8.001, 47], [8, 47.001]].map((c) => ({ type: 'Feature', geometry: { type: 'Point', coordinates: c }, properties: {} })),
    });
    const s = spawnSync(process.execPath, [BIN, 'suggest-eps', '-', '--min-points', '5'], { input: three, encoding: 'utf8' });
    expect(s.status).toBe(0);
    const lines = s.stdout.split('\n');
    expect(lines[1]).toBe('No knee found: 3 points are too few for a 4-distance curve; add points or lower min_points below 4.');
    expect(s.stdout.match(/no knee found/gi)).toHaveLength(1);
  });
});
