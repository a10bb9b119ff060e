/**
 * Child process for the crash test: ingests batches into an SQLite store until it is killed (at most 200),
 * printing a line after each committed batch. Usage: node --import tsx crash-child.ts <db> <batch size> <id prefix>
 */
import { openSqliteStore } from '../../src/storage/sqlite.js';
import { seededRecords } from './fixtures.js';

const [path, size, prefix] = process.argv.slice(2);
const store = openSqliteStore({ path: path as string });
await store.migrate();
const batchSize = Number(size);
// bounded, so a child whose parent died does not run on
for (let k = 0; k < 200; k++) {
  const res = await store.ingest('crash', seededRecords(k + 1, batchSize, `${prefix}${k}_`), { replace: false, partial: false });
  process.stdout.write(`committed ${k} ${res.accepted.length}\n`);
}
