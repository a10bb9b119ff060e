import { describe, expect, it } from 'vitest';
import { categoryNames, HOTSPOT_FIELDS, hotspotLayerFields, hotspotPropertiesText, propertiesJsonSchema, realText } from '../../src/geometry/layer-fields.js';

describe('layer fields', () => {
  it('writes reals with a decimal point or an exponent, and reads back the same number', () => {
    // source: RFC 8259 §6 (number grammar: int [frac] [exp]); GDAL's GeoJSON reader types a
    // number written without frac or exp as an integer (from memory of its OGRGeoJSONReader).
    const cases: [number, string][] = [[1, '1.0'], [0, '0.0'], [-3, '-3.0'], [0.5, '0.5'], [2054.303, '2054.303'], [1e21, '1e+21'], [2.5e-7, '2.5e-7']];
    for (const [x, text] of cases) {
      expect(realText(x)).toBe(text);
      expect(JSON.parse(realText(x))).toBe(x);
      expect(realText(x)).toMatch(/[.eE]/);
    }
    expect(() => realText(NaN)).toThrow(/finite/);
  });

  it('flattens a hotspot: centre_lon/centre_lat, one count per category (0 where absent), ids as strings', () => {
    const a = { hotspot_id: 1, track_id: null, count: 3, core_count: 3, border_count: 0, weight: 3, area_km2: 1, density_per_km2: 3, weight_density_per_km2: 3, radius_m: 10, centre: [8.5, 47], medoid_id: 'x', first_observed_at: null, last_observed_at: null, categories: { wren: 3 } };
    const b = { ...a, hotspot_id: 2, track_id: 't000002', weight: 2.5, centre: [-8.25, 47.125], categories: { robin: 1, 'ash tree': 2 } };
    const names = categoryNames([a, b]);
    expect(names).toEqual(['ash tree', 'robin', 'wren']);
    const ta = hotspotPropertiesText(a, names);
    expect(ta).toContain('"weight":3.0');
    expect(ta).toContain('"centre_lon":8.5,"centre_lat":47.0');
    const pa = JSON.parse(ta);
    const pb = JSON.parse(hotspotPropertiesText(b, names));
    // the same field names in the same order for every hotspot of the run
    expect(Object.keys(pa)).toEqual(hotspotLayerFields(names).map((f) => f.name));
    expect(Object.keys(pb)).toEqual(Object.keys(pa));
    expect(pa).toMatchObject({ count_wren: 3, count_robin: 0, 'count_ash tree': 0, medoid_id: 'x' });
    expect(pb).toMatchObject({ count_wren: 0, count_robin: 1, 'count_ash tree': 2, track_id: 't000002', centre_lon: -8.25 });
    for (const p of [pa, pb]) for (const v of Object.values(p)) expect(typeof v === 'object' && v !== null).toBe(false);
  });

  it('refuses a missing required value and a fractional integer', () => {
    expect(() => hotspotPropertiesText({ hotspot_id: 1, centre: [0, 0] }, [])).toThrow(/count: a value is required/);
    expect(() => hotspotPropertiesText({ hotspot_id: 1.5, centre: [0, 0] }, [])).toThrow(/not a whole number/);
  });

  it('describes every field in a JSON Schema', () => {
    const schema = propertiesJsonSchema(HOTSPOT_FIELDS, 'hotspots') as { required: string[]; properties: Record<string, { type: unknown }> };
    expect(schema.required).toEqual(HOTSPOT_FIELDS.map((f) => f.name));
    expect(schema.properties['track_id']!.type).toEqual(['string', 'null']);
    expect(schema.properties['weight']!.type).toBe('number');
    expect(schema.properties['hotspot_id']!.type).toBe('integer');
  });
});
