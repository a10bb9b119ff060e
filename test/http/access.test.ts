/**
 * Every operation of openapi.yaml × every kind of caller (no key, each role, keys limited to one
 * dataset), on SQLite and on PostgreSQL: the answer is 401 or 403 exactly when the operation's
 * declared access says so, and a problem+json body; nothing the document does not declare is
 * reachable with a key.
 */
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { openPostgresStore } from '../../src/storage/postgres.js';
import { openStore } from '../../src/storage/index.js';
import { postgresSkipReason, TEST_DATABASE_URL } from '../reference/postgres.js';
import { accessService, expected, namesDataset, OPERATIONS, urlOf, WHO, type AccessService } from './access-fixture.js';
import { buildApp } from '../../src/http/app.js';
import { testConfig } from './helper.js';

const skipPg = await postgresSkipReason();

describe('openapi.yaml declares who may call each operation', () => {
  it('every operation has x-roost-access and a matching security requirement', () => {
    for (const op of OPERATIONS) {
      expect(op.access, `${op.method} ${op.path}`).toBeDefined();
    }
  });

  it('every route the service has is an operation of the document (or a file of /docs or of the map page)', async () => {
    const routes: string[] = [];
    const app = await buildApp({ config: testConfig(), logger: false, onRoute: (r) => { for (const m of [r.method].flat()) routes.push(`${m} ${r.url}`); } });
    await app.ready();
    await app.close();
    const declared = new Set(OPERATIONS.map((o) => `${o.method} ${o.path.replace(/\{([^}]+)\}/g, ':$1')}`));
    const stray = routes.filter((r) => {
      const [m, url] = r.split(' ') as [string, string];
      if (m === 'HEAD' || m === 'OPTIONS') return false;
      if (url === '/docs' || url.startsWith('/docs/')) return false;
      // the map page's scripts and styles (public, like the page)
      if (url.startsWith('/assets/')) return false;
      return !declared.has(r);
    });
    expect(stray).toEqual([]);
  });
});

function roleMatrix(name: string, open: () => Promise<AccessService>, skip: string | null): void {
  describe.skipIf(skip !== null)(`routes × roles on ${name}${skip ? ` (skipped: ${skip})` : ''}`, () => {
    let s: AccessService;
    beforeAll(async () => {
      s = await open();
    });
    afterAll(async () => {
      await s?.close();
    });

    it('answers 401/403 exactly where the document says, for every operation and caller', async () => {
      const mismatches: string[] = [];
      // deleting the dataset goes last, so the other operations find it
      const ops = [...OPERATIONS].sort((a, b) => Number(a.operationId === 'deleteDataset') - Number(b.operationId === 'deleteDataset'));
      let checked = 0;
      for (const op of ops) {
        for (const who of WHO) {
          for (const datasetId of namesDataset(op) ? ['d1', 'd2'] : ['d1']) {
            await s.restore();
            const url = urlOf(op, datasetId, { run: s.run, keyId: s.spareKeyId });
            const headers: Record<string, string> = { 'content-type': 'application/json' };
            if (who !== 'none') headers.authorization = `Bearer ${s.tokens[who]}`;
            const res = await s.app.inject({ method: op.method as 'GET', url, headers, payload: ['POST', 'PATCH', 'PUT'].includes(op.method) ? '{}' : undefined });
            const want = expected(op, who, namesDataset(op) ? datasetId : null);
            const got = res.statusCode;
            checked++;
            if (want === 'pass' ? got === 401 || got === 403 : got !== want) mismatches.push(`${op.method} ${url} as ${who}: ${got}, expected ${want}`);
            if (got === 401 || got === 403) {
              expect(res.headers['content-type']).toMatch(/^application\/problem\+json/);
              expect(res.json().code).toBe(got === 401 ? 'unauthorized' : 'forbidden');
              if (got === 401) expect(res.headers['www-authenticate']).toMatch(/^Bearer/);
            }
          }
        }
      }
      expect(mismatches).toEqual([]);
      expect(checked).toBeGreaterThan(OPERATIONS.length * WHO.length);
    }, 120_000);
  });
}

roleMatrix('SQLite', async () => accessService(await openStore({ sqlitePath: ':memory:' })), null);
roleMatrix(
  'PostgreSQL',
  async () => {
    const store = openPostgresStore({ connectionString: TEST_DATABASE_URL, schema: `roost_access_${process.pid}`, poolSize: 4 });
    await store.pool.query(`DROP SCHEMA IF EXISTS roost_access_${process.pid} CASCADE`);
    await store.migrate();
    const s = await accessService(store);
    return {
      ...s,
      close: async () => {
        await store.pool.query(`DROP SCHEMA IF EXISTS roost_access_${process.pid} CASCADE`).catch(() => undefined);
        await s.close();
      },
    };
  },
  skipPg,
);
