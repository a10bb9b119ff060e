/**
 * Whole-job figures as a user reads them in summary.json and on hotspot features: rounding that
 * keeps small figures, and the Clark–Evans block with its reasons and warnings.
 */
import { area, featureCollection, intersect, polygon } from '@turf/turf';
import type { Polygon } from 'geojson';
import geodesic from 'geographiclib-geodesic';
import { describe, expect, it } from 'vitest';
import { clusterInput } from '../../src/run/cluster.js';
import { resolveSettings } from '../../src/run/settings.js';
import { discPositions } from '../reference/seeded.js';

const WGS84 = geodesic.Geodesic.WGS84;

/** A GeoJSON FeatureCollection of points, with ids p0, p1, … */
function collection(positions: [number, number][]): string {
  return JSON.stringify({
    type: 'FeatureCollection',
    features: positions.map((c, i) => ({ type: 'Feature', id: `p${i}`, geometry: { type: 'Point', coordinates: c }, properties: {} })),
  });
}

/** Area in km² of a GeoJSON polygon's outer ring on the WGS 84 ellipsoid. source: GeographicLib PolygonArea (Karney 2013) */
function ellipsoidKm2(ring: number[][]): number {
  const poly = WGS84.Polygon(false);
  for (const p of ring.slice(0, -1)) poly.AddPoint(p[1], p[0]);
  return Math.abs(poly.Compute(false, true).area ?? NaN) / 1e6;
}

type Summary = { figures: { clark_evans: Record<string, unknown> }; hotspots: Record<string, unknown>[]; warnings: { code: string; message: string }[] };

describe('figures keep significant figures, not decimals', () => {
  it('gives a large, sparse hotspot its density instead of 0', () => {
    // 20 × 20 points 100 km apart near the equator: one hotspot of about 3.6 million km², whose
    // density (about 1.1e-4 per km²) three decimals would print as 0
    const positions: [number, number][] = [];
    for (let r = 0; r < 20; r++) for (let c = 0; c < 20; c++) positions.push([c * 0.9, r * 0.9]);
    const result = clusterInput(collection(positions), 'geojson', resolveSettings({ eps: 120_000, min_points: 3 }));
    const h = (result.summary as Summary).hotspots[0] as { count: number; area_km2: number; density_per_km2: number; weight_density_per_km2: number };
    expect(h.count).toBe(400);
    expect(h.area_km2).toBeGreaterThan(3e6);
    // density is count / area by definition; seven significant figures keep it within 5e-7
    expect(h.density_per_km2).toBeGreaterThan(0);
    expect(Math.abs(h.density_per_km2 - h.count / h.area_km2) / (h.count / h.area_km2)).toBeLessThan(5e-7);
    expect(h.weight_density_per_km2).toBe(h.density_per_km2);
  });

  it('gives a hull of under a square metre its area instead of 1e-6 km²', () => {
    // three observations at one position, eps 1 m: the hull is a buffer of eps / 2 = 0.5 m round it
    const p: [number, number] = [8.5, 47.2];
    const result = clusterInput(collection([p, p, p]), 'geojson', resolveSettings({ eps: 1, min_points: 3 }));
    const h = (result.summary as Summary).hotspots[0] as { area_km2: number; radius_m: number; density_per_km2: number };
    const hull = JSON.parse(result.layers.hotspots.text()).features[0].geometry;
    const reference = ellipsoidKm2(hull.coordinates[0]);
    expect(reference).toBeGreaterThan(0.7e-6);
    expect(reference).toBeLessThan(0.8e-6);
    // source: GeographicLib PolygonArea (Karney 2013) on the written hull; sphere against ellipsoid within 1 %
    expect(Math.abs(h.area_km2 - reference) / reference).toBeLessThan(0.01);
    expect(h.radius_m).toBe(0);
    expect(Math.abs(h.density_per_km2 - 3 / h.area_km2) / (3 / h.area_km2)).toBeLessThan(5e-7);
  });
});

describe('features whose id is null', () => {
  it('are clustered and written without an id, as the reader takes them (no id), in the points and noise layers', () => {
    const features = [
      { type: 'Feature', id: null, geometry: { type: 'Point', coordinates: [10, 50] }, properties: { n: 1 } },
      { type: 'Feature', id: 'a', geometry: { type: 'Point', coordinates: [10.0001, 50] }, properties: {} },
      { type: 'Feature', geometry: { type: 'Point', coordinates: [10.0002, 50] }, properties: null },
      { type: 'Feature', id: null, geometry: { type: 'Point', coordinates: [12, 50] }, properties: {} },
    ];
    const result = clusterInput(JSON.stringify({ type: 'FeatureCollection', features }), 'geojson', resolveSettings({ eps: 250, min_points: 3 }));
    const points = JSON.parse(result.layers.points.text()) as { features: Record<string, unknown>[] };
    expect(points.features.map((f) => Object.hasOwn(f, 'id'))).toEqual([false, true, false, false]);
    expect(points.features[0]).toEqual({ type: 'Feature', geometry: { type: 'Point', coordinates: [10, 50] }, properties: { n: 1, hotspot_id: 1, role: 'core' } });
    expect(points.features.map((f) => (f.properties as { hotspot_id: number | null }).hotspot_id)).toEqual([1, 1, 1, null]);
    const noise = JSON.parse(result.layers.noise.text()) as { features: Record<string, unknown>[] };
    expect(noise.features).toEqual([{ type: 'Feature', geometry: { type: 'Point', coordinates: [12, 50] }, properties: { hotspot_id: null, role: 'noise' } }]);
    // the medoid's id falls back to the input position when the feature has no id
    const hotspots = (result.summary as Summary).hotspots;
    expect(hotspots).toHaveLength(1);
    expect(['0', 'a', '2']).toContain(hotspots[0].medoid_id);
  });
});

describe('the Clark–Evans block', () => {
  it('says why it was not computed for observations spread round the globe, in the summary and as a warning', () => {
    const positions: [number, number][] = [];
    for (const lon of [0, 90, 179.99, -90]) for (let k = 0; k < 5; k++) positions.push([lon + k * 0.0005, 10 + k * 0.0003]);
    const result = clusterInput(collection(positions), 'geojson', resolveSettings({ eps: 500, min_points: 3 }));
    const s = result.summary as Summary;
    expect(s.hotspots).toHaveLength(4);
    expect(s.figures.clark_evans.computed).toBe(false);
    expect(s.figures.clark_evans.not_computed).toMatch(/there is no study area: the observations spread too far round the globe/);
    const w = s.warnings.find((x) => x.code === 'clark-evans-not-computed');
    expect(w?.message).toMatch(/^The Clark–Evans index was not computed: there is no study area/);
  });

  it('warns when observations share positions and reports R over the distinct positions beside it', () => {
    // 100 places on a 10 × 10 lattice 100 m apart, each observed three times
    const positions: [number, number][] = [];
    for (let r = 0; r < 10; r++) for (let c = 0; c < 10; c++) for (let k = 0; k < 3; k++) positions.push([8 + c * 0.0013, 47 + r * 0.0009]);
    const result = clusterInput(collection(positions), 'geojson', resolveSettings({ eps: 50, min_points: 3 }));
    const s = result.summary as Summary;
    const ce = s.figures.clark_evans as { computed: boolean; R: number; pattern: string; shared_positions: number; distinct_positions: { count: number; R: number; pattern: string } };
    expect(ce.computed).toBe(true);
    expect(ce.shared_positions).toBe(300);
    expect(ce.R).toBe(0);
    expect(ce.pattern).toBe('aggregated');
    expect(ce.distinct_positions.count).toBe(100);
    // a lattice is more evenly spaced than random (Clark & Evans 1954: R > 1), even with the edge
    expect(ce.distinct_positions.R).toBeGreaterThan(1);
    const w = s.warnings.find((x) => x.code === 'shared-positions');
    expect(w?.message).toMatch(/^300 of 300 observations share their exact position with another one/);
    expect(w?.message).toMatch(/Over the 100 distinct positions R is/);
  });

  it('is left out when not asked for (an answer of one layer alone), with every layer unchanged and the summary saying so', () => {
    const positions: [number, number][] = [];
    for (let r = 0; r < 10; r++) for (let c = 0; c < 10; c++) for (let k = 0; k < 2; k++) positions.push([8 + c * 0.0013, 47 + r * 0.0009]);
    const disc = discPositions(7, 300, 8.01, 47.01, 600);
    disc.lon.forEach((x, i) => positions.push([x, disc.lat[i]!]));
    const input = collection(positions);
    const settings = resolveSettings({ eps: 120, min_points: 4 });
    const full = clusterInput(input, 'geojson', settings);
    const lean = clusterInput(input, 'geojson', settings, { clarkEvans: false });
    for (const layer of ['hotspots', 'centres', 'noise', 'points'] as const) expect(lean.layers[layer].text(), layer).toBe(full.layers[layer].text());
    const a = lean.summary as Summary;
    const b = full.summary as Summary;
    expect(b.figures.clark_evans.computed).toBe(true);
    expect(a.figures.clark_evans).toEqual({ computed: false, not_computed: 'it was not asked for' });
    expect(a.warnings.find((x) => x.code === 'clark-evans-not-computed')?.message).toBe('The Clark–Evans index was not computed: it was not asked for.');
    const rest = (s: Summary): unknown => ({ ...s, timings_ms: null, figures: { ...s.figures, clark_evans: null }, warnings: s.warnings.filter((x) => !/clark-evans|shared-positions/.test(x.code)) });
    expect(rest(a)).toEqual(rest(b));
  });
});

describe('OPTICS ξ hotspots', () => {
  it('never overlap: points of a looser parent around a dense hotspot are noise, not a hotspot enclosing it', () => {
    // a dense core inside a looser disc, two separate patches, thin background (seeded)
    const parts = [
      discPositions(1, 120, 10, 45, 40),
      discPositions(2, 160, 10, 45, 700),
      discPositions(3, 100, 10.08, 45.02, 100),
      discPositions(4, 100, 9.92, 44.97, 100),
      discPositions(5, 60, 10, 45, 12000),
    ];
    const positions: [number, number][] = parts.flatMap((d) => d.lon.map((lon, i): [number, number] => [lon, d.lat[i]]));
    const result = clusterInput(
      collection(positions),
      'geojson',
      resolveSettings({ eps: 1000, min_points: 10, method: 'optics', optics_extraction: 'xi', optics_max_eps: 3000, min_cluster_size: 10 }),
    );
    const hulls = JSON.parse(result.layers.hotspots.text()).features as { geometry: Polygon }[];
    expect(hulls.length).toBeGreaterThanOrEqual(3);
    for (let a = 0; a < hulls.length; a++) {
      for (let b = a + 1; b < hulls.length; b++) {
        // source: Turf's polygon intersection (@turf/intersect), an independent geometry library
        const both = intersect(featureCollection([polygon(hulls[a].geometry.coordinates), polygon(hulls[b].geometry.coordinates)]));
        expect(both === null ? 0 : area(both), `hotspots ${a + 1} and ${b + 1}`).toBe(0);
      }
    }
  });
});

describe('observations without a usable time', () => {
  // 31 observations in one patch, dated in a "Datum" column written DD.MM.YYYY, two of them also
  // with an RFC 3339 observed_at (as when two rows came from another source)
  const rows = ['id,lon,lat,Datum,observed_at'];
  for (let i = 0; i < 31; i++) rows.push(`o${i},${8 + (i % 6) * 0.0002},${47 + Math.floor(i / 6) * 0.0002},${String(1 + (i % 28)).padStart(2, '0')}.03.2026,${i < 2 ? '2026-03-10T00:00:00Z' : ''}`);
  const csv = rows.join('\n') + '\n';
  const window = { since: '2026-03-01', until: '2026-04-01' };

  it('are counted and named in a warning when a window leaves them out', () => {
    const result = clusterInput(csv, 'csv', resolveSettings({ eps: 60, min_points: 3, ...window }));
    const s = result.summary as Summary & { input: Record<string, number> };
    expect(s.input.kept).toBe(2);
    expect(s.input.left_out_untimed).toBe(29);
    const w = s.warnings.find((x) => x.code === 'untimed-observations');
    expect(w?.message).toMatch(/^29 of 31 observations were left out because a time window applies and they have no time in "observed_at" as an RFC 3339 date-time\./);
    expect(w?.message).toMatch(/time_column and time_format/);
    // the warning comes first: it, not eps, is why so few were clustered
    expect(s.warnings[0]?.code).toBe('untimed-observations');
  });

  it('are read from the column the settings name, in its format', () => {
    const result = clusterInput(csv, 'csv', resolveSettings({ eps: 60, min_points: 3, ...window, time_column: 'Datum', time_format: 'DD.MM.YYYY' }));
    const s = result.summary as Summary & { input: Record<string, number> };
    expect(s.input.kept).toBe(31);
    expect(s.input.left_out_untimed).toBe(0);
    expect(s.warnings.map((w) => w.code)).not.toContain('untimed-observations');
    expect(s.hotspots).toHaveLength(1);
  });
});
