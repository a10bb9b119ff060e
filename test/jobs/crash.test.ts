/**
 * Nothing lost: the server process is killed with SIGKILL in the middle of a large batch post,
 * then started again on the same SQLite file. A batch is wholly in or wholly out. (A run killed
 * in the middle: test/jobs/takeover.test.ts.)
 */
import { mkdtempSync, rmSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { afterAll, describe, expect, it } from 'vitest';
import { pointsCollection } from '../http/helper.js';
import { ChildServers, type ChildServer } from './child-server.js';

const dir = mkdtempSync(join(tmpdir(), 'roost-kill-'));
const servers = new ChildServers();
afterAll(() => {
  servers.killAll();
  rmSync(dir, { recursive: true, force: true });
});

/** Starts `roost serve` on a free port on the SQLite file `db`; resolves with its URL once it listens (bounded wait). */
const serve = (db: string): Promise<ChildServer> => servers.serve(['--db', db, '--workers', '1', '--rate-limit', '0'], { startMs: 30_000 });
const kill = (s: ChildServer): Promise<void> => servers.kill(s);

async function call(url: string, init: RequestInit = {}): Promise<{ status: number; body: Record<string, unknown> }> {
  const res = await fetch(url, init);
  const text = await res.text();
  return { status: res.status, body: text === '' ? {} : (JSON.parse(text) as Record<string, unknown>) };
}

const JSON_TYPE = { 'content-type': 'application/json' };
const GEO = { 'content-type': 'application/geo+json' };
const BATCH = 40_000;

describe('roost serve killed with SIGKILL', () => {
  it('in the middle of a large batch post: after a restart the batch is wholly in or wholly out', async () => {
    const db = join(dir, 'batch.db');
    let s = await serve(db);
    expect((await call(`${s.url}/v1/datasets`, { method: 'POST', headers: JSON_TYPE, body: JSON.stringify({ id: 'kill', settings: { eps: 60 } }) })).status).toBe(201);
    const seen = new Set<number>();
    // kill at several moments: while the body is read, parsed, or written
    for (const [k, delayMs] of [50, 400, 900, 1500].entries()) {
      const body = pointsCollection(BATCH, 100 + k).replace(/"id":"p/g, `"id":"b${k}_`);
      const posted = fetch(`${s.url}/v1/datasets/kill/observations`, { method: 'POST', headers: GEO, body }).then(
        (r) => r.status,
        () => 0,
      );
      await new Promise((r) => setTimeout(r, delayMs));
      await kill(s);
      const status = await posted;
      s = await serve(db);
      const page = await call(`${s.url}/v1/datasets/kill`);
      const n = page.body.observations as number;
      expect(n % BATCH, `batch ${k}: ${n} stored`).toBe(0);
      // this batch is in only if it was not answered with an error
      if (status !== 200 && status !== 0) throw new Error(`batch ${k} answered ${status}`);
      if (status === 200) expect(n).toBe((seen.size + 1) * BATCH);
      if (n > seen.size * BATCH) seen.add(k);
      expect(n).toBe(seen.size * BATCH);
    }
    await kill(s);
  }, 120_000);
});
