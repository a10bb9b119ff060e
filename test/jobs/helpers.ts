/**
 * Helpers for the run-job tests: a fresh SQLite store in a temporary folder, small groups of
 * observations placed by metre offsets, and one run executed in-process with the tracking hooks.
 */
import { mkdtempSync, rmSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { EARTH_RADIUS_M } from '../../src/core/haversine.js';
import { executeRun } from '../../src/jobs/execute.js';
import type { RunHooks } from '../../src/jobs/hooks.js';
import { openSqliteStore } from '../../src/storage/sqlite.js';
import type { Dataset, NewDataset, ObservationRecord, Run, Store } from '../../src/storage/store.js';
import { record } from '../storage/fixtures.js';

/** A migrated SQLite store in its own temporary folder; `dispose` closes and removes it. */
export async function tempStore(): Promise<{ store: Store; path: string; dispose: () => Promise<void> }> {
  const dir = mkdtempSync(join(tmpdir(), 'roost-jobs-'));
  const path = join(dir, 'roost.db');
  const store = openSqliteStore({ path });
  await store.migrate();
  return {
    store,
    path,
    async dispose() {
      await store.close();
      rmSync(dir, { recursive: true, force: true });
    },
  };
}

export const DATASET: NewDataset = { id: 'nests', name: 'Nests', settings: { eps: 120, min_points: 4 }, idProperty: null, window: null, schedule: null, webhook: null };

/** Metres per degree of latitude on the IUGG mean sphere. */
const M_PER_DEG = (Math.PI / 180) * EARTH_RADIUS_M;

/** The position `eastM` metres east and `northM` metres north of [lon, lat] (small offsets). */
export function offset(lon: number, lat: number, eastM: number, northM: number): [number, number] {
  return [lon + eastM / (M_PER_DEG * Math.cos((lat * Math.PI) / 180)), lat + northM / M_PER_DEG];
}

/**
 * Observations on a grid of `cols` × `rows` points `stepM` metres apart, the first at `eastM`,
 * `northM` from the origin; ids `${prefix}-${k}`.
 */
export function grid(prefix: string, origin: [number, number], eastM: number, northM: number, cols: number, rows: number, stepM = 20): ObservationRecord[] {
  const out: ObservationRecord[] = [];
  for (let c = 0; c < cols; c++) {
    for (let r = 0; r < rows; r++) {
      const [lon, lat] = offset(origin[0], origin[1], eastM + c * stepM, northM + r * stepM);
      out.push(record(`${prefix}-${out.length}`, Math.round(lon * 1e7) / 1e7, Math.round(lat * 1e7) / 1e7));
    }
  }
  return out;
}

/** Creates a run for the dataset, claims it and executes it in this thread with `hooks`; returns the final run. */
export async function runOnce(store: Store, datasetId: string, hooks: RunHooks, settings?: Record<string, unknown>): Promise<Run> {
  const dataset = (await store.getDataset(datasetId)) as Dataset;
  const created = await store.createRun({ datasetId, settings: settings ?? dataset.settings, trigger: 'command' });
  const run = await store.claimNextRun('test');
  if (run === null || run.id !== created.id) throw new Error('another run was queued');
  try {
    await executeRun(store, run, dataset, { assignTracks: (h) => hooks.assignTracks({ store, dataset, run }, h) });
    const done = (await store.getRun(datasetId, run.id))!;
    await hooks.afterRun({ store, dataset, run }, { status: 'succeeded', summary: done.summary, error: null });
    return done;
  } catch (e) {
    const failed = await store.updateRun(run.id, { status: 'failed', error: (e as Error).message, finishedAt: new Date().toISOString() });
    await hooks.afterRun({ store, dataset, run }, { status: 'failed', summary: null, error: (e as Error).message });
    return failed;
  }
}

/** Features of a stored layer. */
export async function layerFeatures(store: Store, runId: string, layer: 'hotspots' | 'centres'): Promise<{ id?: unknown; geometry: { type: string; coordinates: unknown }; properties: Record<string, unknown> }[]> {
  return (JSON.parse((await store.getRunLayer(runId, layer))!) as { features: never[] }).features;
}
