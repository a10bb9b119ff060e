/**
 * The `roost recluster` command: one run per named dataset (or all), executed in this process,
 * one outcome line each, for system cron and container schedulers. Its options come from the one
 * config table (src/http/config.ts: --db / ROOST_DB_PATH, DATABASE_URL, ROOST_PUBLIC_URL,
 * ROOST_ALLOW_PRIVATE_WEBHOOKS). The work (store, executor, tracks, notices) loads only when the
 * command runs, so the other commands start fast.
 */
import { Command } from 'commander';
import { ConfigError, DEFAULT_CONFIG, resolveConfig } from '../http/config.js';
import type { Dataset, Store } from '../storage/store.js';

/** Exit codes of the command: 0 every run succeeded, 1 a run failed, 2 bad usage. */
export const RECLUSTER_EXIT = { ok: 0, failed: 1, usage: 2 } as const;

export interface ReclusterIo {
  out: (text: string) => void;
  err: (text: string) => void;
}

/** The options of `roost recluster`. */
export interface ReclusterOptions {
  dataset?: string[];
  all?: boolean;
  db?: string;
}

const collect = (value: string, previous: string[] = []): string[] => [...previous, value];

/**
 * The `recluster` command for commander: `program.addCommand(reclusterCommand(setExit))`.
 * `setExit` receives the exit code (see RECLUSTER_EXIT).
 */
export function reclusterCommand(
  setExit: (code: number) => void = (c) => (process.exitCode = c),
  io: ReclusterIo = { out: (t) => process.stdout.write(t), err: (t) => process.stderr.write(t) },
  env: Record<string, string | undefined> = process.env,
): Command {
  return new Command('recluster')
    .description('run the clustering once for stored datasets (for system cron and container schedulers); exit code 1 when a run fails')
    .option('--dataset <id>', 'dataset to re-cluster (repeatable)', collect)
    .option('--all', 'every dataset')
    .option('--db <path>', `SQLite file [ROOST_DB_PATH] (default: ${DEFAULT_CONFIG.dbPath}); DATABASE_URL selects PostgreSQL instead`)
    .action(async (opts: ReclusterOptions) => {
      await reclusterAction(opts, setExit, io, env);
    });
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
  let config;
  try {
    config = resolveConfig(opts.db !== undefined ? { dbPath: opts.db } : {}, env);
  } catch (e) {
    if (e instanceof ConfigError) return usage(e.message);
    throw e;
  }
  const [{ openStore }, { reclusterDataset, outcomeLine }, { createRoostHooks }] = await Promise.all([
    import('../storage/index.js'),
    import('../jobs/recluster.js'),
    import('../jobs/run-hooks.js'),
  ]);
  let store: Store;
  try {
    store = await openStore({ databaseUrl: config.databaseUrl || null, sqlitePath: config.dbPath });
  } catch (e) {
    return usage(`cannot open the database: ${(e as Error).message}`);
  }
  const hooks = createRoostHooks({
    publicUrl: config.publicUrl || null,
    webhook: { allowPrivate: config.allowPrivateWebhooks },
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
