import { describe, expect, it } from 'vitest';
import { featureCollectionString, featureString } from '../../src/geometry/geojson.js';
import { featureSpans, indexLayer, matching } from '../../src/ogc/layer-index.js';
import { layerPage } from '../../src/ogc/layers.js';

describe('layer index', () => {
  it('cuts a collection into its features exactly as JSON.parse reads them, strings with brackets and quotes included', () => {
    const tricky = [
      featureString({ type: 'Point', coordinates: [1, 2] }, { note: 'a "quoted" ] } [ { text', features: [1, 2] }, 'x\\"y'),
      featureString({ type: 'Polygon', coordinates: [[[0, 0], [1, 0], [1, 1], [0, 0]]] }, { nested: { features: { a: [] } } }, 7),
      featureString(null, null, 'no geometry'),
      featureString({ type: 'Point', coordinates: [179.5, -3] }, { weight: 1.0, path: 'C:\\\\dir\\\\' }, 'back\\\\slash'),
    ];
    const text = featureCollectionString(tricky, [0, -3, 179.5, 2], { note: '"features":[', links: [{ rel: 'x' }] });
    const { spans } = featureSpans(text);
    const cut = [];
    for (let k = 0; k < spans.length; k += 2) cut.push(text.slice(spans[k], spans[k + 1]));
    expect(cut).toEqual(tricky);
    // the reference: JSON.parse of the whole text, each feature re-serialised both ways
    expect(cut.map((f) => JSON.parse(f))).toEqual((JSON.parse(text) as { features: unknown[] }).features);
    const index = indexLayer(text);
    expect(index.ids).toEqual(tricky.map((f) => String((JSON.parse(f) as { id: unknown }).id)));
    expect(index.bbox).toEqual([0, -3, 179.5, 2]);
  });

  it('filters by bbox and time and pages with a cursor, each matching feature once', () => {
    const features = Array.from({ length: 25 }, (_, i) =>
      featureString({ type: 'Point', coordinates: [-180 + i * 15, 0] }, { observed_at: `2026-04-${String(1 + i).padStart(2, '0')}T00:00:00Z` }, `o${i}`),
    );
    const index = indexLayer(featureCollectionString(features, null));
    // across the antimeridian: longitudes 150, 165, 180 and −180, −165
    const across = matching(index, { bbox: [150, -1, -165, 1], datetime: null })!.map((k) => index.ids[k]);
    expect(across).toEqual(['o0', 'o1', 'o22', 'o23', 'o24']);
    const april = matching(index, { bbox: null, datetime: { from: Date.parse('2026-04-10T00:00:00Z'), to: Date.parse('2026-04-12T00:00:00Z') + 1 } })!.map((k) => index.ids[k]);
    expect(april).toEqual(['o9', 'o10', 'o11']);
    const seen: string[] = [];
    let cursor: string | null = null;
    do {
      const page = layerPage(index, { bbox: null, datetime: null, limit: 7, cursor });
      expect(page.matched).toBe(25);
      expect(page.features.length).toBeLessThanOrEqual(7);
      seen.push(...page.features);
      cursor = page.next;
    } while (cursor !== null);
    expect(seen).toEqual(features);
  });
});
