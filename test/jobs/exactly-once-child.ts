/**
 * Child process for the exactly-once test: opens `instances` stores (each its own PostgreSQL pool,
 * as separate Roost instances would), waits for "go" on stdin, then walks every scheduler's fake
 * clock from `start` to `end` in steps of `stepMs`, all schedulers looking at once at each step.
 * Prints one JSON line: the runs created and the slots lost, per scheduler.
 * Usage: node --import tsx exactly-once-child.ts <database url> <schema> <start ISO> <end ISO> <step ms> <instances>
 */
import { createInterface } from 'node:readline';
import { Scheduler, type TickReport } from '../../src/jobs/schedule.js';
import { openPostgresStore } from '../../src/storage/postgres.js';

const [url, schema, startIso, endIso, stepText, instancesText] = process.argv.slice(2) as [string, string, string, string, string, string];
const start = Date.parse(startIso);
const end = Date.parse(endIso);
const step = Number(stepText);
const stores = Array.from({ length: Number(instancesText) }, () => openPostgresStore({ connectionString: url, schema, poolSize: 2 }));
let clock = start;
const schedulers = stores.map((store) => new Scheduler({ store, now: () => clock, settings: { catchUpMs: 0, minIntervalMs: 0 } }));
await Promise.all(stores.map((s) => s.getDataset('warm-up'))); // connections open before the race
process.stdout.write('ready\n');
const lines = createInterface({ input: process.stdin });
for await (const line of lines) if (line === 'go') break;

const reports: TickReport[] = schedulers.map(() => ({ created: [], lost: [] }));
for (clock = start + step; clock <= end; clock += step) {
  await Promise.all(
    schedulers.map(async (s, k) => {
      await s.tick();
      reports[k]!.created.push(...s.lastReport.created);
      reports[k]!.lost.push(...s.lastReport.lost);
    }),
  );
}
process.stdout.write(JSON.stringify(reports) + '\n');
await Promise.all(stores.map((s) => s.close()));
process.exit(0);
