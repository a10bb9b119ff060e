/**
 * The points and noise layers written in a worker thread (src/cli/layer-thread.ts) against the
 * same command writing them on its own thread: byte for byte the same result folders, on seeded
 * random GeoJSON (ids of every kind, properties that are and are not written verbatim, altitudes),
 * GeoJSON text sequences and CSV; and when the worker is not offered the layers or fails, the
 * command writes them itself with the same bytes.
 *
 * Seed: ROOST_SEED (printed).
 */
import { mkdtempSync, readFileSync, readdirSync, rmSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { afterAll, afterEach, beforeAll, describe, expect, it, vi } from 'vitest';
import { LAYER_THREAD, PointLayerThread } from '../../src/cli/layer-thread.js';
import { run } from '../../src/cli/main.js';
import type { CsvObservations } from '../../src/ingest/csv-bytes.js';
import type { SpannedObservations } from '../../src/ingest/geojson-bytes.js';
import { readObservations } from '../../src/ingest/read.js';
import { InputFile } from '../../src/ingest/source.js';
import { rng, type Rng } from '../reference/seeded.js';

const SEED = Number(process.env.ROOST_SEED ?? 1604);
const dir = mkdtempSync(join(tmpdir(), 'roost-layer-thread-'));
const saved = { ...LAYER_THREAD };

/** A random property value: canonical JSON or not, nested or not, with characters to escape. */
function value(r: Rng): string {
  switch (r.int(7)) {
    case 0:
      return String(r.int(1000));
    case 1:
      return (r.next() * 100).toFixed(r.int(4));
    case 2:
      return JSON.stringify(['a', 'é', 'x"y', 'tab\there', '🦉'][r.int(5)]);
    case 3:
      return 'null';
    case 4:
      return r.next() < 0.5 ? 'true' : 'false';
    case 5:
      return `{"k": ${r.int(9)}}`;
    default:
      return '1.50e1';
  }
}

/** A random feature around one of a few centres (so there are hotspots and noise). */
function feature(r: Rng, i: number): { id: string | null; props: string; lon: number; lat: number; alt: number | null } {
  const centre = r.int(5);
  const spread = centre === 4 ? 0.3 : 0.002;
  const lon = 8 + centre * 0.05 + r.normal() * spread;
  const lat = 50 + centre * 0.03 + r.normal() * spread;
  const kind = r.int(5);
  const id = kind === 0 ? null : kind === 1 ? String(i * 3) : kind === 2 ? `${(i * 1.5).toFixed(1)}` : JSON.stringify(`f-${i}${r.next() < 0.1 ? 'ü' : ''}`);
  const n = r.int(4);
  const members: string[] = [];
  for (let k = 0; k < n; k++) members.push(`${r.next() < 0.1 ? ' ' : ''}"p${k}":${r.next() < 0.1 ? ' ' : ''}${value(r)}`);
  if (r.next() < 0.05) members.push(`"role":"x"`);
  const props = r.next() < 0.1 ? 'null' : `{${members.join(',')}}`;
  return { id, props, lon, lat, alt: r.next() < 0.05 ? Math.round(r.next() * 1000) / 10 : null };
}

function writeInputs(seed: number): { geojson: string; seq: string; csv: string } {
  const r = rng(seed);
  const features: string[] = [];
  const csvRows = ['id,longitude,latitude,species,count'];
  for (let i = 0; i < 3000; i++) {
    const f = feature(r, i);
    const position = [f.lon.toFixed(7), f.lat.toFixed(7), ...(f.alt === null ? [] : [String(f.alt)])].join(',');
    const id = f.id === null ? '' : `"id":${f.id},`;
    features.push(`{"type":"Feature",${id}"properties":${f.props},"geometry":{"type":"Point","coordinates":[${position}]}}`);
    csvRows.push(`c${i},${f.lon.toFixed(7)},${f.lat.toFixed(7)},${['owl', 'kite', 'tit'][r.int(3)]},${r.int(20)}`);
  }
  const geojson = join(dir, `in-${seed}.geojson`);
  const seq = join(dir, `in-${seed}.geojsonl`);
  const csv = join(dir, `in-${seed}.csv`);
  writeFileSync(geojson, `{"type":"FeatureCollection","features":[\n${features.join(',\n')}\n]}\n`);
  writeFileSync(seq, features.join('\n') + '\n');
  writeFileSync(csv, csvRows.join('\n') + '\n');
  return { geojson, seq, csv };
}

/** Every file of a result folder, summary.json without its timings. */
function folder(path: string): Record<string, string> {
  const out: Record<string, string> = {};
  for (const name of readdirSync(path).sort()) {
    const text = readFileSync(join(path, name), 'utf8');
    out[name] = name === 'summary.json' ? text.replace(/"timings_ms": \{[^}]*\}/, '"timings_ms": {}') : text;
  }
  return out;
}

let count = 0;
/** Runs `roost cluster` with the worker (when it is offered the layers) or without; returns the result folder. */
async function cluster(input: string, withThread: boolean, extra: string[] = []): Promise<Record<string, string>> {
  LAYER_THREAD.minBytes = withThread ? 0 : Number.POSITIVE_INFINITY;
  // whatever else runs on the machine meanwhile
  LAYER_THREAD.minFreeCores = Number.NEGATIVE_INFINITY;
  const out = join(dir, `out-${count++}`);
  expect(await run(['cluster', input, '--eps', '300', '--min-points', '4', ...extra, '--out-dir', out])).toBe(0);
  return folder(out);
}

describe('point layers written in a worker thread', () => {
  let inputs: { geojson: string; seq: string; csv: string };
  beforeAll(() => {
    console.info(`layer thread seed ${SEED} (ROOST_SEED)`);
    inputs = writeInputs(SEED);
  });
  afterEach(() => {
    Object.assign(LAYER_THREAD, saved);
    vi.restoreAllMocks();
  });
  afterAll(() => rmSync(dir, { recursive: true, force: true }));

  for (const kind of ['geojson', 'seq', 'csv'] as const) {
    it(`writes the same bytes as the calling thread (${kind})`, async () => {
      const done = vi.spyOn(PointLayerThread.prototype, 'done');
      const threaded = await cluster(inputs[kind], true, ['--count-by', kind === 'csv' ? 'species' : 'p0']);
      expect(done).toHaveBeenCalledTimes(1);
      // the worker really wrote the layers
      expect(await done.mock.results[0]!.value).toBe(true);
      const alone = await cluster(inputs[kind], false, ['--count-by', kind === 'csv' ? 'species' : 'p0']);
      expect(Object.keys(threaded)).toEqual(Object.keys(alone));
      for (const name of Object.keys(alone)) expect(threaded[name] === alone[name], `${kind} ${name} differs`).toBe(true);
      expect(JSON.parse(threaded['summary.json']!).figures.noise).toBeGreaterThan(0);
    });
  }

  it('is handed the readers\' spans and positions in shared memory, not copies', () => {
    for (const kind of ['geojson', 'seq', 'csv'] as const) {
      const obs = readObservations(new InputFile(inputs[kind]), { format: kind === 'seq' ? 'geojson-seq' : kind });
      const spans = (obs as Partial<SpannedObservations>).spans;
      const rows = (obs as Partial<CsvObservations>).csvRows;
      const columns = [obs.points.lon, obs.points.lat, ...(spans ? [spans.featureStart, spans.idStart, spans.propertiesEnd, spans.verbatim] : [rows!.rowStart, rows!.rowEnd, rows!.verbatim])];
      for (const c of columns) expect(c.buffer, kind).toBeInstanceOf(SharedArrayBuffer);
      // a structured clone (what postMessage sends) shares the memory
      const clone = structuredClone(obs.points.lon);
      clone[0] = 1234.5;
      expect(obs.points.lon[0], kind).toBe(1234.5);
    }
  });

  it('leaves the layers to the calling thread when none are offered (OPTICS adds members of its own)', async () => {
    const done = vi.spyOn(PointLayerThread.prototype, 'done');
    const threaded = await cluster(inputs.geojson, true, ['--method', 'optics']);
    expect(await done.mock.results[0]!.value).toBe(false);
    const alone = await cluster(inputs.geojson, false, ['--method', 'optics']);
    for (const name of Object.keys(alone)) expect(threaded[name] === alone[name], `${name} differs`).toBe(true);
  });

  it('writes the layers itself, the same bytes, when the worker stops before it is done', async () => {
    const offer = PointLayerThread.prototype.offer;
    vi.spyOn(PointLayerThread.prototype, 'offer').mockImplementation(function (this: PointLayerThread, ...args) {
      offer.apply(this, args);
      void this.stop();
    });
    const done = vi.spyOn(PointLayerThread.prototype, 'done');
    const threaded = await cluster(inputs.geojson, true);
    expect(await done.mock.results[0]!.value).toBe(false);
    const alone = await cluster(inputs.geojson, false);
    for (const name of Object.keys(alone)) expect(threaded[name] === alone[name], `${name} differs`).toBe(true);
  });
});
