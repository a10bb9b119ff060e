/**
 * Schedules: due slots in a named time zone across both daylight-saving changes, and the scheduler
 * on a fake clock over a real (SQLite) store: one run per slot, schedule edits picked up, missed
 * slots collapsed into one, catch-up at start-up, bad schedules skipped with a warning.
 *
 * Time-zone facts used (source: IANA tz database, rule EU for Europe/Berlin): in 2025 clocks went
 * from 02:00 CET to 03:00 CEST on 30 March (01:00 UTC) and from 03:00 CEST back to 02:00 CET on
 * 26 October (01:00 UTC).
 */
import { afterEach, beforeEach, describe, expect, it } from 'vitest';
import { dueSlots, nextSlot, Scheduler, scheduleProblem, type ScheduleLog } from '../../src/jobs/schedule.js';
import type { Run, Store } from '../../src/storage/store.js';
import { DATASET, tempStore } from './helpers.js';

const BERLIN_2AM = { cron: '0 2 * * *', timezone: 'Europe/Berlin' };
const iso = (ds: Date[]): string[] => ds.map((d) => d.toISOString());

describe('due slots', () => {
  it('02:00 Berlin on the spring-forward night runs once, at 03:00 summer time (01:00 UTC)', () => {
    const slots = dueSlots(BERLIN_2AM, new Date('2025-03-28T12:00:00Z'), new Date('2025-03-31T12:00:00Z'));
    expect(iso(slots)).toEqual([
      '2025-03-29T01:00:00.000Z', // 02:00 CET
      '2025-03-30T01:00:00.000Z', // 02:00 does not exist: 03:00 CEST, the first instant after the gap
      '2025-03-31T00:00:00.000Z', // 02:00 CEST
    ]);
  });

  it('02:30 Berlin on the fall-back night runs once, at its first (summer-time) occurrence', () => {
    const slots = dueSlots({ cron: '30 2 * * *', timezone: 'Europe/Berlin' }, new Date('2025-10-25T12:00:00Z'), new Date('2025-10-27T12:00:00Z'));
    expect(iso(slots)).toEqual(['2025-10-26T00:30:00.000Z', '2025-10-27T01:30:00.000Z']);
  });

  it('an every-30-minutes pattern fires through both 02:00 hours of the fall-back night', () => {
    const slots = dueSlots({ cron: '*/30 * * * *', timezone: 'Europe/Berlin' }, new Date('2025-10-25T23:45:00Z'), new Date('2025-10-26T02:00:00Z'));
    // 02:00, 02:30 CEST, then 02:00, 02:30 CET, then 03:00 CET: every 30 minutes of elapsed time
    expect(iso(slots)).toEqual(['2025-10-26T00:00:00.000Z', '2025-10-26T00:30:00.000Z', '2025-10-26T01:00:00.000Z', '2025-10-26T01:30:00.000Z', '2025-10-26T02:00:00.000Z']);
  });

  it('slots are in (after, until]; the latest ones are kept when capped', () => {
    const after = new Date('2025-01-10T01:00:00Z'); // exactly 02:00 CET: not included
    expect(iso(dueSlots(BERLIN_2AM, after, new Date('2025-01-12T01:00:00Z')))).toEqual(['2025-01-11T01:00:00.000Z', '2025-01-12T01:00:00.000Z']);
    expect(iso(dueSlots(BERLIN_2AM, after, new Date('2025-01-20T00:00:00Z'), 2))).toEqual(['2025-01-18T01:00:00.000Z', '2025-01-19T01:00:00.000Z']);
    expect(nextSlot({ cron: '0 2 * * *', timezone: 'UTC' }, new Date('2025-01-10T02:00:00Z'))!.toISOString()).toBe('2025-01-11T02:00:00.000Z');
  });

  it('says what is wrong with a schedule', () => {
    expect(scheduleProblem(BERLIN_2AM)).toBeNull();
    expect(scheduleProblem({ cron: '0 2 * *', timezone: 'UTC' })).toMatch(/not usable/);
    expect(scheduleProblem({ cron: '0 2 * * *', timezone: 'Mars/Olympus' })).toMatch(/IANA time zone/);
    expect(scheduleProblem({ cron: '0 0 30 2 *', timezone: 'UTC' })).toMatch(/never fires|not usable/); // 30 February
  });

  it('refuses schedules firing more often than the floor (default every 5 minutes), wherever in the sample the short gap is', () => {
    const from = new Date('2025-06-01T00:00:00Z');
    const utc = (cron: string, floorMs?: number): string | null => scheduleProblem({ cron, timezone: 'UTC' }, floorMs, from);
    expect(utc('* * * * * *')).toMatch(/fires 1 second apart .*at most once every 5 minutes/);
    expect(utc('* * * * *')).toMatch(/fires 1 minute apart/);
    expect(utc('*/4 * * * *')).toMatch(/fires 4 minutes apart/);
    expect(utc('*/5 * * * *')).toBeNull();
    expect(utc('0 2 * * *')).toBeNull();
    // two slots a minute apart once a night, the first of them 2 hours after the sample starts
    expect(utc('0,1 2 * * *')).toMatch(/fires 1 minute apart \(at 2025-06-01T02:00:00.000Z/);
    // and once a year, many slots into the sample
    expect(utc('0 0,12 * * *')).toBeNull();
    expect(utc('0 0 1 1 *,30 0 1 1 *')).not.toBeNull();
    // configurable, 0 switching the floor off
    expect(utc('* * * * *', 60_000)).toBeNull();
    expect(utc('* * * * * *', 0)).toBeNull();
    // a daylight-saving night in Berlin does not make a half-hourly schedule fire more often
    expect(scheduleProblem({ cron: '*/30 * * * *', timezone: 'Europe/Berlin' }, 30 * 60_000, new Date('2025-10-25T12:00:00Z'))).toBeNull();
  });
});

describe('the scheduler on a fake clock', () => {
  let store: Store;
  let dispose: () => Promise<void>;
  let clock: number;
  const warnings: string[] = [];
  const log: ScheduleLog = { info: () => undefined, warn: (_o, msg) => warnings.push(msg), error: (_o, msg) => warnings.push(msg) };
  const at = (text: string): number => (clock = Date.parse(text));
  const scheduled = async (): Promise<Run[]> => (await store.listRuns(DATASET.id, { limit: 100 })).runs.filter((r) => r.trigger === 'schedule').reverse();

  beforeEach(async () => {
    ({ store, dispose } = await tempStore());
    await store.createDataset({ ...DATASET, schedule: BERLIN_2AM });
    warnings.length = 0;
  });
  afterEach(async () => {
    await dispose();
  });

  it('creates one run per slot across the spring-forward night, with the dataset settings', async () => {
    at('2025-03-29T00:30:00Z');
    const woken: string[] = [];
    const s = new Scheduler({ store, now: () => clock, settings: { catchUpMs: 0, scanMs: 3_600_000 }, onRun: (_r, slot) => woken.push(slot.toISOString()), log });
    expect(await s.tick()).toBe(Date.parse('2025-03-29T01:00:00Z')); // next look: the slot, before the scan interval is up
    expect(await s.tick()).toBe(Date.parse('2025-03-29T01:00:00Z'));
    at('2025-03-29T01:00:00.010Z');
    await s.tick();
    expect(s.lastReport.created.map((c) => c.slot)).toEqual(['2025-03-29T01:00:00.000Z']);
    at('2025-03-29T01:00:30Z');
    await s.tick(); // a second look soon after: nothing new
    expect(s.lastReport.created).toEqual([]);
    at('2025-03-30T00:59:59Z'); // 01:59:59 CET, just before the clocks jump
    await s.tick();
    expect(s.lastReport.created).toEqual([]);
    at('2025-03-30T01:00:00Z'); // 03:00 CEST
    await s.tick();
    at('2025-03-31T00:00:00Z'); // 02:00 CEST
    await s.tick();
    expect(woken).toEqual(['2025-03-29T01:00:00.000Z', '2025-03-30T01:00:00.000Z', '2025-03-31T00:00:00.000Z']);
    const runs = await scheduled();
    expect(runs).toHaveLength(3);
    expect(runs.every((r) => r.status === 'queued' && r.settings['eps'] === 120 && r.settings['min_points'] === 4)).toBe(true);
  });

  it('a slot already claimed (by another instance) creates no run here', async () => {
    at('2025-06-01T00:00:30Z');
    const elsewhere = await store.createScheduledRun({ datasetId: DATASET.id, settings: {}, trigger: 'schedule' }, '2025-06-01T00:00:00Z'); // 02:00 CEST, taken elsewhere
    expect(elsewhere).not.toBeNull();
    const s = new Scheduler({ store, now: () => clock, settings: { catchUpMs: 60_000 }, log });
    await s.tick();
    expect(s.lastReport).toEqual({ created: [], lost: [{ datasetId: DATASET.id, slot: '2025-06-01T00:00:00.000Z' }] });
    // only the other instance's run
    expect((await scheduled()).map((r) => r.id)).toEqual([elsewhere!.id]);
  });

  it('tries a slot again at the next look when its run could not be created, and claims nothing meanwhile', async () => {
    at('2025-06-01T00:00:30Z');
    let failures = 1;
    const flaky = new Proxy(store, {
      get(target, key, receiver) {
        if (key === 'createScheduledRun' && failures > 0) {
          return async () => {
            failures--;
            throw new Error('connection lost');
          };
        }
        const v = Reflect.get(target, key, receiver) as unknown;
        return typeof v === 'function' ? (v as (...a: unknown[]) => unknown).bind(target) : v;
      },
    });
    const s = new Scheduler({ store: flaky, now: () => clock, settings: { catchUpMs: 60_000 }, log });
    await s.tick();
    expect(s.lastReport.created).toEqual([]);
    expect(await scheduled()).toEqual([]);
    at('2025-06-01T00:01:30Z');
    await s.tick();
    expect(s.lastReport.created.map((c) => c.slot)).toEqual(['2025-06-01T00:00:00.000Z']);
    expect(await scheduled()).toHaveLength(1);
  });

  it('catches up the latest slot missed just before start-up, and only the latest of several', async () => {
    at('2025-06-01T00:10:00Z'); // ten minutes after 02:00 CEST
    const late = new Scheduler({ store, now: () => clock, settings: { catchUpMs: 15 * 60_000 }, log });
    await late.tick();
    expect(late.lastReport.created.map((c) => c.slot)).toEqual(['2025-06-01T00:00:00.000Z']);
    // asleep for three nights: one run, for the latest slot
    at('2025-06-04T12:00:00Z');
    await late.tick();
    expect(late.lastReport.created.map((c) => c.slot)).toEqual(['2025-06-04T00:00:00.000Z']);
    // started too long after the slot: nothing
    at('2025-06-05T00:20:00Z');
    const later = new Scheduler({ store, now: () => clock, settings: { catchUpMs: 15 * 60_000 }, log });
    await later.tick();
    expect(later.lastReport.created).toEqual([]);
  });

  it('picks up schedule changes, new datasets and removals at its next look', async () => {
    at('2025-06-01T10:00:00Z');
    const s = new Scheduler({ store, now: () => clock, settings: { catchUpMs: 0 }, log });
    expect(await s.tick()).toBe(Date.parse('2025-06-01T10:01:00Z')); // the scan interval comes before 02:00
    await store.updateDataset(DATASET.id, { schedule: { cron: '15 * * * *', timezone: 'UTC' } });
    await store.createDataset({ ...DATASET, id: 'roosts', schedule: null });
    at('2025-06-01T10:15:00Z');
    await s.tick();
    expect(s.lastReport.created.map((c) => [c.datasetId, c.slot])).toEqual([[DATASET.id, '2025-06-01T10:15:00.000Z']]);
    await store.updateDataset(DATASET.id, { schedule: null });
    at('2025-06-01T11:15:00Z');
    await s.tick();
    expect(s.lastReport.created).toEqual([]);
    expect(await scheduled()).toHaveLength(1);
  });

  it('skips a dataset whose schedule cannot be used, warns once, and keeps the others running', async () => {
    await store.createDataset({ ...DATASET, id: 'broken', schedule: { cron: '0 2 * * *', timezone: 'Atlantis/Capital' } });
    await store.createDataset({ ...DATASET, id: 'fine', schedule: { cron: '0 * * * *', timezone: 'UTC' } });
    at('2025-06-01T10:30:00Z');
    const s = new Scheduler({ store, now: () => clock, settings: { catchUpMs: 0 }, log });
    await s.tick();
    at('2025-06-01T11:00:00Z');
    await s.tick();
    expect(s.lastReport.created.map((c) => c.datasetId)).toEqual(['fine']);
    expect(warnings.filter((w) => /not usable/.test(w))).toHaveLength(1);
  });

  it('does not run a stored schedule that fires more often than the floor, and says so once', async () => {
    await store.createDataset({ ...DATASET, id: 'eager', schedule: { cron: '* * * * *', timezone: 'UTC' } });
    await store.createDataset({ ...DATASET, id: 'nightly', schedule: { cron: '0 11 * * *', timezone: 'UTC' } });
    at('2025-06-01T10:30:00Z');
    const s = new Scheduler({ store, now: () => clock, settings: { catchUpMs: 0 }, log });
    await s.tick();
    at('2025-06-01T11:00:00Z');
    await s.tick();
    expect(s.lastReport.created.map((c) => c.datasetId)).toEqual(['nightly']);
    expect(warnings.filter((w) => /not usable/.test(w))).toHaveLength(1);
    // with the floor lowered it runs
    const lax = new Scheduler({ store, now: () => clock, settings: { catchUpMs: 0, minIntervalMs: 60_000 }, log });
    at('2025-06-01T11:00:30Z');
    await lax.tick();
    at('2025-06-01T11:01:00Z');
    await lax.tick();
    expect(lax.lastReport.created.map((c) => c.datasetId)).toEqual(['eager']);
  });

  it('refuses unusable settings', () => {
    expect(() => new Scheduler({ store, settings: { scanMs: 0 } })).toThrow(/scanMs/);
    expect(() => new Scheduler({ store, settings: { catchUpMs: -1 } })).toThrow(/catchUpMs/);
  });
});

describe('the scheduler on the real clock', () => {
  it('fires at the slots by itself and stops cleanly', async () => {
    const { store, dispose } = await tempStore();
    await store.createDataset({ ...DATASET, schedule: { cron: '* * * * * *', timezone: 'UTC' } }); // every second
    const created: string[] = [];
    const s = new Scheduler({ store, settings: { catchUpMs: 0, scanMs: 60_000, minIntervalMs: 0 }, onRun: (r) => created.push(r.id) });
    s.start();
    for (let i = 0; i < 100 && created.length < 2; i++) await new Promise((r) => setTimeout(r, 50));
    await s.stop();
    const after = created.length;
    expect(after).toBeGreaterThanOrEqual(2);
    await new Promise((r) => setTimeout(r, 1100));
    expect(created).toHaveLength(after); // nothing after stop()
    expect((await store.listRuns(DATASET.id, { limit: 100 })).runs).toHaveLength(after);
    await dispose();
  });
});
