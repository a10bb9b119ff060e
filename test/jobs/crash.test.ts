/**
 * Nothing lost: the server process is killed with SIGKILL in the middle of a large batch post
 * and in the middle of a run, then started again on the same SQLite file. A batch is wholly in
 * or wholly out; a run is never left 'running' (it is queued again and finishes).
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

/** A run as the service shows it; a 503 (the service shedding load on a busy machine) is asked again. */
async function runBody(url: string): Promise<Record<string, unknown>> {
  for (let i = 0; ; i++) {
    const r = await call(url);
    if (r.status !== 503 || i >= 100) return r.body;
    await new Promise((res) => setTimeout(res, 100));
  }
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

  it('in the middle of a run: after a restart the run is queued again and succeeds; none is left running', async () => {
    const db = join(dir, 'run.db');
    let s = await serve(db);
    await call(`${s.url}/v1/datasets`, { method: 'POST', headers: JSON_TYPE, body: JSON.stringify({ id: 'busy', settings: { eps: 60, min_points: 5 } }) });
    expect((await call(`${s.url}/v1/datasets/busy/observations`, { method: 'POST', headers: GEO, body: pointsCollection(BATCH, 5) })).body.accepted).toBe(BATCH);
    const start = await call(`${s.url}/v1/datasets/busy/runs`, { method: 'POST' });
    const runPath = `/v1/datasets/busy/runs/${String(start.body.id)}`;
    const end = Date.now() + 30_000;
    let before = await runBody(s.url + runPath);
    while (before.status === 'queued' && Date.now() < end) {
      await new Promise((r) => setTimeout(r, 10));
      before = await runBody(s.url + runPath);
    }
    expect(before.status).toBe('running');
    await kill(s);

    s = await serve(db);
    let run = await runBody(s.url + runPath);
    // queued again at start-up, and possibly claimed anew already: never the dead process's claim
    expect(run.status === 'queued' || (run.status === 'running' && run.started_at !== before.started_at), JSON.stringify(run)).toBe(true);
    const until = Date.now() + 60_000;
    while (run.status === 'queued' || run.status === 'running') {
      if (Date.now() > until) throw new Error(`run still ${String(run.status)}`);
      await new Promise((r) => setTimeout(r, 100));
      run = await runBody(s.url + runPath);
    }
    expect(run.status).toBe('succeeded');
    expect(run.error).toBeNull();
    const hotspots = await fetch(`${s.url}/v1/datasets/busy/runs/latest/hotspots`);
    expect(hotspots.status).toBe(200);
    await kill(s);
  }, 120_000);
});
