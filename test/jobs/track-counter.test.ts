/**
 * The track counter's migration: a database that stored track ids before counters existed gets a
 * counter starting after its largest `t<digits>` id, so no stored id is handed out again. Checked on
 * SQLite and (when a server answers) PostgreSQL by removing the counter table and migrating again.
 */
import pg from 'pg';
import { afterAll, describe, expect, it } from 'vitest';
import { openPostgresStore } from '../../src/storage/postgres.js';
import type { SqliteStore } from '../../src/storage/sqlite.js';
import type { Store } from '../../src/storage/store.js';
import { postgresSkipReason, TEST_DATABASE_URL } from '../reference/postgres.js';
import { DATASET, tempStore } from './helpers.js';

const URL = TEST_DATABASE_URL;
const SCHEMA = `roost_counter_${process.pid}`;

const skipReason = await postgresSkipReason();
if (skipReason !== null) console.warn(`[jobs] PostgreSQL track counter migration test SKIPPED: ${skipReason}`);

const HULL = '{"type":"Polygon","coordinates":[[[0,0],[0.001,0],[0,0.001],[0,0]]]}';
const LAYERS = { hotspots: '{}', centres: '{}', noise: '{}', points: '{}' };

/** Stores hotspots whose track ids are of several shapes; only t<digits> ids count. */
async function seed(store: Store): Promise<void> {
  await store.createDataset(DATASET);
  await store.createDataset({ ...DATASET, id: 'other' });
  const ids = ['t000007', 'tr000001-1', 'T99', 't12x', 't000003', null];
  const run = await store.createRun({ datasetId: DATASET.id, settings: {}, trigger: 'request' });
  await store.saveRunResult(run.id, { layers: LAYERS, hotspots: ids.map((trackId, k) => ({ hotspotId: k + 1, trackId, members: [`m${k}`], coreMembers: [`m${k}`], hull: HULL })) });
  const other = await store.createRun({ datasetId: 'other', settings: {}, trigger: 'request' });
  await store.saveRunResult(other.id, { layers: LAYERS, hotspots: [{ hotspotId: 1, trackId: 't000040', members: ['x'], coreMembers: ['x'], hull: HULL }] });
}

describe('track counters after an upgrade', () => {
  it('SQLite: start after the largest stored t<digits> id, per dataset', async () => {
    const { store, dispose } = await tempStore();
    await seed(store);
    const db = (store as SqliteStore).db;
    db.exec('DROP TABLE track_counters; DELETE FROM schema_migrations WHERE version = 2;');
    await store.migrate();
    expect(await store.reserveTrackNumbers(DATASET.id, 1)).toBe(8);
    expect(await store.reserveTrackNumbers('other', 2)).toBe(41);
    await dispose();
  });

  describe.skipIf(skipReason !== null)(`PostgreSQL${skipReason !== null ? ` (skipped: ${skipReason})` : ''}`, () => {
    const admin = skipReason === null ? new pg.Pool({ connectionString: URL, max: 1 }) : null;
    afterAll(async () => {
      await admin?.query(`DROP SCHEMA IF EXISTS ${SCHEMA} CASCADE`);
      await admin?.end();
    });
    it('start after the largest stored t<digits> id, per dataset', async () => {
      await admin!.query(`DROP SCHEMA IF EXISTS ${SCHEMA} CASCADE`);
      const store = openPostgresStore({ connectionString: URL, schema: SCHEMA, poolSize: 2 });
      await store.migrate();
      await seed(store);
      await admin!.query(`DROP TABLE ${SCHEMA}.track_counters; DELETE FROM ${SCHEMA}.schema_migrations WHERE version = 2;`);
      await store.migrate();
      expect(await store.reserveTrackNumbers(DATASET.id, 1)).toBe(8);
      expect(await store.reserveTrackNumbers('other', 2)).toBe(41);
      await store.close();
    });
  });
});
