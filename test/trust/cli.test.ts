/**
 * `roost cluster` with a Monte Carlo test and resampling: p_value, significant and stability on
 * every hotspot of the hotspots and centres layers and in the summary, the same bytes on one
 * thread and on two, effort points from a file or by a marker, and clear refusals.
 */
import { mkdtempSync, readFileSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { beforeAll, describe, expect, it } from 'vitest';
import { run } from '../../src/cli/main.js';
import { discPositions, rng } from '../reference/seeded.js';

const SEED = Number(process.env.ROOST_TEST_SEED ?? 20261203);
const dir = mkdtempSync(join(tmpdir(), 'roost-trust-'));
const json = (d: string, name: string) => JSON.parse(readFileSync(join(d, name), 'utf8'));

function feature(lon: number, lat: number, properties: Record<string, unknown>, id: string) {
  return { type: 'Feature', id, geometry: { type: 'Point', coordinates: [lon, lat] }, properties };
}

/** 150 scattered sightings, two planted patches of 30, and 300 visits marked kind=visit (also written to their own file). */
function write(): { input: string; visits: string; marked: string } {
  const r = rng(SEED);
  const features: unknown[] = [];
  for (let i = 0; i < 150; i++) features.push(feature(8 + 0.14 * r.next(), 50 + 0.09 * r.next(), { kind: 'sighting' }, `s${i}`));
  const a = discPositions(SEED + 1, 30, 8.03, 50.03, 120);
  const b = discPositions(SEED + 2, 30, 8.1, 50.06, 120);
  for (let i = 0; i < 30; i++) features.push(feature(a.lon[i], a.lat[i], { kind: 'sighting' }, `a${i}`));
  for (let i = 0; i < 30; i++) features.push(feature(b.lon[i], b.lat[i], { kind: 'sighting' }, `b${i}`));
  const visits: unknown[] = [];
  for (let i = 0; i < 300; i++) visits.push(feature(8 + 0.14 * r.next(), 50 + 0.09 * r.next(), { kind: 'visit' }, `v${i}`));
  const paths = { input: join(dir, 'sightings.geojson'), visits: join(dir, 'visits.geojson'), marked: join(dir, 'marked.geojson') };
  writeFileSync(paths.input, JSON.stringify({ type: 'FeatureCollection', features }));
  writeFileSync(paths.visits, JSON.stringify({ type: 'FeatureCollection', features: visits }));
  writeFileSync(paths.marked, JSON.stringify({ type: 'FeatureCollection', features: [...features, ...visits] }));
  return paths;
}

describe('roost cluster with a Monte Carlo test and resampling', () => {
  const files = write();
  const one = join(dir, 'one');
  const two = join(dir, 'two');
  beforeAll(async () => {
    const args = ['cluster', files.input, '--eps', '300', '--min-points', '5', '--null', 'csr', '--simulations', '19', '--seed', '7', '--resamples', '10'];
    expect(await run([...args, '--threads', '1', '--out-dir', one])).toBe(0);
    expect(await run([...args, '--threads', '2', '--out-dir', two])).toBe(0);
  });

  it('writes p_value, significant and stability on every hotspot, in both layers and the summary', () => {
    const summary = json(one, 'summary.json');
    expect(summary.chance).toMatchObject({ null_model: 'csr', simulations: 19, seed: 7, statistic: 'count', smallest_possible_p: 0.05, study_area: { kind: 'convex hull of all observations' } });
    expect(summary.stability).toMatchObject({ resamples: 10, resample_share: 0.8, seed: 7 });
    for (const layer of ['hotspots.geojson', 'centres.geojson']) {
      const features = json(one, layer).features as { properties: Record<string, unknown> }[];
      expect(features.length).toBe(summary.hotspots.length);
      for (const f of features) {
        expect(typeof f.properties.p_value).toBe('number');
        expect(f.properties.significant).toBe((f.properties.p_value as number) <= 0.05);
        expect(f.properties.stability).toBeGreaterThanOrEqual(0);
        expect(f.properties.stability).toBeLessThanOrEqual(1);
      }
    }
    // the two planted patches are the largest hotspots and get the smallest p there is
    const planted = (summary.hotspots as { count: number; p_value: number }[]).filter((h) => h.count >= 25);
    expect(planted.length).toBe(2);
    for (const h of planted) expect(h.p_value).toBe(0.05);
  });

  it('gives the same layers on one thread and on two', () => {
    for (const layer of ['hotspots.geojson', 'centres.geojson']) expect(readFileSync(join(two, layer), 'utf8')).toBe(readFileSync(join(one, layer), 'utf8'));
  });

  it('tests against effort points from a file, or marked among the observations, with the same answer', async () => {
    const fromFile = join(dir, 'effort-file');
    const marked = join(dir, 'effort-marked');
    const common = ['--eps', '300', '--min-points', '5', '--simulations', '19', '--seed', '3', '--threads', '1'];
    expect(await run(['cluster', files.input, ...common, '--null', 'effort', '--effort', files.visits, '--out-dir', fromFile])).toBe(0);
    expect(await run(['cluster', files.marked, ...common, '--effort-where', 'kind=visit', '--out-dir', marked])).toBe(0);
    const a = json(fromFile, 'summary.json');
    const b = json(marked, 'summary.json');
    expect(a.chance.effort).toEqual({ source: 'file', cases: 210, effort_points: 300 });
    expect(b.chance.effort).toEqual({ source: 'property marker', cases: 210, effort_points: 300 });
    expect(b.chance.null_model).toBe('effort');
    expect(b.hotspots.map((h: { p_value: number }) => h.p_value)).toEqual(a.hotspots.map((h: { p_value: number }) => h.p_value));
    // the marked visits are not clustered
    expect(json(marked, 'points.geojson').features.length).toBe(210);
  });

  it('says what is wrong with the test settings and writes nothing', async () => {
    const out = join(dir, 'bad');
    const cases: [string[], RegExp][] = [
      [['--null', 'effort'], /effort needs effort points/],
      [['--effort-where', 'kind=nothing'], /no observation has kind=nothing/],
      [['--study-area', files.input], /--study-area is where the csr null model places points/],
      [['--simulations', '-3'], /simulations: must be a whole number from 0 to 9999/],
      [['--resample-share', '1.5'], /resample_share: must be a number above 0 and below 1/],
    ];
    for (const [flags, message] of cases) {
      const errors: string[] = [];
      const write = process.stderr.write.bind(process.stderr);
      process.stderr.write = ((s: string) => (errors.push(String(s)), true)) as typeof process.stderr.write;
      try {
        expect(await run(['cluster', files.input, '--eps', '300', ...flags, '--out-dir', out])).toBe(2);
      } finally {
        process.stderr.write = write;
      }
      expect(errors.join(''), flags.join(' ')).toMatch(message);
    }
  });

  it('places csr points in a study area given as a polygon', async () => {
    const area = join(dir, 'area.geojson');
    writeFileSync(area, JSON.stringify({ type: 'Polygon', coordinates: [[[7.99, 49.99], [8.15, 49.99], [8.15, 50.1], [7.99, 50.1], [7.99, 49.99]]] }));
    const out = join(dir, 'area');
    expect(await run(['cluster', files.input, '--eps', '300', '--null', 'csr', '--simulations', '9', '--study-area', area, '--threads', '1', '--out-dir', out])).toBe(0);
    const summary = json(out, 'summary.json');
    expect(summary.chance.study_area.kind).toBe('polygon given');
    expect(summary.warnings.map((w: { code: string }) => w.code)).toContain('few-simulations');
  });
});
