import { describe, expect, it } from 'vitest';
import { defaultHooks } from '../../src/jobs/default-hooks.js';
import { runQuery, windowProblem, windowStart } from '../../src/jobs/execute.js';
import { MAX_INTERRUPTIONS, Runner } from '../../src/jobs/runner.js';
import { resolveSettings } from '../../src/run/settings.js';
import { openSqliteStore } from '../../src/storage/sqlite.js';

describe('crash recovery', () => {
  it('queues runs whose lease ran out again, and fails one interrupted MAX_INTERRUPTIONS times', async () => {
    const store = openSqliteStore({ path: ':memory:' });
    await store.migrate();
    await store.createDataset({ id: 'd', name: 'd', settings: { eps: 10 }, idProperty: null, window: null, schedule: null, webhook: null });
    const run = await store.createRun({ datasetId: 'd', settings: { eps: 10 }, trigger: 'request' });
    const runner = new Runner({ store, hooks: defaultHooks(), concurrency: 1, storeConfig: null, pool: null });
    for (let time = 1; time <= MAX_INTERRUPTIONS; time++) {
      // a claimer that dies at once: its 1 ms lease runs out on the next clock tick
      expect((await store.claimNextRun(`dead-process:${time}`, 1))!.id).toBe(run.id);
      let { requeued, failed } = await runner.recover();
      for (let guard = 0; guard < 1000 && requeued.length + failed.length === 0; guard++) {
        await new Promise((r) => setTimeout(r, 2));
        ({ requeued, failed } = await runner.recover());
      }
      const now = (await store.getRun('d', run.id))!;
      if (time < MAX_INTERRUPTIONS) {
        expect(requeued).toEqual([run.id]);
        expect(now.status).toBe('queued');
        expect(now.error).toMatch(new RegExp(`^interrupted ${time} time`));
      } else {
        expect(failed).toEqual([run.id]);
        expect(now.status).toBe('failed');
        expect(now.error).toMatch(/not tried again/);
      }
    }
    await store.close();
  });
});

describe('time windows', () => {
  it('steps back calendar months and years, and days, weeks and hours by their length', () => {
    const end = Date.parse('2026-03-31T12:00:00Z');
    expect(new Date(windowStart('P30D', end)).toISOString()).toBe('2026-03-01T12:00:00.000Z');
    expect(new Date(windowStart('P2W', end)).toISOString()).toBe('2026-03-17T12:00:00.000Z');
    expect(new Date(windowStart('PT12H', end)).toISOString()).toBe('2026-03-31T00:00:00.000Z');
    expect(new Date(windowStart('P1Y', end)).toISOString()).toBe('2025-03-31T12:00:00.000Z');
    expect(new Date(windowStart('P1DT1.5S', end)).toISOString()).toBe('2026-03-30T11:59:58.500Z');
    for (const bad of ['P', 'PT', '30D', 'P1.5D', 'P-1D', 'P30d']) expect(windowProblem(bad), bad).not.toBeNull();
  });

  it('clamps a day the target month does not have to its last day', () => {
    // source: TC39 Temporal, PlainDate.prototype.subtract with overflow "constrain" (the default):
    // 2026-03-31 minus one month is 2026-02-28; 2024-02-29 minus one year is 2023-02-28 (from memory)
    expect(new Date(windowStart('P1M', Date.parse('2026-03-31T12:00:00Z'))).toISOString()).toBe('2026-02-28T12:00:00.000Z');
    expect(new Date(windowStart('P1M', Date.parse('2024-03-31T00:00:00Z'))).toISOString()).toBe('2024-02-29T00:00:00.000Z');
    expect(new Date(windowStart('P1Y', Date.parse('2024-02-29T06:00:00Z'))).toISOString()).toBe('2023-02-28T06:00:00.000Z');
    expect(new Date(windowStart('P3M', Date.parse('2026-05-31T00:00:00Z'))).toISOString()).toBe('2026-02-28T00:00:00.000Z');
    expect(new Date(windowStart('P1M', Date.parse('2026-01-31T00:00:00Z'))).toISOString()).toBe('2025-12-31T00:00:00.000Z');
    expect(new Date(windowStart('P1Y2M', Date.parse('2026-04-30T00:00:00Z'))).toISOString()).toBe('2025-02-28T00:00:00.000Z');
    expect(new Date(windowStart('P1M1D', Date.parse('2026-03-31T00:00:00Z'))).toISOString()).toBe('2026-02-27T00:00:00.000Z');
  });

  it('narrows the window with since, until and where', () => {
    const created = Date.parse('2026-05-01T00:00:00Z');
    const s = resolveSettings({ eps: 10, since: '2026-04-20T00:00:00Z', where: 'plant=balsam' });
    expect(runQuery(s, 'P30D', created)).toEqual({ from: Date.parse('2026-04-20T00:00:00Z'), to: created, where: [{ property: 'plant', value: 'balsam' }] });
    expect(runQuery(resolveSettings({ eps: 10 }), null, created)).toEqual({});
  });
});
