/**
 * What a dataset says about its schedule: when the next run is due, and a specific message for
 * each way a schedule can be wrong.
 */
import type { FastifyInstance } from 'fastify';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { buildApp } from '../../src/http/app.js';
import { expectMatchesSpec, testConfig } from './helper.js';

const JSON_TYPE = { 'content-type': 'application/json' };

describe('dataset schedules', () => {
  let app: FastifyInstance;
  beforeAll(async () => {
    app = await buildApp({ config: testConfig({ dbPath: ':memory:', scheduleScanMs: 0 }), logger: false });
    await app.ready();
  });
  afterAll(async () => {
    await app.close();
  });
  const create = (body: Record<string, unknown>) => app.inject({ method: 'POST', url: '/v1/datasets', headers: JSON_TYPE, payload: JSON.stringify({ settings: { eps: 50 }, ...body }) });

  it('show when the next scheduled run is due', async () => {
    const before = Date.now();
    const res = await create({ id: 'nightly', schedule: { cron: '0 2 * * *', timezone: 'UTC' } });
    expect(res.statusCode).toBe(201);
    expectMatchesSpec(res, '/v1/datasets', 'POST');
    const next = Date.parse(res.json().next_run_at as string);
    // the next 02:00 UTC after the request: within a day, at 02:00:00
    expect(next).toBeGreaterThan(before);
    expect(next - before).toBeLessThanOrEqual(86_400_000);
    expect(new Date(next).toISOString()).toMatch(/T02:00:00\.000Z$/);
    const plain = await create({ id: 'manual' });
    expect(plain.json().next_run_at).toBeNull();
    const got = await app.inject({ method: 'GET', url: '/v1/datasets/nightly' });
    expect(got.json().next_run_at).toBe(res.json().next_run_at);
  });

  it('give a missing time zone, a missing cron, an unknown time zone and a bad cron each their own message', async () => {
    const cases: [Record<string, unknown>, RegExp, string][] = [
      [{ cron: '0 2 * * *' }, /schedule.timezone is required, for example "Europe\/Zurich"/, 'schedule.timezone'],
      [{ timezone: 'Europe/Berlin' }, /schedule.cron is required, for example "0 2 \* \* \*"/, 'schedule.cron'],
      [{ cron: '0 2 * * *', timezone: 'Mars/Olympus' }, /timezone "Mars\/Olympus" is not an IANA time zone name/, 'schedule'],
      [{ cron: '0 25 * * *', timezone: 'UTC' }, /cron "0 25 \* \* \*" is not usable/, 'schedule'],
    ];
    for (const [schedule, message, parameter] of cases) {
      const res = await create({ id: 'bad', schedule });
      expect(res.statusCode, JSON.stringify(schedule)).toBe(400);
      expect(res.json(), JSON.stringify(schedule)).toMatchObject({ code: 'invalid-parameter', parameter });
      expect(res.json().detail, JSON.stringify(schedule)).toMatch(message);
    }
  });
});
