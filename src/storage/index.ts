/**
 * Choosing and opening the store: `DATABASE_URL` starting with postgres:// or postgresql:// selects
 * PostgreSQL; anything else (or nothing) the SQLite file at `sqlitePath`.
 */
import { DEFAULT_SQLITE_PATH } from './defaults.js';
import { openPostgresStore } from './postgres.js';
import { openSqliteStore } from './sqlite.js';
import type { Store } from './store.js';

export * from './store.js';
export { openSqliteStore, SqliteStore } from './sqlite.js';
export type { SqliteStoreOptions } from './sqlite.js';
export { openPostgresStore, PostgresStore } from './postgres.js';
export type { PostgresStoreOptions } from './postgres.js';

export interface StoreConfig {
  /** postgres:// or postgresql:// URL; anything else (or absent) means SQLite */
  databaseUrl?: string | null;
  /** SQLite file; default DEFAULT_SQLITE_PATH in the working directory */
  sqlitePath?: string;
  /** SQLite synchronous mode; default 'NORMAL' (see the durability note in store.ts) */
  sqliteSynchronous?: 'NORMAL' | 'FULL';
  /** PostgreSQL schema; default 'public' */
  pgSchema?: string;
  /** PostgreSQL pool size; default 10 */
  pgPoolSize?: number;
  /** apply migrations before returning; default true */
  migrate?: boolean;
}

export { DEFAULT_SQLITE_PATH } from './defaults.js';

/** True when the URL names a PostgreSQL database. */
export function isPostgresUrl(url: string | null | undefined): url is string {
  return typeof url === 'string' && /^postgres(ql)?:\/\//i.test(url);
}

/** Opens the configured store and (by default) applies pending migrations. */
export async function openStore(config: StoreConfig = {}): Promise<Store> {
  const store: Store = isPostgresUrl(config.databaseUrl)
    ? openPostgresStore({ connectionString: config.databaseUrl, schema: config.pgSchema, poolSize: config.pgPoolSize })
    : openSqliteStore({ path: config.sqlitePath ?? DEFAULT_SQLITE_PATH, synchronous: config.sqliteSynchronous });
  if (config.migrate !== false) {
    try {
      await store.migrate();
    } catch (e) {
      await store.close().catch(() => undefined);
      throw e;
    }
  }
  return store;
}
