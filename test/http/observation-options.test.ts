/**
 * The reader's options on observation posts: CSV position columns, and a time column with its
 * format, from the dataset's settings or from the query of one post.
 */
import type { FastifyInstance } from 'fastify';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { buildApp } from '../../src/http/app.js';
import { expectMatchesSpec, testConfig } from './helper.js';

const PATH = '/v1/datasets/{id}/observations';
const CSV = { 'content-type': 'text/csv' };
// a survey sheet as exported: German headers, dates written DD.MM.YYYY
const sheet = 'Nr,Ost,Nord,Datum\nb1,8.5,47.2,02.03.2026\nb2,8.5001,47.2001,03.03.2026\nb3,8.5002,47.2,04.03.2026\n';

describe('reader options on observation posts', () => {
  let app: FastifyInstance;
  beforeAll(async () => {
    app = await buildApp({ config: testConfig({ dbPath: ':memory:' }), logger: false });
    await app.ready();
    const create = (payload: Record<string, unknown>) =>
      app.inject({ method: 'POST', url: '/v1/datasets', headers: { 'content-type': 'application/json' }, payload: JSON.stringify(payload) });
    expect((await create({ id: 'sheet', id_property: 'Nr', settings: { eps: 50 } })).statusCode).toBe(201);
    expect((await create({ id: 'dated', id_property: 'Nr', settings: { eps: 50, min_points: 3, lon_column: 'Ost', lat_column: 'Nord', time_column: 'Datum', time_format: 'DD.MM.YYYY' } })).statusCode).toBe(201);
  });
  afterAll(async () => {
    await app.close();
  });
  const post = (dataset: string, query: string) => app.inject({ method: 'POST', url: `/v1/datasets/${dataset}/observations${query}`, headers: CSV, payload: sheet });

  it('takes lon_column, lat_column, time_column and time_format in the query of one post', async () => {
    const res = await post('sheet', '?lon_column=Ost&lat_column=Nord&time_column=Datum&time_format=DD.MM.YYYY');
    expect(res.statusCode).toBe(200);
    expectMatchesSpec(res, PATH, 'POST');
    expect(res.json()).toMatchObject({ stored: true, accepted: 3 });
    // the times were read: a datetime filter finds them
    const listed = await app.inject({ method: 'GET', url: '/v1/datasets/sheet/observations?datetime=2026-03-03T00:00:00Z/2026-03-05T00:00:00Z' });
    expect(listed.json().features.map((f: { properties: { Nr: string } }) => f.properties.Nr)).toEqual(['b2', 'b3']);
  });

  it('reads the position and time columns a dataset\'s settings name', async () => {
    expect((await post('dated', '')).json()).toMatchObject({ stored: true, accepted: 3 });
    const listed = await app.inject({ method: 'GET', url: '/v1/datasets/dated/observations?datetime=2026-03-02T00:00:00Z/2026-03-02T12:00:00Z' });
    expect(listed.json().features.map((f: { properties: { Nr: string } }) => f.properties.Nr)).toEqual(['b1']);
    // a query option wins over the dataset's setting for that post: here nothing is dated
    const other = sheet.replace(/Datum/, 'Tag');
    const res = await app.inject({ method: 'POST', url: '/v1/datasets/dated/observations?time_column=Datum', headers: CSV, payload: other });
    // a whole-input problem: the body cannot be read as asked, nothing stored
    expect(res.statusCode).toBe(400);
    expect(res.json()).toMatchObject({ code: 'malformed-body', problems: [{ index: null, code: 'unknown-property' }] });
    expect(res.json().problems[0].message).toMatch(/^time_column: .*"Datum"/);
  });

  it('says which parameters a post takes, and refuses a time format it cannot read', async () => {
    const unknown = await post('sheet', '?delimiter=%3B');
    expect(unknown.statusCode).toBe(400);
    expect(unknown.json()).toMatchObject({ code: 'invalid-parameter', parameter: 'delimiter' });
    expect(unknown.json().detail).toMatch(/this endpoint takes replace, partial, lon_column, lat_column, time_column, time_format/);
    const badFormat = await post('sheet', '?lon_column=Ost&lat_column=Nord&time_column=Datum&time_format=dd.mm.yyyy');
    expect(badFormat.statusCode).toBe(400);
    expect(badFormat.json()).toMatchObject({ code: 'invalid-parameter', parameter: 'time_format' });
    expectMatchesSpec(badFormat, PATH, 'POST');
  });
});
