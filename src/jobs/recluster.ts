/**
 * Re-clustering stored datasets once, for external schedulers (system cron, container cron
 * jobs): one run per dataset, executed in this process with the dataset's own settings, track
 * matching and notices, recorded with trigger 'command'. The command around it (`roost
 * recluster`: options, usage messages, exit codes) is src/cli/recluster.ts.
 */
import { executeRun } from './execute.js';
import { type RoostHooks } from './run-hooks.js';
import { TRANSITION_KINDS, type ChangesJson } from './tracking.js';
import { StoreError, type Dataset, type Run, type Store } from '../storage/store.js';

/** The one-line outcome printed for a run. */
export function outcomeLine(run: Run): string {
  const head = `${run.datasetId} ${run.id} ${run.status}`;
  if (run.status !== 'succeeded') return `${head}: ${run.error ?? 'no reason recorded'}`;
  const hotspots = (run.summary?.['figures'] as { hotspots?: number } | undefined)?.hotspots;
  const changes = run.summary?.['changes'] as ChangesJson | null | undefined;
  const counted = typeof hotspots === 'number' ? `${hotspots} hotspot${hotspots === 1 ? '' : 's'}` : 'done';
  if (!changes) return `${head}: ${counted}; first run, every hotspot starts a track`;
  return `${head}: ${counted}; against ${changes.previous_run}: ${TRANSITION_KINDS.map((k) => `${k} ${changes.counts[k]}`).join(', ')}`;
}

/**
 * Creates a run for the dataset and executes it here. The run is started by a conditional change
 * from queued to running; when a server's run queue took it first, this waits for that outcome.
 */
export async function reclusterDataset(store: Store, dataset: Dataset, hooks: RoostHooks, pollMs = 500): Promise<Run> {
  const settings = Object.fromEntries(Object.entries(dataset.settings).filter(([, v]) => v !== null));
  const created = await store.createRun({ datasetId: dataset.id, settings, trigger: 'command' });
  let run: Run;
  try {
    run = await store.updateRun(created.id, { status: 'running', startedAt: new Date().toISOString() }, ['queued']);
  } catch (e) {
    if (!(e instanceof StoreError && e.code === 'conflict')) throw e;
    // a server's run queue claimed it between creation and start: its outcome is ours
    for (;;) {
      const now = (await store.getRun(dataset.id, created.id))!;
      if (now.status !== 'queued' && now.status !== 'running') return now;
      await new Promise((r) => setTimeout(r, pollMs));
    }
  }
  const ctx = { store, dataset, run };
  try {
    await executeRun(store, run, dataset, { assignTracks: (h) => hooks.assignTracks(ctx, h) });
  } catch (e) {
    await store.updateRun(run.id, { status: 'failed', error: (e as Error).message, finishedAt: new Date().toISOString() }, ['running']).catch(() => undefined);
  }
  const final = (await store.getRun(dataset.id, run.id))!;
  const status = final.status === 'succeeded' || final.status === 'failed' || final.status === 'cancelled' ? final.status : 'failed';
  await hooks.afterRun({ ...ctx, run: final }, { status, summary: final.summary, error: final.error });
  return final;
}
