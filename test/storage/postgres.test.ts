/**
 * The store contract on PostgreSQL (DATABASE_URL, default postgres://postgres@127.0.0.1:5432/test):
 * every test database is a new schema, dropped afterwards, so test files running in parallel do
 * not collide. When no server answers, the suite is reported as skipped with the reason.
 */
import pg from 'pg';
import { afterAll, describe, expect, it } from 'vitest';
import { openPostgresStore } from '../../src/storage/postgres.js';
import { postgresSkipReason, TEST_DATABASE_URL } from '../reference/postgres.js';
import { runStoreContract } from './contract.js';

const skipReason = await postgresSkipReason();
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

describe.skipIf(skipReason !== null)(`PostgreSQL schema${skipReason ? ` (skipped: ${skipReason})` : ''}`, () => {
  it('has no foreign key from observations (ingest checks the dataset itself) and keeps those of runs', async () => {
    const schema = `roost_test_${process.pid}_fk`;
    await admin!.query(`DROP SCHEMA IF EXISTS ${schema} CASCADE`);
    const s = openPostgresStore({ connectionString: TEST_DATABASE_URL, schema, poolSize: 2 });
    try {
      await s.migrate();
      const fks = await admin!.query(
        `SELECT c.relname AS table FROM pg_constraint k JOIN pg_class c ON c.oid = k.conrelid JOIN pg_namespace n ON n.oid = c.relnamespace WHERE n.nspname = $1 AND k.contype = 'f' ORDER BY 1`,
        [schema],
      );
      const tables = (fks.rows as { table: string }[]).map((r) => r.table);
      expect(tables).not.toContain('observations');
      expect(tables).toContain('runs');
      // run layers compressed with lz4 when the server was built with it ('l'), else the default ('')
      const att = await admin!.query(`SELECT attcompression::text AS c FROM pg_attribute WHERE attrelid = '${schema}.run_layer_parts'::regclass AND attname = 'body'`);
      const probe = await admin!.connect();
      const supported = await probe.query('BEGIN; CREATE TEMP TABLE lz4_probe (x text COMPRESSION lz4)').then(() => true, () => false);
      await probe.query('ROLLBACK');
      probe.release();
      expect((att.rows[0] as { c: string }).c).toBe(supported ? 'l' : '');
      await expect(s.ingest('nowhere', [], { replace: false, partial: false })).rejects.toMatchObject({ code: 'not-found' });
    } finally {
      await s.close();
      await admin!.query(`DROP SCHEMA IF EXISTS ${schema} CASCADE`);
    }
  });
});
