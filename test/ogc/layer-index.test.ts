import { describe, expect, it } from 'vitest';
import { featureCollectionString, featureString } from '../../src/geometry/geojson.js';
import { createJobPool } from '../../src/jobs/job-pool.js';
import { featureSpans, indexLayer, indexParts, matching } from '../../src/ogc/layer-index.js';
import { indexLayersWith, layerIndex, layerPage } from '../../src/ogc/layers.js';
import { openSqliteStore } from '../../src/storage/sqlite.js';

const ids = (index: { count: number; idOf(k: number): string }): string[] => Array.from({ length: index.count }, (_, k) => index.idOf(k));

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
    expect(ids(index)).toEqual(tricky.map((f) => String((JSON.parse(f) as { id: unknown }).id)));
    expect(Array.from({ length: index.count }, (_, k) => index.feature(k))).toEqual(tricky);
    expect(index.find('no geometry')).toBe(2);
    expect(index.find('7')).toBe(1);
    expect(index.find('no')).toBe(-1);
    expect(index.bbox).toEqual([0, -3, 179.5, 2]);
  });

  it('filters by bbox and time and pages with a cursor, each matching feature once', () => {
    const features = Array.from({ length: 25 }, (_, i) =>
      featureString({ type: 'Point', coordinates: [-180 + i * 15, 0] }, { observed_at: `2026-04-${String(1 + i).padStart(2, '0')}T00:00:00Z` }, `o${i}`),
    );
    const index = indexLayer(featureCollectionString(features, null));
    // across the antimeridian: longitudes 150, 165, 180 and −180, −165
    const across = matching(index, { bbox: [150, -1, -165, 1], datetime: null })!.map((k) => index.idOf(k));
    expect(across).toEqual(['o0', 'o1', 'o22', 'o23', 'o24']);
    const april = matching(index, { bbox: null, datetime: { from: Date.parse('2026-04-10T00:00:00Z'), to: Date.parse('2026-04-12T00:00:00Z') + 1 } })!.map((k) => index.idOf(k));
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

  it('cuts features out of the bytes exactly as out of the text, characters of two, three and four bytes included', () => {
    const features = Array.from({ length: 40 }, (_, i) =>
      featureString({ type: 'Point', coordinates: [8.5 + i / 1000, 47.3] }, { place: ['Zürich', 'Genève 😀', 'a\u2028b', '東京', 'plain'][i % 5], n: i }, `ü${i}😀`),
    );
    const text = featureCollectionString(features, null);
    expect(Buffer.byteLength(text)).toBeGreaterThan(text.length);
    const index = indexLayer(text);
    expect(index.count).toBe(40);
    expect(Array.from({ length: 40 }, (_, k) => index.feature(k))).toEqual(features);
    expect(ids(index)).toEqual(Array.from({ length: 40 }, (_, i) => `ü${i}😀`));
    expect(index.find('ü17😀')).toBe(17);
    expect(index.find('ü17')).toBe(-1);
    expect(index.bytes).toBe(Buffer.byteLength(text));
  });

  it('is made in a job thread from bytes shared with it, the same as made here', async () => {
    const features = Array.from({ length: 300 }, (_, i) =>
      featureString({ type: 'Point', coordinates: [8.5 + (i % 17) / 100, 47.3 + (i % 13) / 100] }, { observed_at: `2026-04-${String(1 + (i % 28)).padStart(2, '0')}T00:00:00Z`, name: `Zürich ${i}` }, `o${i}`),
    );
    const text = featureCollectionString(features, [8.5, 47.3, 8.66, 47.42]);
    const shared = Buffer.from(new SharedArrayBuffer(Buffer.byteLength(text)));
    shared.write(text);
    const pool = createJobPool(1);
    try {
      const there = await pool.index(shared);
      const here = indexParts(Buffer.from(text));
      expect(there.spans).toEqual(here.spans);
      expect(there.ids).toBe(here.ids);
      expect(there.idEnds).toEqual(here.idEnds);
      expect(there.boxes).toEqual(here.boxes);
      expect(there.times).toEqual(here.times);
      expect(there.bbox).toEqual([8.5, 47.3, 8.66, 47.42]);
      expect(there.interval).toEqual(here.interval);
    } finally {
      await pool.close();
    }
  });

  it("indexes a stored run's layer with the store's indexer, from the stored bytes shared with it", async () => {
    const store = openSqliteStore({ path: ':memory:' });
    await store.migrate();
    try {
      await store.createDataset({ id: 'ix', name: 'ix', settings: { eps: 50 }, idProperty: null, window: null, schedule: null, webhook: null });
      await store.createRun({ datasetId: 'ix', settings: { eps: 50 }, trigger: 'request' });
      const run = (await store.claimNextRun('w'))!;
      const features = Array.from({ length: 50 }, (_, i) => featureString({ type: 'Point', coordinates: [i / 10, 0] }, { place: 'Genève' }, `p${i}`));
      const text = featureCollectionString(features, null);
      const empty = featureCollectionString([], null);
      // in pieces, one boundary inside a feature
      await store.saveRunResult(run.id, { layers: { points: [text.slice(0, 1000), text.slice(1000)], hotspots: empty, centres: empty, noise: empty }, hotspots: [] });
      const given: Uint8Array[] = [];
      indexLayersWith(store, async (bytes) => {
        given.push(bytes);
        return indexParts(bytes);
      });
      const index = await layerIndex(store, run.id, 'points');
      expect(given.length).toBe(1);
      expect(given[0]!.buffer).toBeInstanceOf(SharedArrayBuffer);
      expect(Buffer.from(given[0]!).toString('utf8')).toBe(text);
      expect(Array.from({ length: index.count }, (_, k) => index.feature(k))).toEqual(features);
      // cached: asked again, not indexed again
      await layerIndex(store, run.id, 'points');
      expect(given.length).toBe(1);
    } finally {
      await store.close();
    }
  });
});
