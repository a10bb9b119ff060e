/**
 * A stored run executed in a job thread matches its tracks in that thread when the hooks allow it
 * (RunHooks.tracksInThread), with the thread's own store connection: the main thread's track step
 * is never asked, and the run's hotspots, track ids and changes are the same, byte for byte, as
 * those of the same runs with the tracks matched on the main thread.
 */
import { afterEach, describe, expect, it } from 'vitest';
import type { RunHooks } from '../../src/jobs/hooks.js';
import { createJobPool, type JobPool } from '../../src/jobs/job-pool.js';
import { createRoostHooks } from '../../src/jobs/run-hooks.js';
import { Runner } from '../../src/jobs/runner.js';
import type { Store } from '../../src/storage/store.js';
import { DATASET, grid, runOnce, tempStore } from './helpers.js';

const ORIGIN: [number, number] = [-3.2, 55.95];
const KEEP = { replace: false, partial: false };
const X = grid('X', ORIGIN, 0, 0, 3, 3);
const Y = grid('Y', ORIGIN, 3000, 0, 3, 4);

const disposers: (() => Promise<void>)[] = [];
afterEach(async () => {
  while (disposers.length > 0) await disposers.pop()!();
});

/** Two runs: X and Y, then X alone (Y's track ends). */
async function twoRuns(store: Store, run: () => Promise<string>): Promise<string[]> {
  await store.createDataset(DATASET);
  await store.ingest(DATASET.id, [...X, ...Y], KEEP);
  const first = await run();
  for (const r of Y) await store.deleteObservation(DATASET.id, r.id);
  return [first, await run()];
}

/** What a run left that tracks decide: its hotspots layer and its changes. */
async function outcome(store: Store, runId: string): Promise<{ hotspots: string | null; changes: unknown; tracks: (string | null)[] }> {
  const run = (await store.getRun(DATASET.id, runId))!;
  expect(run.status).toBe('succeeded');
  return { hotspots: await store.getRunLayer(runId, 'hotspots'), changes: run.summary!['changes'], tracks: (await store.getRunHotspots(runId)).map((h) => h.trackId) };
}

describe('tracks matched in the job thread', () => {
  it('never ask the main thread, and give what matching on the main thread gives', async () => {
    const roost = createRoostHooks();
    disposers.push(() => roost.close());
    // on the main thread, one run after another
    const here = await tempStore();
    disposers.push(here.dispose);
    const hereRuns = await twoRuns(here.store, async () => (await runOnce(here.store, DATASET.id, roost)).id);

    // in a job thread, through the run queue; the main thread's track step refuses to work
    const there = await tempStore();
    disposers.push(there.dispose);
    const pool: JobPool = createJobPool(1);
    disposers.push(() => pool.close());
    let askedHere = 0;
    let done: (status: string) => void = () => undefined;
    const hooks: RunHooks = {
      tracksInThread: roost.tracksInThread,
      async assignTracks() {
        askedHere++;
        throw new Error('the main thread was asked for tracks');
      },
      async afterRun(_ctx, o) {
        done(o.status);
      },
    };
    const runner = new Runner({ store: there.store, hooks, concurrency: 1, storeConfig: { sqlitePath: there.path }, pool, pollMs: 60_000 });
    disposers.push(() => runner.close());
    runner.start();
    const thereRuns = await twoRuns(there.store, async () => {
      const finished = new Promise<string>((resolve) => (done = resolve));
      const run = await there.store.createRun({ datasetId: DATASET.id, settings: DATASET.settings, trigger: 'command' });
      runner.wake();
      expect(await finished).toBe('succeeded');
      return run.id;
    });

    expect(askedHere).toBe(0);
    expect(thereRuns).toEqual(hereRuns);
    const [a1, a2] = [await outcome(here.store, hereRuns[0]!), await outcome(here.store, hereRuns[1]!)];
    const [b1, b2] = [await outcome(there.store, thereRuns[0]!), await outcome(there.store, thereRuns[1]!)];
    expect(a2.tracks).toEqual(['t000001']);
    expect((a2.changes as { counts: Record<string, number> }).counts.disappearance).toBe(1);
    expect(b1).toEqual(a1);
    expect(b2).toEqual(a2);
  });
});
