/**
 * What a stored run says about its input: observations a window left out for want of a time,
 * and medoid ids that are observation ids when the dataset names an id property.
 */
import { afterEach, beforeEach, describe, expect, it } from 'vitest';
import { createRoostHooks, type RoostHooks } from '../../src/jobs/run-hooks.js';
import type { Store } from '../../src/storage/store.js';
import { fromText } from '../storage/fixtures.js';
import { DATASET, grid, runOnce, tempStore } from './helpers.js';

const ORIGIN: [number, number] = [13.4, 52.5];
const KEEP = { replace: false, partial: false };

describe('stored runs', () => {
  let store: Store;
  let dispose: () => Promise<void>;
  let hooks: RoostHooks;
  beforeEach(async () => {
    ({ store, dispose } = await tempStore());
    hooks = createRoostHooks();
  });
  afterEach(async () => {
    await hooks.close();
    await dispose();
  });

  it('count and name the observations a window left out because they have no time', async () => {
    await store.createDataset({ ...DATASET, window: 'P3650D' });
    const now = Date.now();
    const timed = grid('T', ORIGIN, 0, 0, 2, 2).map((r) => ({ ...r, observedAt: now - 86_400_000 }));
    const untimed = grid('U', ORIGIN, 0, 0, 3, 3); // the same place, no observed_at
    await store.ingest(DATASET.id, [...timed, ...untimed], KEEP);
    const run = await runOnce(store, DATASET.id, hooks);
    expect(run.status).toBe('succeeded');
    const summary = run.summary as { input: Record<string, unknown>; warnings: { code: string; message: string }[] };
    expect(summary.input.kept).toBe(4);
    expect(summary.input.left_out_untimed).toBe(9);
    expect(summary.warnings[0]?.code).toBe('untimed-observations');
    expect(summary.warnings[0]?.message).toMatch(/^9 of 13 observations were left out because a time window applies/);
  });

  it('fail with the reason when the window leaves nothing but untimed observations', async () => {
    await store.createDataset({ ...DATASET, window: 'P30D' });
    await store.ingest(DATASET.id, grid('U', ORIGIN, 0, 0, 3, 3), KEEP);
    const run = await runOnce(store, DATASET.id, hooks);
    expect(run.status).toBe('failed');
    expect(run.error).toMatch(/9 observation\(s\) have no readable time and a time window applies: name their time with the dataset's time_column and time_format/);
  });

  it('give the medoid as an observation id when the dataset names an id property', async () => {
    await store.createDataset({ ...DATASET, idProperty: 'ref' });
    // ids live in the property "ref"; the features carry no GeoJSON id
    const records = grid('x', ORIGIN, 0, 0, 3, 3).map((r, k) => {
      const [lon, lat] = [r.lon, r.lat];
      return fromText(`nest-${k}`, lon, lat, JSON.stringify({ type: 'Feature', geometry: { type: 'Point', coordinates: [lon, lat] }, properties: { ref: `nest-${k}` } }));
    });
    await store.ingest(DATASET.id, records, KEEP);
    const run = await runOnce(store, DATASET.id, hooks);
    const hotspots = (run.summary as { hotspots: { medoid_id: unknown; count: number }[] }).hotspots;
    expect(hotspots).toHaveLength(1);
    // the centre of a 3 × 3 grid is its middle observation, the fifth
    expect(hotspots[0]!.medoid_id).toBe('nest-4');
  });
});
