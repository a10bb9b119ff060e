import { existsSync, mkdtempSync, readFileSync, readdirSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { describe, expect, it } from 'vitest';
import { run } from '../../src/cli/main.js';

const DEMO = new URL('../../data/demo/observations.geojson', import.meta.url).pathname;
const tmp = () => mkdtempSync(join(tmpdir(), 'roost-report-'));

const reportData = (html: string): Record<string, any> => JSON.parse(/<script type="application\/json" id="roost-report-data">(.*?)<\/script>/s.exec(html)![1]);

describe('roost cluster --report', () => {
  it('writes report.html beside the layers, holding everything it shows and naming no other address', async () => {
    const out = join(tmp(), 'result');
    expect(await run(['cluster', DEMO, '--eps', '75', '--min-points', '10', '--report', '--out-dir', out])).toBe(0);
    expect(readdirSync(out).sort()).toEqual(['centres.geojson', 'hotspots.geojson', 'noise.geojson', 'points.geojson', 'report.html', 'summary.json']);
    const html = readFileSync(join(out, 'report.html'), 'utf8');
    expect(html).toContain(`content="default-src 'none';`);
    for (const m of html.matchAll(/<(?:script|link|img|iframe|source)\b[^>]*\b(?:src|href)="([^"]*)"/gi)) expect(m[1], m[0]).toMatch(/^(data:|#)/);
    const data = reportData(html);
    const summary = JSON.parse(readFileSync(join(out, 'summary.json'), 'utf8'));
    expect(data.summary.figures).toEqual(summary.figures);
    expect(data.hotspots).toEqual(JSON.parse(readFileSync(join(out, 'hotspots.geojson'), 'utf8')));
    expect(data.kdistance.eps_m).toBe(108.2);
    expect(data.reachability).toBeNull();
  });

  it('draws the reachability plot of OPTICS runs from the points layer', async () => {
    const out = join(tmp(), 'result');
    expect(await run(['cluster', DEMO, '--eps', '75', '--min-points', '10', '--method', 'optics', '--report', '--out-dir', out])).toBe(0);
    const data = reportData(readFileSync(join(out, 'report.html'), 'utf8'));
    const points = JSON.parse(readFileSync(join(out, 'points.geojson'), 'utf8')) as { features: { properties: Record<string, unknown> }[] };
    expect(data.kdistance).toBeNull();
    expect(data.reachability.length).toBe(points.features.length);
    const first = points.features.find((f) => f.properties.optics_order === 0)!.properties;
    expect(data.reachability[0]).toEqual([0, first.reachability_m, first.hotspot_id]);
  });

  it('refuses --report with published layers, writing nothing', async () => {
    const out = join(tmp(), 'result');
    expect(await run(['cluster', DEMO, '--eps', '75', '--report', '--generalise-m', '100', '--out-dir', out])).toBe(2);
    expect(existsSync(out)).toBe(false);
  });
});
