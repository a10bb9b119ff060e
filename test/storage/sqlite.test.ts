/** The store contract on SQLite: every test database is a new file in a temporary folder. */
import { mkdtempSync, rmSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { afterAll, describe, expect, it } from 'vitest';
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

describe('sqlite memory mapping', () => {
  it('maps the file by default, not with mmapBytes 0, and both read the same run input', async () => {
    const path = join(dir, 'mmap.db');
    const mapped = openSqliteStore({ path });
    await mapped.migrate();
    await mapped.createDataset({ id: 'm', name: 'm', settings: {}, idProperty: null, window: null, schedule: null, webhook: null });
    const records = Array.from({ length: 300 }, (_, i) => {
      const feature = JSON.stringify({ type: 'Feature', id: `o${i}`, geometry: { type: 'Point', coordinates: [i / 10, -i / 20] }, properties: { k: i } });
      return { id: `o${i}`, lon: i / 10, lat: -i / 20, observedAt: i % 3 === 0 ? null : 1_700_000_000_000 + i, weight: i % 2 === 0 ? i : null, feature, contentHash: `h${i}` };
    });
    await mapped.ingest('m', records, { replace: false, partial: false });
    const plain = openSqliteStore({ path, mmapBytes: 0 });
    try {
      // SQLite reports the mapping limit in force for the connection (0: none)
      expect(mapped.db.pragma('mmap_size', { simple: true })).toBeGreaterThan(0);
      expect(plain.db.pragma('mmap_size', { simple: true })).toBe(0);
      const a = await mapped.loadForRun('m');
      const b = await plain.loadForRun('m');
      expect(a.ids).toEqual(records.map((r) => r.id));
      expect(b.ids).toEqual(a.ids);
      expect(Array.from(b.lon)).toEqual(Array.from(a.lon));
      expect(Array.from(b.weight ?? [])).toEqual(Array.from(a.weight ?? []));
      expect([...b.features]).toEqual(records.map((r) => r.feature));
      expect([...a.features]).toEqual(records.map((r) => r.feature));
    } finally {
      await plain.close();
      await mapped.close();
    }
  });
});

describe('sqlite run input ids', () => {
  it('loads ids holding line breaks in insertion order', async () => {
    const s = openSqliteStore({ path: join(dir, 'ids.db') });
    await s.migrate();
    try {
      await s.createDataset({ id: 'i', name: 'i', settings: {}, idProperty: null, window: null, schedule: null, webhook: null });
      const ids = ['first', 'two\nlines', '', 'last\n'].filter((x) => x !== '');
      const records = ids.map((id, k) => {
        const feature = JSON.stringify({ type: 'Feature', id, geometry: { type: 'Point', coordinates: [k, k] }, properties: {} });
        return { id, lon: k, lat: k, observedAt: null, weight: null, feature, contentHash: `h${k}` };
      });
      await s.ingest('i', records, { replace: false, partial: false });
      const input = await s.loadForRun('i');
      expect(input.ids).toEqual(ids);
      expect([...input.features]).toEqual(records.map((r) => r.feature));
    } finally {
      await s.close();
    }
  });
});
