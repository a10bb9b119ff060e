import type { FastifyInstance } from 'fastify';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { buildApp } from '../../src/http/app.js';
import { expectMatchesSpec, testConfig } from './helper.js';

const JSON_TYPE = { 'content-type': 'application/json' };

describe('/v1/datasets', () => {
  let app: FastifyInstance;
  beforeAll(async () => {
    app = await buildApp({ config: testConfig({ dbPath: ':memory:' }), logger: false });
    await app.ready();
  });
  afterAll(async () => {
    await app.close();
  });
  const post = (body: unknown) => app.inject({ method: 'POST', url: '/v1/datasets', headers: JSON_TYPE, payload: JSON.stringify(body) });

  it('creates a dataset (201, Location), lists it and reads it with its observation count', async () => {
    const res = await post({ id: 'nests', name: 'Nests', settings: { eps: 120, min_points: 4, where: ['kind=a'] }, window: 'P30D', id_property: 'ref' });
    expect(res.statusCode).toBe(201);
    expect(res.headers.location).toBe('/v1/datasets/nests');
    expectMatchesSpec(res, '/v1/datasets', 'POST');
    expect(res.json()).toMatchObject({ id: 'nests', name: 'Nests', window: 'P30D', id_property: 'ref', settings: { eps: 120, min_points: 4 }, observations: 0 });

    const list = await app.inject({ method: 'GET', url: '/v1/datasets' });
    expectMatchesSpec(list, '/v1/datasets', 'GET');
    expect(list.json().datasets.map((d: { id: string }) => d.id)).toContain('nests');

    const one = await app.inject({ method: 'GET', url: '/v1/datasets/nests' });
    expectMatchesSpec(one, '/v1/datasets/{id}', 'GET');
    expect(one.json().observations).toBe(0);
  });

  it('the name defaults to the id; the webhook secret is stored but never shown', async () => {
    const res = await post({ id: 'hooked', settings: { eps: 50 }, webhook: { url: 'https://example.org/hook', secret: 's3cret' }, schedule: { cron: '0 2 * * *', timezone: 'Europe/Zurich' } });
    expect(res.statusCode).toBe(201);
    expect(res.json().name).toBe('hooked');
    expect(res.json().webhook).toEqual({ url: 'https://example.org/hook' });
    expect(res.body).not.toContain('s3cret');
    expect((await app.datasets.store.getDataset('hooked'))!.webhook!.secret).toBe('s3cret');
    expect(res.json().schedule).toEqual({ cron: '0 2 * * *', timezone: 'Europe/Zurich' });
  });

  it('409 dataset-exists for an id in use', async () => {
    await post({ id: 'twice', settings: { eps: 10 } });
    const res = await post({ id: 'twice', settings: { eps: 10 } });
    expect(res.statusCode).toBe(409);
    expect(res.json().code).toBe('dataset-exists');
    expectMatchesSpec(res, '/v1/datasets', 'POST');
  });

  it('400 invalid-parameter names the member: missing or bad id, bad settings, bad window, unknown member, bad webhook', async () => {
    const cases: [unknown, string][] = [
      [{ settings: { eps: 10 } }, 'id'],
      [{ id: 'has space', settings: { eps: 10 } }, 'id'],
      [{ id: 'x1' }, 'settings'],
      [{ id: 'x2', settings: { min_points: 3 } }, 'settings.eps'],
      [{ id: 'x3', settings: { eps: 10, epz: 3 } }, 'settings.epz'],
      [{ id: 'x4', settings: { eps: 10 }, window: '30 days' }, 'window'],
      [{ id: 'x5', settings: { eps: 10 }, colour: 'red' }, 'colour'],
      [{ id: 'x6', settings: { eps: 10 }, webhook: { url: 'ftp://x', secret: 'k' } }, 'webhook'],
      [{ id: 'x7', settings: { eps: 10 }, schedule: { cron: '0 2 * * *' } }, 'schedule.timezone'],
      [{ id: 'x8', settings: { eps: 10 }, schedule: { cron: '0 2 * * *', timezone: 'Mars/Olympus' } }, 'schedule'],
      [{ id: 'x9', settings: { eps: 10 }, schedule: { cron: 'every night', timezone: 'UTC' } }, 'schedule'],
      // more often than the floor (default once every 5 minutes)
      [{ id: 'x10', settings: { eps: 10 }, schedule: { cron: '* * * * * *', timezone: 'UTC' } }, 'schedule'],
      [{ id: 'x11', settings: { eps: 10 }, schedule: { cron: '*/2 * * * *', timezone: 'UTC' } }, 'schedule'],
      [{ id: '.', settings: { eps: 10 } }, 'id'],
      [{ id: '..', settings: { eps: 10 } }, 'id'],
    ];
    for (const [body, parameter] of cases) {
      const res = await post(body);
      expect(res.statusCode, JSON.stringify(body)).toBe(400);
      expect(res.json()).toMatchObject({ code: 'invalid-parameter', parameter });
      expectMatchesSpec(res, '/v1/datasets', 'POST');
    }
    const broken = await app.inject({ method: 'POST', url: '/v1/datasets', headers: JSON_TYPE, payload: '{"id":' });
    expect(broken.json().code).toBe('malformed-body');
  });

  it('refuses a schedule firing more often than the floor with a 400 saying so, and takes one every 5 minutes', async () => {
    const res = await post({ id: 'eager', settings: { eps: 10 }, schedule: { cron: '* * * * *', timezone: 'UTC' } });
    expect(res.statusCode).toBe(400);
    expect(res.json().detail).toMatch(/fires 1 minute apart .*at most once every 5 minutes/);
    expect((await post({ id: 'steady', settings: { eps: 10 }, schedule: { cron: '*/5 * * * *', timezone: 'UTC' } })).statusCode).toBe(201);
    const patched = await app.inject({ method: 'PATCH', url: '/v1/datasets/steady', headers: JSON_TYPE, payload: JSON.stringify({ schedule: { cron: '*/1 * * * *', timezone: 'UTC' } }) });
    expect(patched.statusCode).toBe(400);
    // the floor is the operator's to set
    const lax = await buildApp({ config: testConfig({ dbPath: ':memory:', scheduleMinIntervalS: 60 }), logger: false });
    await lax.ready();
    const minutely = await lax.inject({ method: 'POST', url: '/v1/datasets', headers: JSON_TYPE, payload: JSON.stringify({ id: 'eager', settings: { eps: 10 }, schedule: { cron: '* * * * *', timezone: 'UTC' } }) });
    expect(minutely.statusCode).toBe(201);
    await lax.close();
  });

  it('PATCH merges settings (null removes a member), replaces other members and checks the result', async () => {
    await post({ id: 'patchy', settings: { eps: 100, min_points: 7, count_by: 'kind' } });
    const res = await app.inject({ method: 'PATCH', url: '/v1/datasets/patchy', headers: JSON_TYPE, payload: JSON.stringify({ name: 'Renamed', settings: { eps: 80, count_by: null }, window: 'P2W' }) });
    expect(res.statusCode).toBe(200);
    expectMatchesSpec(res, '/v1/datasets/{id}', 'PATCH');
    expect(res.json()).toMatchObject({ name: 'Renamed', settings: { eps: 80, min_points: 7 }, window: 'P2W' });
    expect(res.json().settings).not.toHaveProperty('count_by');
    const bad = await app.inject({ method: 'PATCH', url: '/v1/datasets/patchy', headers: JSON_TYPE, payload: JSON.stringify({ settings: { eps: null } }) });
    expect(bad.statusCode).toBe(400);
    expect(bad.json().parameter).toBe('settings.eps');
    const rename = await app.inject({ method: 'PATCH', url: '/v1/datasets/patchy', headers: JSON_TYPE, payload: JSON.stringify({ id: 'other' }) });
    expect(rename.json().parameter).toBe('id');
    const missing = await app.inject({ method: 'PATCH', url: '/v1/datasets/nope', headers: JSON_TYPE, payload: '{}' });
    expect(missing.statusCode).toBe(404);
    expect(missing.json().code).toBe('dataset-not-found');
    expectMatchesSpec(missing, '/v1/datasets/{id}', 'PATCH');
  });

  it('DELETE removes a dataset (204), then 404 dataset-not-found', async () => {
    await post({ id: 'gone', settings: { eps: 10 } });
    const res = await app.inject({ method: 'DELETE', url: '/v1/datasets/gone' });
    expect(res.statusCode).toBe(204);
    for (const method of ['GET', 'DELETE'] as const) {
      const again = await app.inject({ method, url: '/v1/datasets/gone' });
      expect(again.statusCode).toBe(404);
      expect(again.json().code).toBe('dataset-not-found');
      expectMatchesSpec(again, '/v1/datasets/{id}', method);
    }
  });
});
