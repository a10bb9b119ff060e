/**
 * Migration 4: result layers stored whole (one row per layer in run_layers) become pieces in
 * run_layer_parts, and are served as before. Checked on SQLite and (when a server answers)
 * PostgreSQL by putting a database back into its earlier shape and migrating again.
 */
import pg from 'pg';
import { afterAll, describe, expect, it } from 'vitest';
import { openPostgresStore } from '../../src/storage/postgres.js';
import type { SqliteStore } from '../../src/storage/sqlite.js';
import type { Store } from '../../src/storage/store.js';
import { DATASET, tempStore } from '../jobs/helpers.js';
import { postgresSkipReason, TEST_DATABASE_URL } from '../reference/postgres.js';

const SCHEMA = `roost_parts_${process.pid}`;
const skipReason = await postgresSkipReason();

const EARLIER = (seqType: string): string => `
  DROP TABLE run_layer_parts;
  CREATE TABLE run_layers (run_seq ${seqType} NOT NULL REFERENCES runs(seq) ON DELETE CASCADE, layer TEXT NOT NULL, body TEXT NOT NULL, PRIMARY KEY (run_seq, layer));
  DELETE FROM schema_migrations WHERE version = 4;`;

/** A dataset and a run; returns the run's id. */
async function newRun(store: Store): Promise<string> {
  await store.createDataset(DATASET);
  const run = await store.createRun({ datasetId: DATASET.id, settings: {}, trigger: 'request' });
  return run.id;
}

async function expectServed(store: Store, runId: string): Promise<void> {
  expect(await store.getRunLayer(runId, 'points')).toBe('{"type":"FeatureCollection","features":[{"é":1}]}');
  const pieces: string[] = [];
  for await (const p of (await store.getRunLayerPieces(runId, 'hotspots'))!) pieces.push(p);
  expect(pieces).toEqual(['{"h":true}']);
  expect(await store.getRunLayer(runId, 'noise')).toBeNull();
}

describe('result layers after the upgrade to pieces', () => {
  it('SQLite', async () => {
    const { store, dispose } = await tempStore();
    const db = (store as SqliteStore).db;
    const runId = await newRun(store);
    const seq = Number(runId.slice(1));
    db.exec(EARLIER('INTEGER'));
    db.prepare('INSERT INTO run_layers VALUES (?, ?, ?), (?, ?, ?)').run(seq, 'points', '{"type":"FeatureCollection","features":[{"é":1}]}', seq, 'hotspots', '{"h":true}');
    await store.migrate();
    await expectServed(store, runId);
    await dispose();
  });

  describe.skipIf(skipReason !== null)(`PostgreSQL${skipReason !== null ? ` (skipped: ${skipReason})` : ''}`, () => {
    const admin = skipReason === null ? new pg.Pool({ connectionString: TEST_DATABASE_URL, max: 1 }) : null;
    afterAll(async () => {
      await admin?.query(`DROP SCHEMA IF EXISTS ${SCHEMA} CASCADE`);
      await admin?.end();
    });
    it('PostgreSQL', async () => {
      await admin!.query(`DROP SCHEMA IF EXISTS ${SCHEMA} CASCADE`);
      const store = openPostgresStore({ connectionString: TEST_DATABASE_URL, schema: SCHEMA, poolSize: 2 });
      await store.migrate();
      const runId = await newRun(store);
      const seq = Number(runId.slice(1));
      await admin!.query(`SET search_path TO ${SCHEMA}; ${EARLIER('BIGINT')}`);
      await admin!.query(`INSERT INTO ${SCHEMA}.run_layers VALUES ($1, $2, $3), ($1, $4, $5)`, [seq, 'points', '{"type":"FeatureCollection","features":[{"é":1}]}', 'hotspots', '{"h":true}']);
      await admin!.query('RESET search_path');
      await store.migrate();
      await expectServed(store, runId);
      await store.close();
    });
  });
});
