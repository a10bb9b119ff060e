/**
 * Nothing lost: the server process is killed with SIGKILL in the middle of a large batch post,
 * then started again on the same SQLite file. A batch is wholly in or wholly out. (A run killed
 * in the middle: test/jobs/takeover.test.ts.)
 */
import { spawn, type ChildProcess } from 'node:child_process';
import { mkdtempSync, rmSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { dirname, join } from 'node:path';
import { fileURLToPath } from 'node:url';
import { afterAll, describe, expect, it } from 'vitest';
import { pointsCollection } from '../http/helper.js';

const root = join(dirname(fileURLToPath(import.meta.url)), '..', '..');
const dir = mkdtempSync(join(tmpdir(), 'roost-kill-'));
const children = new Set<ChildProcess>();
afterAll(() => {
  for (const c of children) if (c.exitCode === null && c.signalCode === null) c.kill('SIGKILL');
  rmSync(dir, { recursive: true, force: true });
});

interface Server {
  url: string;
  child: ChildProcess;
}

/** Starts `roost serve` on a free port; resolves with its URL once it listens (bounded wait). */
function serve(db: string): Promise<Server> {
  return new Promise((resolve, reject) => {
    const child = spawn(process.execPath, ['--import', 'tsx', join(root, 'src/cli/bin.ts'), 'serve', '--port', '0', '--db', db, '--workers', '1', '--rate-limit', '0'], { cwd: root, stdio: ['ignore', 'pipe', 'pipe'] });
    children.add(child);
    let out = '';
    const timer = setTimeout(() => reject(new Error(`server did not start: ${out}`)), 30_000);
    child.stdout!.on('data', (d: Buffer) => {
      out += d.toString();
      const m = /"url":"(http:\/\/[^"]+)"/.exec(out);
      if (m) {
        clearTimeout(timer);
        resolve({ url: m[1]!, child });
      }
    });
    child.stderr!.on('data', (d: Buffer) => (out += d.toString()));
    child.on('exit', (code) => {
      clearTimeout(timer);
      reject(new Error(`server exited with ${code}: ${out}`));
    });
  });
}

function kill(s: Server): Promise<void> {
  return new Promise((resolve) => {
    if (s.child.exitCode !== null || s.child.signalCode !== null) return resolve();
    s.child.once('exit', () => resolve());
    s.child.kill('SIGKILL');
  });
}

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
