/**
 * Nothing lost, nothing half-stored: a process ingesting batches into SQLite is killed with
 * SIGKILL at an arbitrary moment; reopening the file shows only whole batches, at least every
 * batch whose commit the process had reported.
 */
import { spawn, type ChildProcess } from 'node:child_process';
import { mkdtempSync, rmSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { dirname, join } from 'node:path';
import { fileURLToPath } from 'node:url';
import { afterAll, describe, expect, it } from 'vitest';
import { openSqliteStore } from '../../src/storage/sqlite.js';

const here = dirname(fileURLToPath(import.meta.url));
const dir = mkdtempSync(join(tmpdir(), 'roost-crash-'));
const children = new Set<ChildProcess>();
afterAll(() => {
  // a failed or timed-out test must not leave a child writing on
  for (const c of children) if (c.exitCode === null && c.signalCode === null) c.kill('SIGKILL');
  rmSync(dir, { recursive: true, force: true });
});

const BATCH = 5_000;

/** Runs the child until it has reported `committed` batches, then waits `extraMs` and kills it. */
function ingestThenKill(path: string, prefix: string, committed: number, extraMs: number): Promise<number> {
  return new Promise((resolve, reject) => {
    const child = spawn(process.execPath, ['--import', 'tsx', join(here, 'crash-child.ts'), path, String(BATCH), prefix], { stdio: ['ignore', 'pipe', 'pipe'] });
    children.add(child);
    let seen = 0;
    let err = '';
    let buf = '';
    child.stdout.on('data', (d: Buffer) => {
      buf += d.toString();
      const lines = buf.split('\n');
      buf = lines.pop() as string;
      for (const l of lines) if (l.startsWith('committed ')) seen++;
      if (seen === committed) setTimeout(() => child.kill('SIGKILL'), extraMs);
    });
    child.stderr.on('data', (d: Buffer) => (err += d.toString()));
    child.on('error', reject);
    child.on('exit', (code, signal) => (signal === 'SIGKILL' ? resolve(seen) : reject(new Error(`child ended with ${code}: ${err}`))));
  });
}

describe('SQLite store killed in the middle of ingesting', () => {
  it('keeps every reported batch and no part of any other', async () => {
    const path = join(dir, 'crash.db');
    const setup = openSqliteStore({ path });
    await setup.migrate();
    await setup.createDataset({ id: 'crash', name: 'crash', settings: {}, idProperty: null, window: null, schedule: null, webhook: null });
    await setup.close();

    // Kill at different moments after a commit: with batches of 5 000 taking tens to hundreds of
    // milliseconds, most kills land inside a transaction.
    let reported = 0;
    for (const extraMs of [5, 30]) {
      reported += await ingestThenKill(path, `k${extraMs}b`, 1, extraMs);
      const store = openSqliteStore({ path });
      const n = await store.countObservations('crash');
      const ids = (await store.loadForRun('crash')).ids;
      await store.close();
      expect(n % BATCH).toBe(0);
      expect(ids.length).toBe(n);
      // each stored batch is complete: count the ids per batch prefix
      const perBatch = new Map<string, number>();
      for (const id of ids) {
        const b = id.slice(0, id.indexOf('_'));
        perBatch.set(b, (perBatch.get(b) ?? 0) + 1);
      }
      for (const c of perBatch.values()) expect(c).toBe(BATCH);
      expect(n).toBeGreaterThanOrEqual(BATCH);
    }
    expect(reported).toBe(2);
  }, 60_000);
});
