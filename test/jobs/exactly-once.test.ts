/**
 * Exactly once across instances: two child processes, each with two stores of its own (four
 * schedulers, four PostgreSQL pools, as four Roost instances on one database), walk the same half
 * hour on fake clocks at the same moment. Every slot of every schedule must produce exactly one
 * run, and every other scheduler must find that slot taken.
 *
 * Runs against the real PostgreSQL server (DATABASE_URL, default postgres://postgres@127.0.0.1:5432/test)
 * in a fresh schema; reported as skipped with the reason when no server answers.
 */
import { spawn, type ChildProcess } from 'node:child_process';
import { dirname, join } from 'node:path';
import { fileURLToPath } from 'node:url';
import pg from 'pg';
import { afterAll, describe, expect, it } from 'vitest';
import type { TickReport } from '../../src/jobs/schedule.js';
import { dueSlots } from '../../src/jobs/schedule.js';
import { openPostgresStore } from '../../src/storage/postgres.js';
import type { DatasetSchedule } from '../../src/storage/store.js';
import { DATASET } from './helpers.js';
import { postgresSkipReason, TEST_DATABASE_URL } from '../reference/postgres.js';

const URL = TEST_DATABASE_URL;
const here = dirname(fileURLToPath(import.meta.url));

const skipReason = await postgresSkipReason(URL);
if (skipReason !== null) console.warn(`[jobs] exactly-once schedule test SKIPPED: ${skipReason}`);

const SCHEMA = `roost_sched_${process.pid}`;
const START = '2025-10-26T00:00:00Z'; // the fall-back night in Berlin: 02:00–03:00 local happens twice
const END = '2025-10-26T00:30:00Z';
const SCHEDULES: Record<string, DatasetSchedule> = {
  minutely: { cron: '* * * * *', timezone: 'UTC' },
  'every-2-berlin': { cron: '*/2 * * * *', timezone: 'Europe/Berlin' },
  'at-0230-berlin': { cron: '30 2 * * *', timezone: 'Europe/Berlin' },
};
const children = new Set<ChildProcess>();

afterAll(async () => {
  for (const c of children) if (c.exitCode === null && c.signalCode === null) c.kill('SIGKILL');
  if (skipReason === null) {
    const admin = new pg.Client({ connectionString: URL });
    await admin.connect();
    await admin.query(`DROP SCHEMA IF EXISTS ${SCHEMA} CASCADE`);
    await admin.end();
  }
});

/** Starts a child; resolves with it once it is ready, and with its reports when it ends. */
function child(): Promise<{ go: () => void; reports: Promise<TickReport[]> }> {
  return new Promise((resolveReady, reject) => {
    const c = spawn(process.execPath, ['--import', 'tsx', join(here, 'exactly-once-child.ts'), URL, SCHEMA, START, END, '20000', '2'], { stdio: ['pipe', 'pipe', 'pipe'] });
    children.add(c);
    let out = '';
    let err = '';
    let ready = false;
    let done: (r: TickReport[]) => void = () => undefined;
    let fail: (e: Error) => void = () => undefined;
    const reports = new Promise<TickReport[]>((res, rej) => {
      done = res;
      fail = rej;
    });
    c.stdout.on('data', (d: Buffer) => {
      out += d.toString();
      if (!ready && out.includes('ready\n')) {
        ready = true;
        resolveReady({ go: () => c.stdin.write('go\n'), reports });
      }
    });
    c.stderr.on('data', (d: Buffer) => (err += d.toString()));
    c.on('exit', (code) => {
      if (code !== 0) {
        const e = new Error(`child exited with ${code}: ${err}`);
        if (!ready) reject(e);
        fail(e);
        return;
      }
      done(JSON.parse(out.split('\n').filter((l) => l.startsWith('['))[0]!) as TickReport[]);
    });
  });
}

describe.skipIf(skipReason !== null)(`scheduled runs happen exactly once across instances${skipReason !== null ? ` (skipped: ${skipReason})` : ''}`, () => {
  it('four schedulers in two processes racing over the same slots create one run per slot', async () => {
    const admin = new pg.Client({ connectionString: URL });
    await admin.connect();
    await admin.query(`DROP SCHEMA IF EXISTS ${SCHEMA} CASCADE`);
    await admin.end();
    const store = openPostgresStore({ connectionString: URL, schema: SCHEMA, poolSize: 2 });
    await store.migrate();
    for (const [id, schedule] of Object.entries(SCHEDULES)) await store.createDataset({ ...DATASET, id, schedule });

    const [a, b] = await Promise.all([child(), child()]);
    a!.go();
    b!.go();
    const reports = [...(await a!.reports), ...(await b!.reports)];
    expect(reports).toHaveLength(4);

    for (const [id, schedule] of Object.entries(SCHEDULES)) {
      const slots = dueSlots(schedule, new Date(START), new Date(END)).map((d) => d.toISOString());
      const created = reports.flatMap((r) => r.created.filter((c) => c.datasetId === id));
      const lost = reports.flatMap((r) => r.lost.filter((c) => c.datasetId === id));
      // every slot once among all winners, and found taken by each of the three others
      expect(created.map((c) => c.slot).sort()).toEqual(slots);
      expect(lost).toHaveLength(3 * slots.length);
      const runs = (await store.listRuns(id, { limit: 1000 })).runs;
      expect(runs.map((r) => r.id).sort()).toEqual(created.map((c) => c.runId).sort());
      expect(runs.every((r) => r.trigger === 'schedule' && r.status === 'queued')).toBe(true);
    }
    // the half hour holds 30 minutely slots, 15 two-minute slots, and 02:30 CEST once
    expect(reports.flatMap((r) => r.created)).toHaveLength(30 + 15 + 1);
    await store.close();
  }, 60_000);
});
