import { describe, expect, it } from 'vitest';
import geodesic from 'geographiclib-geodesic';
import { booleanPointInPolygon } from '@turf/turf';
import { clusterInput } from '../../src/run/cluster.js';
import { assessHere } from '../../src/trust/assess.js';
import { resolveTrustSettings } from '../../src/trust/options.js';
import { resolveSettings } from '../../src/run/settings.js';
import { Grid } from '../../src/publish/grid.js';
import { publishLayerTexts, resolvePublishOptions, PublishError, type PublishOptions } from '../../src/publish/publish.js';
import { antimeridianSet, highLatitudeSet, midLatitudeSet, poleSet, rng } from '../reference/seeded.js';
import type { PointSet } from '../../src/core/types.js';

const WGS84 = geodesic.Geodesic.WGS84;
/** source: geographiclib-geodesic (Karney 2013), WGS 84 inverse solution, metres */
const geodesicM = (a: number[], b: number[]): number => WGS84.Inverse(a[1]!, a[0]!, b[1]!, b[0]!).s12!;

/** A seeded set as a GeoJSON FeatureCollection whose properties include ones never to be published. */
function asGeojson(set: PointSet, seed: number): string {
  const r = rng(seed);
  const features = Array.from({ length: set.n }, (_, i) => ({
    type: 'Feature',
    id: `case-${i}`,
    geometry: { type: 'Point', coordinates: [set.lon[i], set.lat[i]] },
    properties: { species: ['heron', 'egret'][r.int(2)], age_years: 30 + r.int(40), diagnosis_note: `SECRETVALUE${i}X` },
  }));
  return JSON.stringify({ type: 'FeatureCollection', features });
}

interface Fc {
  features: { id?: unknown; geometry: { type: string; coordinates: unknown }; properties: Record<string, unknown> }[];
  published: Record<string, any>;
}

function clusterAndPublish(set: PointSet, seed: number, options: PublishOptions) {
  const result = clusterInput(Buffer.from(asGeojson(set, seed)), 'geojson', resolveSettings({ eps: 200, min_points: 8, count_by: 'species' }));
  const text = (name: 'points' | 'hotspots') => [...result.layers[name].chunks()].join('');
  const exact = JSON.parse(text('points')) as Fc;
  const published = publishLayerTexts(text('points'), text('hotspots'), options);
  return { exact, published, parsed: { hotspots: JSON.parse(published.hotspots) as Fc, centres: JSON.parse(published.centres) as Fc, noise: JSON.parse(published.noise) as Fc, points: JSON.parse(published.points) as Fc } };
}

function outerRings(g: { type: string; coordinates: unknown }): number[][][] {
  return g.type === 'Polygon' ? [(g.coordinates as number[][][])[0]!] : (g.coordinates as number[][][][]).map((p) => p[0]!);
}

const SETS: [string, (seed: number) => PointSet][] = [
  ['mid-latitude', midLatitudeSet],
  ['80° N', highLatitudeSet],
  ['around the North Pole', poleSet],
  ['across ±180°', antimeridianSet],
];

describe('published layers', () => {
  for (const [name, make] of SETS) {
    for (const g of [50, 250]) {
      it(`${name}, generalise_m ${g}: no outline vertex is closer than g/2 to a member of its hotspot, and the outline holds them all`, () => {
        const { exact, parsed } = clusterAndPublish(make(3), 3, { generaliseM: g, minCount: 1, noise: 'withhold', properties: [] });
        const byHotspot = new Map<number, number[][]>();
        for (const f of exact.features) {
          const h = f.properties.hotspot_id;
          if (typeof h === 'number') (byHotspot.get(h) ?? byHotspot.set(h, []).get(h)!).push(f.geometry.coordinates as number[]);
        }
        expect(parsed.hotspots.features.length).toBe(byHotspot.size);
        expect(byHotspot.size).toBeGreaterThan(2);
        let closest = Infinity;
        for (const f of parsed.hotspots.features) {
          const members = byHotspot.get(f.properties.hotspot_id as number)!;
          for (const ring of outerRings(f.geometry)) {
            for (const v of ring) {
              // cut rings carry the antimeridian and the pole as vertices of the cut, not of the outline
              if (Math.abs(v[0]!) === 180 || Math.abs(v[1]!) === 90) continue;
              for (const m of members) closest = Math.min(closest, geodesicM(v, m));
            }
          }
          for (const m of members) expect(booleanPointInPolygon(m, f.geometry as never), `member ${m} of hotspot ${String(f.properties.hotspot_id)}`).toBe(true);
        }
        expect(closest).toBeGreaterThanOrEqual(g / 2);
        // and the outline follows the cells closely: the bound is not met by drawing far away
        expect(closest).toBeLessThan(1.6 * g);
        expect(parsed.hotspots.published.outline_min_distance_m).toBe(g / 2);
      });
    }
  }

  it('published points are the centres of their observations\' cells: within the stated offset, shared by the cell', () => {
    for (const [, make] of SETS) {
      const g = 120;
      const { exact, parsed } = clusterAndPublish(make(5), 5, { generaliseM: g, minCount: 1, noise: 'publish', properties: ['species'] });
      expect(parsed.points.features.length).toBe(exact.features.length);
      const grid = new Grid(g);
      const published = new Set(parsed.points.features.map((f) => JSON.stringify([f.geometry.coordinates, f.properties.hotspot_id])));
      let worst = 0;
      for (const f of exact.features) {
        const [lon, lat] = f.geometry.coordinates as number[];
        const c = grid.cellOf(lon!, lat!);
        const d = geodesicM([lon!, lat!], [c.lon, c.lat]);
        worst = Math.max(worst, d);
        // away from the poles a cell is at most g by g, so its centre is within g·√2/2 (and the
        // ellipsoid's radii differ from the sphere's by under 0.6 %, see test/core/haversine.test.ts)
        if (c.row !== 0 && Math.abs(c.lat) !== 90) expect(d).toBeLessThanOrEqual(((g * Math.SQRT2) / 2) * 1.006);
        expect(d).toBeLessThanOrEqual(parsed.points.published.point_max_offset_m * 1.006);
        const rounded = [Math.round(c.lon * 1e7) / 1e7, Math.round(c.lat * 1e7) / 1e7];
        expect(published.has(JSON.stringify([rounded, f.properties.hotspot_id])), `${lon},${lat}`).toBe(true);
      }
      expect(worst).toBeGreaterThan(g / 4);
    }
  });

  it('withheld counts add up, and small hotspots and noise are left out of every layer', () => {
    const { exact, parsed } = clusterAndPublish(midLatitudeSet(9), 9, { generaliseM: 100, minCount: 62, noise: 'withhold', properties: [] });
    const sizes = new Map<number, number>();
    let noise = 0;
    for (const f of exact.features) {
      const h = f.properties.hotspot_id;
      if (typeof h === 'number') sizes.set(h, (sizes.get(h) ?? 0) + 1);
      else noise++;
    }
    const big = [...sizes].filter(([, n]) => n >= 62).map(([h]) => h).sort((a, b) => a - b);
    const small = [...sizes].filter(([, n]) => n < 62);
    expect(small.length).toBeGreaterThan(0);
    expect(big.length).toBeGreaterThan(0);
    const info = parsed.hotspots.published;
    expect(info.hotspots).toEqual({ total: sizes.size, published: big.length, withheld: small.length });
    expect(info.observations.total).toBe(exact.features.length);
    expect(info.observations.withheld_noise).toBe(noise);
    expect(info.observations.withheld_in_small_hotspots).toBe(small.reduce((s, [, n]) => s + n, 0));
    expect(info.observations.published + info.observations.withheld_in_small_hotspots + info.observations.withheld_noise).toBe(info.observations.total);
    expect(parsed.points.features.length).toBe(info.observations.published);
    expect(parsed.hotspots.features.map((f) => f.properties.hotspot_id)).toEqual(big);
    expect(parsed.centres.features.map((f) => f.properties.hotspot_id)).toEqual(big);
    expect(new Set(parsed.points.features.map((f) => f.properties.hotspot_id))).toEqual(new Set(big));
    expect(parsed.noise.features).toEqual([]);
    for (const f of parsed.hotspots.features) expect(f.properties.count).toBe(sizes.get(f.properties.hotspot_id as number));
  });

  it('a property not on the allow-list, and every observation id, appear in no published byte', () => {
    const { exact, published } = clusterAndPublish(midLatitudeSet(4), 4, { generaliseM: 80, minCount: 1, noise: 'publish', properties: ['species'], countBy: 'species' });
    const bytes = [published.hotspots, published.centres, published.noise, published.points].join('\n');
    expect(bytes).not.toContain('diagnosis_note');
    expect(bytes).not.toContain('SECRETVALUE');
    expect(bytes).not.toContain('age_years');
    expect(bytes).not.toMatch(/case-\d/);
    expect(bytes).not.toContain('medoid');
    expect(bytes).not.toContain('observed_at');
    // the allowed property is there, with the category counts it feeds
    expect(bytes).toContain('"species":"heron"');
    expect(JSON.parse(published.hotspots).features[0].properties.count_heron).toBeGreaterThan(0);
    // and without the allow-list, not even the allowed one nor its counts
    const none = clusterAndPublish(midLatitudeSet(4), 4, { generaliseM: 80, minCount: 1, noise: 'publish', properties: [], countBy: 'species' }).published;
    const noneBytes = [none.hotspots, none.centres, none.noise, none.points].join('\n');
    expect(noneBytes).not.toContain('heron');
    expect(noneBytes).not.toContain('species');
    // no exact position of any observation is published as a point: every one is a cell centre
    const exactPositions = new Set(exact.features.map((f) => JSON.stringify(f.geometry.coordinates)));
    const grid = new Grid(80);
    for (const f of JSON.parse(published.points).features as Fc['features']) {
      const [lon, lat] = f.geometry.coordinates as number[];
      const c = grid.cellOf(lon!, lat!);
      expect([Math.round(c.lon * 1e7) / 1e7, Math.round(c.lat * 1e7) / 1e7]).toEqual([lon, lat]);
    }
    expect(exactPositions.size).toBeGreaterThan(0);
  });

  it('is deterministic: the same run gives the same bytes', () => {
    const opts: PublishOptions = { generaliseM: 75, minCount: 5, noise: 'publish', properties: ['species'] };
    const a = clusterAndPublish(highLatitudeSet(2), 2, opts).published;
    const b = clusterAndPublish(highLatitudeSet(2), 2, opts).published;
    expect(b.hotspots).toBe(a.hotspots);
    expect(b.points).toBe(a.points);
  });

  it('area and density keep 7 significant figures: a sparse hotspot over a large outline still shows its density', () => {
    // ten observations a degree of longitude apart at 50° N (about 72 km), chained by an eps of 100 km
    const features = Array.from({ length: 10 }, (_, i) => ({ type: 'Feature', id: `s${i}`, geometry: { type: 'Point', coordinates: [10 + i, 50] }, properties: {} }));
    const result = clusterInput(Buffer.from(JSON.stringify({ type: 'FeatureCollection', features })), 'geojson', resolveSettings({ eps: 100_000, min_points: 2 }));
    const text = (name: 'points' | 'hotspots') => [...result.layers[name].chunks()].join('');
    const published = publishLayerTexts(text('points'), text('hotspots'), { generaliseM: 50_000, minCount: 1, noise: 'withhold', properties: [] });
    const h = (JSON.parse(published.hotspots) as Fc).features[0]!.properties as { count: number; area_km2: number; density_per_km2: number };
    expect(h.count).toBe(10);
    expect(h.area_km2).toBeGreaterThan(10_000); // an outline of 80 km circles along some 640 km
    expect(h.area_km2).toBe(Number(h.area_km2.toPrecision(7)));
    expect(h.density_per_km2).toBeGreaterThan(0); // below 0.0005 per km², which 3 decimals made 0
    expect(Math.abs(h.density_per_km2 / (10 / h.area_km2) - 1)).toBeLessThan(1e-6);
  });

  it('refuses unusable options, naming the field', () => {
    const bad = (o: Record<string, unknown>, field: string) => {
      expect(() => resolvePublishOptions(o)).toThrow(PublishError);
      try {
        resolvePublishOptions(o);
      } catch (e) {
        expect((e as PublishError).field).toBe(field);
      }
    };
    bad({}, 'generalise_m');
    bad({ generalise_m: 0.5 }, 'generalise_m');
    bad({ generalise_m: 100, min_count: 0 }, 'min_count');
    bad({ generalise_m: 100, noise: 'show' }, 'noise');
    bad({ generalise_m: 100, properties: 'species' }, 'properties');
    expect(resolvePublishOptions({ generalise_m: 100 })).toEqual({ generaliseM: 100, minCount: 1, noise: 'withhold', properties: [], countBy: null });
  });
});

describe('published layers of a run with a Monte Carlo test and resampling', () => {
  it('carry p_value, significant and stability of each published hotspot as the exact layer has them, reals as reals', () => {
    const settings = resolveSettings({ eps: 200, min_points: 8 });
    const result = clusterInput(Buffer.from(asGeojson(midLatitudeSet(11), 11)), 'geojson', settings);
    assessHere(result, settings, { settings: resolveTrustSettings({ simulations: 19, seed: 5, resamples: 4 }) });
    const text = (name: 'points' | 'hotspots') => [...result.layers[name].chunks()].join('');
    const exact = new Map((JSON.parse(text('hotspots')) as Fc).features.map((f) => [f.properties.hotspot_id, f.properties]));
    const published = publishLayerTexts(text('points'), text('hotspots'), resolvePublishOptions({ generalise_m: 100, min_count: 1, properties: [] }));
    const features = (JSON.parse(published.hotspots) as Fc).features;
    expect(features.length).toBeGreaterThan(0);
    for (const f of features) {
      const e = exact.get(f.properties.hotspot_id)!;
      expect([f.properties.p_value, f.properties.significant, f.properties.stability]).toEqual([e.p_value, e.significant, e.stability]);
      expect(typeof f.properties.significant).toBe('boolean');
    }
    expect(published.hotspots).toMatch(/"p_value":(0|1)\.\d+/);
  });
});
