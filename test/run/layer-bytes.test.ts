/**
 * The points and noise layers written as bytes from the byte reader's spans are byte for byte the
 * layers the parsing reader's features give (the promise that outputs do not change), on seeded
 * observations whose properties, ids and coordinates take the forms a copy could get wrong:
 * escapes, non-ASCII text, nested objects, numbers not written as JSON.stringify writes them,
 * altitudes, properties already named hotspot_id, missing and null members. The same for the
 * layers of a stored run written from stored feature texts kept as UTF-8 bytes (SQLite and
 * PostgreSQL hand them over as bytes), over more than one chunk of bytes.
 *
 * Seed: ROOST_SEED (printed).
 */
import { describe, expect, it } from 'vitest';
import { clusterInput, clusterObservations } from '../../src/run/cluster.js';
import { resolveSettings } from '../../src/run/settings.js';
import { readGeoJson } from '../../src/ingest/geojson.js';
import { DEFAULT_TIME_RULE } from '../../src/ingest/checks.js';
import { PackedTexts } from '../../src/storage/columns.js';
import { rng } from '../reference/seeded.js';

const SEED = Number(process.env.ROOST_SEED ?? 16);

const PROPERTIES = [
  '{"species":"heron","observed_at":"2024-05-01T06:30:00Z"}',
  '{"species":"Reiher über dem Teich","n":3}',
  '{"note":"tab\\there \\"quoted\\" \\\\ back"}',
  '{"note":"\\u00e9t\\u00e9 \\/ slash"}',
  '{"count":1.50,"big":1E3,"neg":-0}',
  '{"nested":{"b":1,"a":[1,{"c":null}]}}',
  '{"b":1,"2":"x","1":"y"}',
  '{"dup":1,"dup":2}',
  '{"hotspot_id":"old","role":"kept?"}',
  '{ "spaced" : [ 1 , 2 ] }',
  '{"emoji":"🐦","sep":"\u2028"}',
  '{}',
  'null',
  '',
];
const IDS = ['', '"a1"', '7', '7.0', '1e2', 'null', '"\\u0041"', '"tab\\t"', '"鷺"'];

function input(r: () => number, n: number): string {
  const features: string[] = [];
  for (let i = 0; i < n; i++) {
    // three tight patches and scattered noise
    const patch = Math.floor(r() * 4);
    const lon = patch < 3 ? 8 + patch * 0.1 + (r() - 0.5) * 0.004 : 7 + r() * 3;
    const lat = patch < 3 ? 51 + (r() - 0.5) * 0.004 : 50 + r() * 3;
    const coords = r() < 0.2 ? `[${lon},${lat},${Math.round(r() * 500)}]` : r() < 0.1 ? `[${lon.toExponential()}, ${lat}]` : `[${lon},${lat}]`;
    const props = PROPERTIES[Math.floor(r() * PROPERTIES.length)]!;
    const id = IDS[Math.floor(r() * IDS.length)]!;
    const members = [`"type":"Feature"`, `"geometry":{"type":"Point","coordinates":${coords}}`];
    if (props !== '') members.push(`"properties":${props}`);
    if (id !== '') members.push(`"id":${id}`);
    if (r() < 0.5) members.reverse();
    features.push(`{${members.join(',')}}`);
  }
  return `{"type":"FeatureCollection","features":[\n${features.join(',\n')}\n]}`;
}

describe('point layers written from the input bytes', () => {
  for (const method of ['dbscan', 'optics'] as const) {
    it(`are the parsing reader's layers byte for byte (${method})`, () => {
      console.info(`layer bytes seed ${SEED} (ROOST_SEED)`);
      const text = input(rng(SEED).next, 600);
      const settings = resolveSettings({ eps: 300, min_points: 4, method });
      const fast = clusterInput(Buffer.from(text), 'geojson', settings);
      expect('spans' in fast.observations).toBe(true);
      const parsed = clusterObservations(readGeoJson(text, null, 100, Number.MAX_SAFE_INTEGER, DEFAULT_TIME_RULE), settings);
      expect(parsed.summary.figures).toEqual(fast.summary.figures);
      expect((fast.summary.figures as { hotspots: number }).hotspots).toBeGreaterThan(1);
      for (const name of ['points', 'noise', 'hotspots', 'centres'] as const) {
        const expected = parsed.layers[name].text();
        expect(fast.layers[name].text(), name).toBe(expected);
        expect(Buffer.concat([...fast.layers[name].byteChunks()]).equals(Buffer.from(expected, 'utf8')), name).toBe(true);
        expect(Buffer.concat([...parsed.layers[name].byteChunks()]).equals(Buffer.from(expected, 'utf8')), name).toBe(true);
      }
    });
  }

  it('from stored texts kept as bytes are the layers written from the texts, over several chunks', () => {
    console.info(`layer bytes seed ${SEED} (ROOST_SEED)`);
    const observations = readGeoJson(input(rng(SEED + 1).next, 9000), null, 100, Number.MAX_SAFE_INTEGER, DEFAULT_TIME_RULE);
    // the stored text of a feature is JSON.stringify of the parsed feature (src/ingest/records.ts)
    const texts = observations.features.map((f) => JSON.stringify(f));
    const packed = new PackedTexts();
    expect(packed.addJoinedBytes(Buffer.from(texts.join('\n'), 'utf8'), texts.length)).toBe(true);
    const settings = resolveSettings({ eps: 300, min_points: 4 });
    const stored = clusterObservations(observations, settings, {}, undefined, {}, packed);
    const parsed = clusterObservations(observations, settings);
    for (const name of ['points', 'noise'] as const) {
      const expected = parsed.layers[name].text();
      expect(stored.layers[name].writesBytes, name).toBe(true);
      const chunks = [...stored.layers[name].byteChunks()];
      if (name === 'points') expect(chunks.length).toBeGreaterThan(1);
      expect(Buffer.concat(chunks).equals(Buffer.from(expected, 'utf8')), name).toBe(true);
      expect(stored.layers[name].text(), name).toBe(expected);
    }
  });
});
