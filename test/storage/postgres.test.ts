/**
 * The store contract on PostgreSQL (DATABASE_URL, default postgres://postgres@127.0.0.1:5432/test):
 * every test database is a new schema, dropped afterwards, so test files running in parallel do
 * not collide. When no server answers, the suite is reported as skipped with the reason.
 */
import pg from 'pg';
import { afterAll } from 'vitest';
import { openPostgresStore } from '../../src/storage/postgres.js';
import { runStoreContract } from './contract.js';

export const TEST_DATABASE_URL = process.env.DATABASE_URL !== undefined && /^postgres(ql)?:\/\//.test(process.env.DATABASE_URL) ? process.env.DATABASE_URL : 'postgres://postgres@127.0.0.1:5432/test';

/** null when the server answers, else why not. */
async function reachable(url: string): Promise<string | null> {
  const c = new pg.Client({ connectionString: url, connectionTimeoutMillis: 3000 });
  try {
    await c.connect();
    await c.query('SELECT 1');
    return null;
  } catch (e) {
    return `no PostgreSQL at ${url.replace(/\/\/[^@]*@/, '//…@')}: ${(e as Error).message}`;
  } finally {
    await c.end().catch(() => undefined);
  }
}

const skipReason = await reachable(TEST_DATABASE_URL);
const admin = skipReason === null ? new pg.Pool({ connectionString: TEST_DATABASE_URL, max: 2 }) : null;
afterAll(async () => {
  await admin?.end();
});
let n = 0;

runStoreContract('postgres', {
  skipReason,
  async newDatabase() {
    const schema = `roost_test_${process.pid}_${n++}`;
    await admin!.query(`DROP SCHEMA IF EXISTS ${schema} CASCADE`);
    return {
      async open() {
        const s = openPostgresStore({ connectionString: TEST_DATABASE_URL, schema, poolSize: 4 });
        await s.migrate();
        return s;
      },
      async drop() {
        await admin!.query(`DROP SCHEMA IF EXISTS ${schema} CASCADE`);
      },
    };
  },
});
