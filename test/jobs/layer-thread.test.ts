/**
 * A stored run's points and noise layers made in a worker thread (src/jobs/layer-thread.ts) are
 * the bytes the run's own thread makes, on SQLite and on PostgreSQL; the texts lent to the worker
 * come back whole; a run that reads the texts after the clustering (count_by) or runs OPTICS
 * makes its layers itself. Seeded: ROOST_SEED changes the observations (the seed in use is
 * printed).
 */
import { afterAll, afterEach, beforeAll, describe, expect, it, vi } from 'vitest';
import type { RunHooks } from '../../src/jobs/hooks.js';
import { createRoostHooks } from '../../src/jobs/run-hooks.js';
import { STORED_LAYER_THREAD, StoredLayerThread, type PointLayerPieces } from '../../src/jobs/layer-thread.js';
import { PackedTexts } from '../../src/storage/columns.js';
import type { ObservationRecord, Run, Store } from '../../src/storage/store.js';
import { postgresSkipReason, tempPostgresStore } from '../reference/postgres.js';
import { destination, rng } from '../reference/seeded.js';
import { record, SPECIES } from '../storage/fixtures.js';
import { runOnce, tempStore } from './helpers.js';

const SEED = Number(process.env.ROOST_SEED ?? 5);
const CLUMPS = 6;
const PER_CLUMP = 250;
const SCATTERED = 600;

/** Clumps of sightings 150 m across and others scattered over 20 km, with varied properties. */
function observations(seed: number): ObservationRecord[] {
  const r = rng(seed);
  const out: ObservationRecord[] = [];
  const centre: [number, number] = [152.9 + r.next() * 0.1, -27.5 + r.next() * 0.1];
  const props = (k: number): Record<string, unknown> => {
    const p: Record<string, unknown> = { species: SPECIES[k % SPECIES.length] };
    if (k % 3 === 0) p.note = `seen by é😀 team ${k}`;
    if (k % 5 === 0) p.nest = { height_m: k % 7, "q\"uote": [1, null, 'x\\y'] };
    return k % 11 === 0 ? {} : p;
  };
  for (let c = 0; c < CLUMPS; c++) {
    const [lon, lat] = destination(centre[0], centre[1], r.next() * 2 * Math.PI, 2_000 + r.next() * 8_000);
    for (let k = 0; k < PER_CLUMP; k++) {
      const [x, y] = destination(lon, lat, r.next() * 2 * Math.PI, r.next() * 75);
      out.push(record(`c${c}-${k}`, Math.round(x * 1e7) / 1e7, Math.round(y * 1e7) / 1e7, props(out.length)));
    }
  }
  for (let k = 0; k < SCATTERED; k++) {
    const [x, y] = destination(centre[0], centre[1], r.next() * 2 * Math.PI, r.next() * 20_000);
    out.push(record(`s${k}`, Math.round(x * 1e7) / 1e7, Math.round(y * 1e7) / 1e7, props(out.length)));
  }
  return out;
}

/** The worker forced on (whatever the size and the load) or off. */
function useThread(on: boolean): void {
  // (on PostgreSQL too, which does not use it by default: its texts reach the worker otherwise)
  STORED_LAYER_THREAD.stores = ['sqlite', 'postgres'];
  STORED_LAYER_THREAD.minObservations = on ? 0 : Infinity;
  STORED_LAYER_THREAD.minFreeCores = on ? -Infinity : 0.5;
}

const saved = { ...STORED_LAYER_THREAD, stores: [...STORED_LAYER_THREAD.stores] };
afterEach(() => {
  Object.assign(STORED_LAYER_THREAD, saved);
  vi.restoreAllMocks();
});

/** What the worker gave each run that asked it, in order (null: it made nothing). */
function watchThread(): () => Promise<(PointLayerPieces | null)[]> {
  const spy = vi.spyOn(StoredLayerThread.prototype, 'layers');
  return () => Promise.all(spy.mock.results.map((r) => r.value as Promise<PointLayerPieces | null>));
}

async function runLayers(store: Store, hooks: RunHooks, settings?: Record<string, unknown>): Promise<{ run: Run; layers: Record<string, string | null> }> {
  const run = await runOnce(store, 'birds', hooks, settings);
  expect(run.error).toBeNull();
  expect(run.status).toBe('succeeded');
  const layers: Record<string, string | null> = {};
  for (const name of ['points', 'noise', 'hotspots', 'centres'] as const) layers[name] = await store.getRunLayer(run.id, name);
  return { run, layers };
}

function storeSuite(name: string, engine: Store['engine'], open: () => Promise<{ store: Store; dispose: () => Promise<void> }>, skipReason: string | null): void {
  describe.skipIf(skipReason !== null)(`${name}: points layer in a worker thread${skipReason ? ` (skipped: ${skipReason})` : ''}`, () => {
    let store: Store;
    let dispose: () => Promise<void>;
    const hooks = createRoostHooks();
    beforeAll(async () => {
      ({ store, dispose } = await open());
      await store.createDataset({ id: 'birds', name: 'Birds', settings: { eps: 60, min_points: 5 }, idProperty: null, window: null, schedule: null, webhook: null });
      const stored = await store.ingest('birds', observations(SEED), { replace: false, partial: false });
      expect(stored.stored).toBe(true);
    });
    afterAll(async () => {
      await hooks.close();
      await dispose?.();
    });

    it('gives the bytes the run\'s own thread gives', async () => {
      const given = watchThread();
      useThread(false);
      const here = await runLayers(store, hooks);
      useThread(true);
      const there = await runLayers(store, hooks);
      const fromWorker = await given();
      // the worker made both layers (in pieces), not the run's thread
      expect(fromWorker).toHaveLength(1);
      expect(fromWorker[0]!.points.length).toBeGreaterThan(0);
      expect(fromWorker[0]!.noise.length).toBeGreaterThan(0);
      expect(Buffer.concat(fromWorker[0]!.points).toString('utf8')).toBe(here.layers.points);
      // (the hotspot layers of the second run tell its tracks' changes since the first)
      for (const layer of ['points', 'noise']) expect(there.layers[layer], layer).toBe(here.layers[layer]);
      const points = JSON.parse(there.layers.points!) as { features: { properties: Record<string, unknown> }[] };
      expect(points.features).toHaveLength(CLUMPS * PER_CLUMP + SCATTERED);
      expect(points.features.some((f) => f.properties.hotspot_id === null)).toBe(true);
      expect(points.features.filter((f) => typeof f.properties.note === 'string' && f.properties.note.includes('é😀')).length).toBeGreaterThan(0);
      expect((there.run.summary as { figures: { hotspots: number } }).figures.hotspots).toBe(CLUMPS);
    });

    it(`is ${engine === 'sqlite' ? '' : 'not '}used by default on ${name}`, async () => {
      const offered = vi.spyOn(StoredLayerThread.prototype, 'offer');
      // the size and the load left out of the choice, the stores as they are by default
      STORED_LAYER_THREAD.minObservations = 0;
      STORED_LAYER_THREAD.minFreeCores = -Infinity;
      await runLayers(store, hooks);
      expect(offered).toHaveBeenCalledTimes(engine === 'sqlite' ? 1 : 0);
    });

    it('is not asked when the run reads the texts after the clustering (count_by) or runs OPTICS', async () => {
      const started = vi.spyOn(StoredLayerThread, 'start');
      useThread(true);
      const counted = await runLayers(store, hooks, { eps: 60, min_points: 5, count_by: 'species' });
      const ordered = await runLayers(store, hooks, { eps: 60, min_points: 5, method: 'optics' });
      expect(started).not.toHaveBeenCalled();
      const hotspots = JSON.parse(counted.layers.hotspots!) as { features: { properties: Record<string, unknown> }[] };
      expect(Object.keys(hotspots.features[0]!.properties)).toContain(`count_${SPECIES[0]}`);
      expect(JSON.parse(ordered.layers.points!).features[0].properties).toHaveProperty('optics_order');
    });
  });
}

console.info(`stored layer thread seed ${SEED} (ROOST_SEED)`);

storeSuite('SQLite', 'sqlite', tempStore, null);
storeSuite('PostgreSQL', 'postgres', () => tempPostgresStore('roost_layer_thread'), await postgresSkipReason());

describe('lending packed texts', () => {
  it('lends the bytes, refuses reads while lent and reads the same texts once they are back', () => {
    const texts = new PackedTexts();
    // a buffer of its own (as SQLite's driver gives them): transferred
    const a = Buffer.from(new TextEncoder().encode('{"a":"é"}\n{"b":2}').buffer);
    expect(texts.addJoinedBytes(a, 2)).toBe(true);
    // a small buffer from Node's pool: copied to the other thread, not taken from the pool
    const pooled = Buffer.from('xx{"c":3}yy');
    expect(pooled.buffer.byteLength).toBeGreaterThan(pooled.length);
    expect(texts.addSpanBytes(pooled, Int32Array.of(2), Int32Array.of(9), 1)).toBe(true);
    const lent = texts.lend()!;
    expect(lent.transfer).toContain(a.buffer);
    expect(lent.transfer).not.toContain(pooled.buffer);
    expect(() => texts.at(0)).toThrow(/lent/);
    expect(() => texts.bytesOf(0)).toThrow(/lent/);
    expect(() => texts.lend()).toThrow(/lent already/);
    // what comes back from the other thread: copies of the same bytes
    const back = structuredClone(lent.texts, { transfer: lent.transfer });
    texts.restore(back);
    expect([...texts]).toEqual(['{"a":"é"}', '{"b":2}', '{"c":3}']);
  });

  it('lends nothing when a text is kept as a string', () => {
    const texts = new PackedTexts();
    texts.addJoined('{"a":1}\n{"b":2}', 2);
    expect(texts.lend()).toBeNull();
    expect(texts.at(1)).toBe('{"b":2}');
  });
});
