/**
 * `roost keys create|list|revoke`: API keys in the service's database (DATABASE_URL, else the
 * SQLite file from --db, ROOST_DB_PATH or roost.db). `create` prints the new token on the first
 * line of stdout and never again; with --json, one object {"id","token","role","dataset","label"}.
 * Every change is written to the audit records as done by the command line.
 */
import { Command, Option } from 'commander';
import { ROLES } from '../auth/roles.js';
import { DEFAULT_CONFIG } from '../http/config.js';
import { DEFAULT_SQLITE_PATH } from '../storage/defaults.js';
import type { Store } from '../storage/store.js';

/** Exit codes: 0 done, 1 unexpected failure, 2 bad usage (unknown key or dataset, bad option). */
export const KEYS_EXIT = { ok: 0, failure: 1, usage: 2 } as const;

export interface KeysIo {
  out: (text: string) => void;
  err: (text: string) => void;
}

type Action = (store: Store) => Promise<number>;

async function withStore(db: string | undefined, env: Record<string, string | undefined>, io: KeysIo, action: Action): Promise<number> {
  // the storage drivers and the key functions (node:crypto) are loaded only by this command, not by every start of the command line
  const { isPostgresUrl, openStore } = await import('../storage/index.js');
  const { KeyRequestError } = await import('../auth/keys.js');
  const databaseUrl = env.DATABASE_URL ?? null;
  if (databaseUrl !== null && databaseUrl !== '' && !isPostgresUrl(databaseUrl)) {
    io.err('roost keys: DATABASE_URL must start with postgres:// or postgresql://\n');
    return KEYS_EXIT.usage;
  }
  let store: Store;
  try {
    store = await openStore({ databaseUrl, sqlitePath: db ?? env.ROOST_DB_PATH ?? DEFAULT_SQLITE_PATH });
  } catch (e) {
    io.err(`roost keys: cannot open the database: ${(e as Error).message}\n`);
    return KEYS_EXIT.usage;
  }
  try {
    return await action(store);
  } catch (e) {
    if (e instanceof KeyRequestError) {
      io.err(`roost keys: ${e.message}\n`);
      return KEYS_EXIT.usage;
    }
    io.err(`roost keys: ${(e as Error).stack ?? String(e)}\n`);
    return KEYS_EXIT.failure;
  } finally {
    await store.close();
  }
}

/** The `keys` command for commander; `setExit` receives the exit code (see KEYS_EXIT). */
export function keysCommand(
  setExit: (code: number) => void = (c) => (process.exitCode = c),
  io: KeysIo = { out: (t) => process.stdout.write(t), err: (t) => process.stderr.write(t) },
  env: Record<string, string | undefined> = process.env,
): Command {
  const dbHelp = `SQLite file [ROOST_DB_PATH] (default: ${DEFAULT_CONFIG.dbPath}); DATABASE_URL selects PostgreSQL instead`;
  const keys = new Command('keys').description('create, list and revoke API keys (stored as hashes; a token is shown once)');

  keys
    .command('create')
    .description('create a key and print its token on the first line of stdout (shown this once only)')
    .addOption(new Option('--role <role>', 'what the key may do').choices([...ROLES]).makeOptionMandatory())
    .option('--dataset <id>', 'limit the key to this dataset')
    .option('--label <text>', 'who or what the key is for')
    .option('--json', 'print {"id","token","role","dataset","label"} as JSON')
    .option('--db <path>', dbHelp)
    .addHelpText('after', '\nExample:\n  roost keys create --role contributor --dataset herons --label "survey phones"\n')
    .action(async (opts: { role: string; dataset?: string; label?: string; json?: boolean; db?: string }) => {
      setExit(
        await withStore(opts.db, env, io, async (store) => {
          const { checkKeyRequest, issueKey } = await import('../auth/keys.js');
          const request = checkKeyRequest({ role: opts.role, dataset: opts.dataset, label: opts.label });
          const { key, token } = await issueKey(store, request);
          await store.appendAudit({ keyId: null, actor: 'command', action: 'roost keys create', datasetId: key.datasetId, target: key.id, status: 0 });
          if (opts.json) {
            io.out(JSON.stringify({ id: key.id, token, role: key.role, dataset: key.datasetId, label: key.label }) + '\n');
          } else {
            io.out(`${token}\n`);
            io.err(`roost keys: created ${key.id} (${key.role}${key.datasetId === null ? '' : ` for dataset ${key.datasetId}`}); the token above is shown only this once\n`);
          }
          return KEYS_EXIT.ok;
        }),
      );
    });

  keys
    .command('list')
    .description('list keys (id, role, dataset, label, created, revoked); never tokens')
    .option('--json', 'print a JSON array')
    .option('--db <path>', dbHelp)
    .action(async (opts: { json?: boolean; db?: string }) => {
      setExit(
        await withStore(opts.db, env, io, async (store) => {
          const { keyJson } = await import('../auth/keys.js');
          const all = await store.listKeys();
          if (opts.json) io.out(JSON.stringify(all.map(keyJson)) + '\n');
          else {
            io.out('id\trole\tdataset\tlabel\tcreated\trevoked\n');
            for (const k of all) io.out(`${k.id}\t${k.role}\t${k.datasetId ?? '*'}\t${k.label ?? ''}\t${k.createdAt}\t${k.revokedAt ?? ''}\n`);
          }
          return KEYS_EXIT.ok;
        }),
      );
    });

  keys
    .command('revoke')
    .description('revoke a key: it stops working at once and stays listed as revoked')
    .argument('<id>', 'the key id (k_…), as `roost keys list` shows it')
    .option('--db <path>', dbHelp)
    .action(async (id: string, opts: { db?: string }) => {
      setExit(
        await withStore(opts.db, env, io, async (store) => {
          const k = await store.revokeKey(id);
          if (k === null) {
            io.err(`roost keys: there is no key ${JSON.stringify(id)}; roost keys list shows them\n`);
            return KEYS_EXIT.usage;
          }
          await store.appendAudit({ keyId: null, actor: 'command', action: 'roost keys revoke', datasetId: k.datasetId, target: k.id, status: 0 });
          io.out(`revoked ${k.id} at ${k.revokedAt}\n`);
          return KEYS_EXIT.ok;
        }),
      );
    });

  return keys;
}
