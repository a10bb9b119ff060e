/**
 * A process whose event loop is held up longer than a lease (a long step on the main thread, such
 * as assigning tracks to millions of members) must not take its own run back when the loop frees:
 * its look for stopped runs renews the runs it executes first. The hold is a synchronous wait of
 * five leases inside the run's track step, after which the step itself calls that look, so what
 * it finds does not depend on the order in which the overdue timers fire.
 */
import { afterEach, describe, expect, it } from 'vitest';
import { defaultHooks } from '../../src/jobs/default-hooks.js';
import type { RunHooks } from '../../src/jobs/hooks.js';
import { leaseMs } from '../../src/jobs/lease.js';
import { Runner } from '../../src/jobs/runner.js';
import { DATASET, grid, tempStore } from './helpers.js';

const HEARTBEAT_MS = 40;

let dispose: (() => Promise<void>) | null = null;
afterEach(async () => {
  await dispose?.();
  dispose = null;
});

describe('a held event loop', () => {
  it('keeps its own run: the run succeeds once, never queued again', async () => {
    const t = await tempStore();
    dispose = t.dispose;
    const { store } = t;
    await store.createDataset(DATASET);
    await store.ingest(DATASET.id, grid('P', [12.5, 41.9], 0, 0, 4, 4), { replace: false, partial: false });
    const base = defaultHooks();
    let held = 0;
    let calls = 0;
    let looked: { requeued: string[]; failed: string[] } | null = null;
    const hooks: RunHooks = {
      ...base,
      async assignTracks(ctx, hotspots) {
        // hold the event loop for five leases, as a long synchronous step would
        calls++;
        const until = Date.now() + 5 * leaseMs(HEARTBEAT_MS);
        while (Date.now() < until) held++;
        // the first thing the freed loop may do is this process's look for stopped runs
        looked = await runner.recover();
        return base.assignTracks(ctx, hotspots);
      },
    };
    const finished = new Promise<string>((resolve) => {
      hooks.afterRun = async (ctx, outcome) => {
        await base.afterRun(ctx, outcome);
        resolve(outcome.status);
      };
    });
    const runner = new Runner({ store, hooks, concurrency: 1, storeConfig: null, pool: null, heartbeatMs: HEARTBEAT_MS, pollMs: 10_000 });
    const run = await store.createRun({ datasetId: DATASET.id, settings: DATASET.settings, trigger: 'request' });
    runner.start();
    expect(await finished).toBe('succeeded');
    await runner.close();
    expect(held).toBeGreaterThan(0);
    expect(calls).toBe(1);
    expect(looked).toEqual({ requeued: [], failed: [] });
    const after = (await store.getRun(DATASET.id, run.id))!;
    expect(after.status).toBe('succeeded');
    // an interrupted run says so in its error and starts again from the queue
    expect(after.error).toBeNull();
    expect(after.summary).not.toBeNull();
  });
});
