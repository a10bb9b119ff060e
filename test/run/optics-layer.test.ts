import { describe, expect, it } from 'vitest';
import { optics } from '../../src/core/optics.js';
import { pointSet } from '../../src/core/types.js';
import { roundMeters } from '../../src/geometry/rounding.js';
import type { InputFeature } from '../../src/ingest/types.js';
import { clusterInput, pointFeature, pointFeatureFromText } from '../../src/run/cluster.js';
import { resolveSettings } from '../../src/run/settings.js';
import { patchesSet } from '../reference/seeded.js';

type Props = Record<string, unknown>;

function collection(seed: number): { text: string; lon: number[]; lat: number[] } {
  const p = patchesSet(seed, { lon: 10.2, lat: 51.3, spreadMeters: 8000, patches: 6, pointsPerPatch: 120, sigmaMeters: 250, background: 200 });
  const lon = Array.from(p.lon);
  const lat = Array.from(p.lat);
  const features = lon.map((x, i) => ({ type: 'Feature', id: `p${i}`, geometry: { type: 'Point', coordinates: [x, lat[i]] }, properties: { n: i } }));
  return { text: JSON.stringify({ type: 'FeatureCollection', features }), lon, lat };
}

describe('OPTICS fields of the points and noise layers', () => {
  const seed = Number(process.env.ROOST_SEED ?? 7);
  console.info(`optics layer seed ${seed} (ROOST_SEED)`);
  const { text, lon, lat } = collection(seed);

  for (const extraction of ['eps', 'xi'] as const) {
    it(`carry optics_order and reachability_m as the OPTICS ordering has them (${extraction} extraction)`, () => {
      const settings = resolveSettings({ eps: 300, min_points: 5, method: 'optics', optics_extraction: extraction, optics_max_eps: 900 });
      const result = clusterInput(text, 'geojson', settings);
      const points = JSON.parse(result.layers.points.text()) as { features: { id: string; properties: Props }[] };
      // the ordering itself is checked against the textbook algorithm in test/core/optics.test.ts
      // (source: Ankerst et al. 1999); here the layer must carry it unchanged
      const ordering = optics(pointSet(lon, lat), { maxEpsMeters: 900, minPoints: 5 });
      const seen = new Set<number>();
      points.features.forEach((f, i) => {
        const order = f.properties.optics_order as number;
        expect(ordering.order[order], f.id).toBe(i);
        seen.add(order);
        const r = ordering.reachability[i];
        expect(f.properties.reachability_m, f.id).toBe(Number.isFinite(r) ? roundMeters(r) : null);
      });
      expect(seen.size).toBe(points.features.length);
      expect(points.features.find((f) => f.properties.optics_order === 0)!.properties.reachability_m).toBeNull();
      const noise = JSON.parse(result.layers.noise.text()) as { features: { id: string; properties: Props }[] };
      const byId = new Map(points.features.map((f) => [f.id, f.properties]));
      expect(noise.features.length).toBeGreaterThan(0);
      for (const f of noise.features) expect(f.properties.optics_order).toBe(byId.get(f.id)!.optics_order);
    });
  }

  it('are absent from DBSCAN layers', () => {
    const result = clusterInput(text, 'geojson', resolveSettings({ eps: 300, min_points: 5 }));
    expect(result.layers.points.text()).not.toContain('optics_order');
  });

  it('are written the same from a stored feature text as from the parsed feature', () => {
    const extra = ',"optics_order":3,"reachability_m":12.5';
    for (const t of [
      '{"type":"Feature","id":"a","geometry":{"type":"Point","coordinates":[1.5,2.25]},"properties":{"k":1}}',
      '{"type":"Feature","geometry":{"type":"Point","coordinates":[1.5,2.25]},"properties":null}',
      '{"type":"Feature","id":4,"geometry":{"type":"Point","coordinates":[1,2]},"properties":{"role":"x","hotspot_id":9}}',
    ]) {
      const want = pointFeature(JSON.parse(t) as InputFeature, 0, 0, extra);
      expect(pointFeatureFromText(t, 0, 0, extra)).toBe(want);
      expect(JSON.parse(want).properties).toMatchObject({ optics_order: 3, reachability_m: 12.5 });
    }
  });
});
