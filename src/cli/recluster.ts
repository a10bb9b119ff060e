/**
 * The `roost recluster` command definition. The work (store, executor, tracks, notices) lives in
 * src/jobs/recluster.ts and loads only when the command runs, so the other commands start fast.
 */
import { Command } from 'commander';
import { DEFAULT_CONFIG } from '../http/config.js';
import type { ReclusterIo } from '../jobs/recluster.js';

/** Exit codes of the command: 0 every run succeeded, 1 a run failed, 2 bad usage. */
export const RECLUSTER_EXIT = { ok: 0, failed: 1, usage: 2 } as const;

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
    .action(async (opts: { dataset?: string[]; all?: boolean; db?: string }) => {
      const { reclusterAction } = await import('../jobs/recluster.js');
      await reclusterAction(opts, setExit, io, env);
    });
}
