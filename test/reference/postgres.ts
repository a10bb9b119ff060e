/**
 * The PostgreSQL server the tests use: DATABASE_URL when it names PostgreSQL, else the CI database
 * on this machine (trust auth). On a developer's machine, suites that need it are skipped — with
 * the reason in their name and a warning — when it does not answer. Under CI (`CI=true`, as
 * `.ci/run` is run) a server that does not answer is an error, so a run can never be green with
 * the PostgreSQL suites left out; `.ci/run` starts the server before the tests.
 */
import pg from 'pg';
import { openPostgresStore } from '../../src/storage/postgres.js';
import type { Store } from '../../src/storage/store.js';

export const TEST_DATABASE_URL =
  process.env.DATABASE_URL !== undefined && /^postgres(ql)?:\/\//.test(process.env.DATABASE_URL)
    ? process.env.DATABASE_URL
    : 'postgres://postgres@127.0.0.1:5432/test';

/** True when the environment says this is a CI run (`CI` set to anything but empty, 0 or false). */
export function isCi(env: NodeJS.ProcessEnv = process.env): boolean {
  const v = env.CI;
  return v !== undefined && v !== '' && v !== '0' && v.toLowerCase() !== 'false';
}

/**
 * null when the server answers, else why not (credentials left out).
 * @throws Error when the server does not answer and `env` says this is a CI run
 */
export async function postgresSkipReason(url = TEST_DATABASE_URL, env: NodeJS.ProcessEnv = process.env): Promise<string | null> {
  const c = new pg.Client({ connectionString: url, connectionTimeoutMillis: 3000 });
  let reason: string | null = null;
  try {
    await c.connect();
    await c.query('SELECT 1');
  } catch (e) {
    reason = `no PostgreSQL at ${url.replace(/\/\/[^@]*@/, '//…@')}: ${(e as Error).message}`;
  } finally {
    await c.end().catch(() => undefined);
  }
  if (reason !== null && isCi(env)) {
    throw new Error(`${reason}. CI=true: the PostgreSQL suites must run in CI, so a missing server fails the run (.ci/run starts it)`);
  }
  return reason;
}

let schemas = 0;

/**
 * A migrated PostgreSQL store in a schema of its own (`${prefix}_${pid}_${k}`, dropped first in
 * case a killed run left it); `dispose` closes the store and drops the schema.
 */
export async function tempPostgresStore(prefix: string, poolSize = 2): Promise<{ store: Store; dispose: () => Promise<void> }> {
  const schema = `${prefix}_${process.pid}_${schemas++}`;
  const drop = async (): Promise<void> => {
    const admin = new pg.Client({ connectionString: TEST_DATABASE_URL });
    await admin.connect();
    try {
      await admin.query(`DROP SCHEMA IF EXISTS ${schema} CASCADE`);
    } finally {
      await admin.end();
    }
  };
  await drop();
  const store = openPostgresStore({ connectionString: TEST_DATABASE_URL, schema, poolSize });
  await store.migrate();
  return {
    store,
    async dispose() {
      await store.close();
      await drop();
    },
  };
}
