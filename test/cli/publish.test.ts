import { mkdtempSync, readFileSync, readdirSync, rmSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { afterAll, describe, expect, it } from 'vitest';
import { run } from '../../src/cli/main.js';
// source: geojson-schema package (GeoJSON JSON Schemas), see test/reference/geojson-schema.ts
import { validateCollection } from '../reference/geojson-schema.js';

const DEMO = new URL('../../data/demo/observations.geojson', import.meta.url).pathname;
/** Folders the tests write into, removed when the file's tests are done. */
const made: string[] = [];
afterAll(() => {
  for (const dir of made) rmSync(dir, { recursive: true, force: true });
});
const tmp = (): string => {
  const dir = mkdtempSync(join(tmpdir(), 'roost-publish-'));
  made.push(dir);
  return join(dir, 'out');
};

describe('roost cluster with publishing flags', () => {
  it('writes generalised layers: small hotspots and noise withheld, only allowed properties, counts that add up', async () => {
    const exactDir = tmp();
    expect(await run(['cluster', DEMO, '--eps', '75', '--min-points', '10', '--count-by', 'plant', '--out-dir', exactDir])).toBe(0);
    const out = tmp();
    expect(await run(['cluster', DEMO, '--eps', '75', '--min-points', '10', '--count-by', 'plant', '--generalise-m', '200', '--min-count', '150', '--withhold-noise', '--publish-properties', 'plant', '--out-dir', out])).toBe(0);
    expect(readdirSync(out).sort()).toEqual(['centres.geojson', 'hotspots.geojson', 'noise.geojson', 'points.geojson', 'summary.json']);
    const exact = JSON.parse(readFileSync(join(exactDir, 'summary.json'), 'utf8'));
    const sizes: number[] = exact.hotspots.map((h: { count: number }) => h.count);
    const bytes = readdirSync(out).map((f) => readFileSync(join(out, f), 'utf8')).join('\n');
    // the demo's observer names, observation ids and exact times are not allowed: never published
    expect(bytes).not.toContain('volunteer-');
    expect(bytes).not.toContain('"observer"');
    expect(bytes).not.toContain('mv-0');
    expect(bytes).not.toContain('observed_at');
    expect(bytes).not.toContain('stems');
    expect(bytes).toContain('"plant":"knotweed"');
    for (const name of ['hotspots', 'centres', 'noise', 'points']) {
      const fc = JSON.parse(readFileSync(join(out, `${name}.geojson`), 'utf8'));
      expect(validateCollection(fc), name).toBe(true);
    }
    const summary = JSON.parse(readFileSync(join(out, 'summary.json'), 'utf8'));
    const p = summary.published;
    expect(p.hotspots).toEqual({ total: sizes.length, published: sizes.filter((n) => n >= 150).length, withheld: sizes.filter((n) => n < 150).length });
    expect(p.hotspots.withheld).toBeGreaterThan(0);
    expect(p.observations.withheld_noise).toBe(exact.figures.noise);
    expect(p.observations.withheld_in_small_hotspots).toBe(sizes.filter((n) => n < 150).reduce((a, b) => a + b, 0));
    expect(p.observations.published + p.observations.withheld_in_small_hotspots + p.observations.withheld_noise).toBe(exact.figures.observations);
    expect(JSON.parse(readFileSync(join(out, 'noise.geojson'), 'utf8')).features).toEqual([]);
    expect(summary.hotspots.every((h: Record<string, unknown>) => !('medoid_id' in h) && (h.count as number) >= 150)).toBe(true);
  });

  it('refuses publishing flags without --generalise-m, and a bad grid size, writing nothing', async () => {
    const out = tmp();
    expect(await run(['cluster', DEMO, '--eps', '75', '--min-count', '10', '--out-dir', out])).toBe(2);
    expect(await run(['cluster', DEMO, '--eps', '75', '--generalise-m', '0', '--out-dir', out])).toBe(2);
    expect(await run(['cluster', DEMO, '--eps', '75', '--generalise-m', 'far', '--out-dir', out])).toBe(2);
    expect(() => readdirSync(out)).toThrow();
  });
});
