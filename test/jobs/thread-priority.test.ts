/**
 * Worker threads give way to the main thread: each lowers its own priority to WORKER_NICE as it
 * starts (src/workers/entry.ts), and the main thread keeps the process's. Linux only: there the
 * nice value of each thread can be read from /proc (field 19 of /proc/<pid>/task/<tid>/stat,
 * source: proc(5), https://man7.org/linux/man-pages/man5/proc_pid_stat.5.html).
 */
import { readdirSync, readFileSync } from 'node:fs';
import { afterEach, describe, expect, it } from 'vitest';
import { createJobPool, type JobPool } from '../../src/jobs/job-pool.js';
import { WORKER_NICE } from '../../src/workers/priority.js';

/** The nice value of each thread of this process, by thread id. */
function niceByThread(): Map<string, number> {
  const out = new Map<string, number>();
  for (const tid of readdirSync('/proc/self/task')) {
    try {
      // after the command name in parentheses: field 3 (state) onwards, so nice (19) is at 16
      const fields = readFileSync(`/proc/self/task/${tid}/stat`, 'utf8').split(') ')[1]!.split(' ');
      out.set(tid, Number(fields[16]));
    } catch {
      // the thread ended while listed
    }
  }
  return out;
}

let pool: JobPool | null = null;
afterEach(async () => {
  await pool?.close();
  pool = null;
});

describe('worker thread priority', () => {
  it.runIf(process.platform === 'linux')('a job thread lowers its own priority; the main thread keeps its own', async () => {
    const mainTid = String(process.pid);
    const before = niceByThread();
    const mainNice = before.get(mainTid)!;
    pool = createJobPool(1);
    // a task makes the pool start its thread
    const parts = await pool.index(new TextEncoder().encode('{"type":"FeatureCollection","features":[{"type":"Feature","id":"a","geometry":null,"properties":{}}]}'));
    expect(parts.idEnds.length).toBe(1);
    const after = niceByThread();
    const started = [...after].filter(([tid]) => !before.has(tid));
    expect(started.length).toBeGreaterThan(0);
    // the worker's own thread is among those started, niced; the main thread is as it was
    expect(started.some(([, nice]) => nice === Math.max(WORKER_NICE, mainNice))).toBe(true);
    expect(after.get(mainTid)).toBe(mainNice);
  });
});
