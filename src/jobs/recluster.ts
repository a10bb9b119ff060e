/**
 * `roost recluster --dataset <id>` / `roost recluster --all`: one run per dataset, executed in
 * this process, for external schedulers (system cron, container cron jobs). It uses the same
 * database as the server (DATABASE_URL, else the SQLite file from --db, ROOST_DB_PATH or roost.db),
 * the dataset's own settings, track matching and notices, and records each run with trigger
 * 'command'. One line per dataset on stdout; exit code 0 when every run succeeded, 1 when any
 * failed, 2 for bad usage (no dataset named, an unknown dataset, an unusable database option).
 */
import { isPostgresUrl, openStore, DEFAULT_SQLITE_PATH } from '../storage/index.js';
import { hostname } from 'node:os';
import { executeRun, runFailureMessage } from './execute.js';
import { DEFAULT_HEARTBEAT_MS, keepLease, leaseMs } from './lease.js';
import { createRoostHooks, type RoostHooks } from './run-hooks.js';
import { TRANSITION_KINDS, type ChangesJson } from './tracking.js';
import { RECLUSTER_EXIT } from '../cli/recluster.js';
import { StoreError, type Dataset, type Run, type Store } from '../storage/store.js';

export interface ReclusterIo {
  out: (text: string) => void;
  err: (text: string) => void;
}

/** One dataset's outcome. */
export interface ReclusterResult {
  datasetId: string;
  run: Run;
}

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

/** The options of `roost recluster`. */
export interface ReclusterOptions {
  dataset?: string[];
  all?: boolean;
  db?: string;
}

/**
 * Runs `roost recluster`: one run per named dataset (or all), executed here, one outcome line each.
 * `setExit` receives the exit code (see RECLUSTER_EXIT).
 */
export async function reclusterAction(
  opts: ReclusterOptions,
  setExit: (code: number) => void,
  io: ReclusterIo,
  env: Record<string, string | undefined>,
): Promise<void> {
  const usage = (msg: string): void => {
    io.err(`roost recluster: ${msg}\n`);
    setExit(RECLUSTER_EXIT.usage);
  };
  if ((opts.dataset === undefined) === (opts.all !== true)) return usage('name the datasets with --dataset <id> (repeatable), or give --all');
  const databaseUrl = env.DATABASE_URL ?? null;
  if (databaseUrl !== null && databaseUrl !== '' && !isPostgresUrl(databaseUrl)) return usage('DATABASE_URL must start with postgres:// or postgresql://');
  let store: Store;
  try {
    store = await openStore({ databaseUrl, sqlitePath: opts.db ?? env.ROOST_DB_PATH ?? DEFAULT_SQLITE_PATH });
  } catch (e) {
    return usage(`cannot open the database: ${(e as Error).message}`);
  }
  const hooks = createRoostHooks({
    publicUrl: env.ROOST_PUBLIC_URL || null,
    webhook: { allowPrivate: env.ROOST_ALLOW_PRIVATE_WEBHOOKS === '1' || env.ROOST_ALLOW_PRIVATE_WEBHOOKS === 'true' },
    log: { info: () => undefined, warn: (o, msg) => io.err(`roost recluster: ${msg} (dataset ${String(o['dataset'])}, run ${String(o['run'])}: ${String(o['error'])})\n`) },
  });
  try {
    let datasets: Dataset[];
    if (opts.all) {
      datasets = await store.listDatasets();
      if (datasets.length === 0) io.out('no datasets\n');
    } else {
      datasets = [];
      for (const id of opts.dataset!) {
        const d = await store.getDataset(id);
        if (d === null) return usage(`there is no dataset ${JSON.stringify(id)}; nothing was run`);
        datasets.push(d);
      }
    }
    let failed = 0;
    for (const d of datasets) {
      const run = await reclusterDataset(store, d, hooks, 500, (text) => io.err(`roost recluster: ${text}\n`));
      if (run.status !== 'succeeded') failed++;
      io.out(outcomeLine(run) + '\n');
    }
    await hooks.idle(); // notices are part of the job
    setExit(failed > 0 ? RECLUSTER_EXIT.failed : RECLUSTER_EXIT.ok);
  } finally {
    await hooks.close();
    await store.close();
  }
}
