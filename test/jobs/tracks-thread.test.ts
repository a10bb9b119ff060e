/**
 * Tracks assigned in the run's job thread (RunHooks.tracksInThread; see also
 * tracks-in-thread.test.ts): the thresholds of the service's hooks reach the thread, so a history
 * with endings, starts and a survival on hulls under thresholds that are not the defaults gives
 * the track ids and changes the hook called on this thread gives. A failure of the tracking there
 * fails the run with the service's own message naming the run (the detail goes to the log), as any
 * failure inside the service does; a hook of the caller's own is still asked on the main thread.
 */
import { afterEach, describe, expect, it } from 'vitest';
import type { FinishedHotspot, RunContext, RunHooks } from '../../src/jobs/hooks.js';
import { createJobPool, type JobPool } from '../../src/jobs/job-pool.js';
import { Runner } from '../../src/jobs/runner.js';
import { createRoostHooks } from '../../src/jobs/run-hooks.js';
import type { Run, Store } from '../../src/storage/store.js';
import { DATASET, grid, runOnce, tempStore } from './helpers.js';

const ORIGIN: [number, number] = [-3.2, 55.95];
const KEEP = { replace: false, partial: false };
const X = grid('X', ORIGIN, 0, 0, 3, 3);
const Y = grid('Y', ORIGIN, 3000, 0, 3, 4);
const Z = grid('Z', ORIGIN, 6000, 0, 4, 3);
/** not the defaults, so that thresholds lost on the way to the thread would show */
const SETTINGS = { survivalThreshold: 0.9, splitThreshold: 0.5, shrinkSurvival: false };

const disposers: (() => Promise<void>)[] = [];
afterEach(async () => {
  while (disposers.length > 0) await disposers.pop()!();
});

async function fileStore(): Promise<{ store: Store; path: string }> {
  const t = await tempStore();
  disposers.push(t.dispose);
  return t;
}

function pool(): JobPool {
  const p = createJobPool(1);
  disposers.push(() => p.close());
  return p;
}

/** Executes the dataset's queued run through a runner that hands runs to job threads. */
async function serviceRun(store: Store, path: string, jobs: JobPool, hooks: RunHooks, errors: object[] = []): Promise<Run> {
  const created = await store.createRun({ datasetId: DATASET.id, settings: DATASET.settings, trigger: 'request' });
  const log = { info: () => undefined, warn: () => undefined, error: (o: object) => errors.push(o) };
  const runner = new Runner({ store, hooks, concurrency: 1, storeConfig: { sqlitePath: path }, pool: jobs, pollMs: 60_000, log });
  runner.start();
  await runner.idle();
  await runner.close();
  return (await store.getRun(DATASET.id, created.id))!;
}

/** What tracking gave a run: its hotspots' track ids and its changes, the previous run named by position. */
async function tracked(store: Store, run: Run, runIds: string[]): Promise<unknown> {
  const changes = run.summary?.['changes'] as { previous_run: string } | null;
  return {
    status: run.status,
    tracks: (await store.getRunHotspots(run.id)).map((h) => h.trackId),
    changes: changes === null ? null : { ...changes, previous_run: runIds.indexOf(changes.previous_run) },
  };
}

/** Three runs: hotspots ending and starting, and one whose observation ids all change. */
async function history(store: Store, execute: () => Promise<Run>): Promise<unknown[]> {
  const out: unknown[] = [];
  const ids: string[] = [];
  const step = async (): Promise<void> => {
    const run = await execute();
    ids.push(run.id);
    out.push(await tracked(store, run, ids));
  };
  await store.createDataset(DATASET);
  await store.ingest(DATASET.id, [...X, ...Y], KEEP);
  await step();
  for (const r of Y.slice(4)) await store.deleteObservation(DATASET.id, r.id);
  await store.ingest(DATASET.id, Z, KEEP);
  await step();
  for (const r of X) await store.deleteObservation(DATASET.id, r.id);
  await store.ingest(DATASET.id, grid('X2', ORIGIN, 0, 0, 3, 3), KEEP);
  await step();
  return out;
}

describe('tracks in the job thread', () => {
  it('give the same track ids and changes as the hook called on this thread', async () => {
    const hooks = createRoostHooks({ trackSettings: SETTINGS });
    const here = await fileStore();
    const inThisThread = await history(here.store, () => runOnce(here.store, DATASET.id, hooks));
    const there = await fileStore();
    const jobs = pool();
    const inJobThread = await history(there.store, () => serviceRun(there.store, there.path, jobs, hooks));
    expect(inJobThread).toEqual(inThisThread);
    // the history did what it says: endings, starts, and a survival on hulls
    const last = inThisThread[2] as { changes: { counts: Record<string, number>; transitions: { basis: string }[] } };
    expect(inThisThread[0]).toMatchObject({ status: 'succeeded', tracks: ['t000001', 't000002'], changes: null });
    // Y keeps 4 of its 12 (below the strict τ): it ends, and its remains start a track beside Z's
    expect(inThisThread[1]).toMatchObject({ status: 'succeeded', tracks: ['t000001', 't000003', 't000004'], changes: { previous_run: 0, counts: { survival: 1, disappearance: 1, emergence: 2 } } });
    // X's observations all replaced: it survives on its hull, beside the two that kept their members
    expect(last.changes.counts).toMatchObject({ survival: 3, disappearance: 0, emergence: 0 });
    expect(last.changes.transitions.some((t) => t.basis === 'hull')).toBe(true);
    await hooks.close();
  });

  it('a failure there fails the run with a message naming it, and logs the detail', async () => {
    const hooks = createRoostHooks();
    const { store, path } = await fileStore();
    const jobs = pool();
    await store.createDataset(DATASET);
    await store.ingest(DATASET.id, X, KEEP);
    const first = await serviceRun(store, path, jobs, hooks);
    expect(first.status).toBe('succeeded');
    // the previous run's hotspots as an older version stored them: no centre and area figures
    const stored = await store.getRunHotspots(first.id);
    const layers = Object.fromEntries(await Promise.all((['hotspots', 'centres', 'noise', 'points'] as const).map(async (l) => [l, (await store.getRunLayer(first.id, l))!])));
    await store.saveRunResult(first.id, { layers: layers as never, hotspots: stored.map((h) => ({ ...h, figures: { count: h.members.length } })) });
    const errors: object[] = [];
    const second = await serviceRun(store, path, jobs, hooks, errors);
    expect(second.status).toBe('failed');
    expect(second.error).toContain(second.id);
    expect(second.error).toMatch(/try it again/);
    expect(errors).toContainEqual(expect.objectContaining({ run: second.id, error: expect.stringMatching(new RegExp(`run ${first.id} hotspot 1 has no centre and area figures`)) }));
    await hooks.close();
  });

  it('a hook of the caller\'s own is asked on the main thread, with the new run\'s member ids', async () => {
    const { store, path } = await fileStore();
    const jobs = pool();
    await store.createDataset(DATASET);
    await store.ingest(DATASET.id, [...X, ...Y], KEEP);
    const asked: string[][] = [];
    const hooks: RunHooks = {
      async assignTracks(_ctx: RunContext, hotspots: FinishedHotspot[]) {
        asked.push(...hotspots.map((h) => h.memberIds));
        return { trackIds: hotspots.map((h) => `mine-${h.hotspot.hotspotId}`), changes: null };
      },
      async afterRun() {
        // nothing to tell
      },
    };
    const run = await serviceRun(store, path, jobs, hooks);
    expect(run.status).toBe('succeeded');
    expect(asked).toEqual([X.map((r) => r.id), Y.map((r) => r.id)]);
    expect((await store.getRunHotspots(run.id)).map((h) => h.trackId)).toEqual(['mine-1', 'mine-2']);
  });
});
