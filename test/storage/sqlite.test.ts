/** The store contract on SQLite: every test database is a new file in a temporary folder. */
import { mkdtempSync, rmSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { afterAll } from 'vitest';
import { openSqliteStore } from '../../src/storage/sqlite.js';
import { runStoreContract } from './contract.js';

const dir = mkdtempSync(join(tmpdir(), 'roost-store-'));
let n = 0;
afterAll(() => rmSync(dir, { recursive: true, force: true }));

runStoreContract('sqlite', {
  skipReason: null,
  async newDatabase() {
    const path = join(dir, `t${n++}.db`);
    return {
      async open() {
        const s = openSqliteStore({ path });
        await s.migrate();
        return s;
      },
      async drop() {
        for (const suffix of ['', '-wal', '-shm']) rmSync(path + suffix, { force: true });
      },
    };
  },
});
