/**
 * Re-clustering stored datasets once, for external schedulers (system cron, container cron
 * jobs): one run per dataset, executed in this process with the dataset's own settings, track
 * matching and notices, recorded with trigger 'command'. The command around it (`roost
 * recluster`: options, usage messages, exit codes) is src/cli/recluster.ts.
 */
import { hostname } from 'node:os';
import { executeRun, runFailureMessage } from './execute.js';
import { DEFAULT_HEARTBEAT_MS, keepLease, leaseMs } from './lease.js';
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
export async function reclusterDataset(store: Store, dataset: Dataset, hooks: RoostHooks, pollMs = 500, log?: (text: string) => void): Promise<Run> {
  const settings = Object.fromEntries(Object.entries(dataset.settings).filter(([, v]) => v !== null));
  const created = await store.createRun({ datasetId: dataset.id, settings, trigger: 'command' });
  let run: Run;
  try {
    run = await store.claimRun(created.id, `${hostname()}:${process.pid}:recluster`, leaseMs(DEFAULT_HEARTBEAT_MS));
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
  // renewed like a server's claim, so that a server takes the run over if this command dies
  const controller = new AbortController();
  const lease = keepLease(store, run, DEFAULT_HEARTBEAT_MS, () => controller.abort(new Error('the run is no longer this command\'s')));
  try {
    await executeRun(store, run, dataset, { signal: controller.signal, assignTracks: (h) => hooks.assignTracks(ctx, h) });
  } catch (e) {
    const failure = runFailureMessage(e, run.id);
    if (failure.internal) log?.(`run ${run.id} failed inside the service: ${(e as Error).stack ?? String(e)}`);
    await store.updateRun(run.id, { status: 'failed', error: failure.message, finishedAt: new Date().toISOString() }, ['running'], run.workerId ?? undefined).catch(() => undefined);
  } finally {
    lease.stop();
  }
  const final = (await store.getRun(dataset.id, run.id))!;
  const status = final.status === 'succeeded' || final.status === 'failed' || final.status === 'cancelled' ? final.status : 'failed';
  await hooks.afterRun({ ...ctx, run: final }, { status, summary: final.summary, error: final.error });
  return final;
}
