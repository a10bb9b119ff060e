/**
 * Keys over HTTP: open mode until the first key, then keys required; tokens shown once; revoking
 * works at once; audit records say who changed what.
 */
import { afterEach, describe, expect, it } from 'vitest';
import type { FastifyInstance } from 'fastify';
import { expectMatchesSpec, testApp } from './helper.js';

let app: FastifyInstance;
afterEach(async () => {
  await app?.close();
});

const json = { 'content-type': 'application/json' };
const bearer = (t: string) => ({ authorization: `Bearer ${t}` });

describe('/v1/keys', () => {
  it('the first key closes the open service; its token is shown once; revoking shuts it out at once', async () => {
    app = await testApp();
    expect((await app.inject({ method: 'GET', url: '/v1/datasets' })).statusCode).toBe(200);
    const made = await app.inject({ method: 'POST', url: '/v1/keys', headers: json, payload: { role: 'admin', label: 'first' } });
    expect(made.statusCode).toBe(201);
    expectMatchesSpec(made, '/v1/keys', 'post');
    const admin = made.json();
    expect(admin.token).toMatch(/^roost_[A-Za-z0-9_-]{43}$/);
    expect(made.headers.location).toBe(`/v1/keys/${admin.id}`);

    // open mode is over: no key, no entry
    const none = await app.inject({ method: 'GET', url: '/v1/datasets' });
    expect(none.statusCode).toBe(401);
    expect(none.headers['www-authenticate']).toMatch(/^Bearer/);
    expect((await app.inject({ method: 'GET', url: '/v1/datasets', headers: bearer(admin.token) })).statusCode).toBe(200);
    // the open parts stay open
    expect((await app.inject({ method: 'GET', url: '/healthz' })).statusCode).toBe(200);
    expect((await app.inject({ method: 'GET', url: '/openapi.yaml' })).statusCode).toBe(200);
    expect((await app.inject({ method: 'GET', url: '/docs/' })).statusCode).toBe(200);

    await app.inject({ method: 'POST', url: '/v1/datasets', headers: { ...json, ...bearer(admin.token) }, payload: { id: 'herons', settings: { eps: 100 } } });
    const reader = (await app.inject({ method: 'POST', url: '/v1/keys', headers: { ...json, ...bearer(admin.token) }, payload: { role: 'reader', dataset: 'herons' } })).json();
    const listed = await app.inject({ method: 'GET', url: '/v1/keys', headers: bearer(admin.token) });
    expectMatchesSpec(listed, '/v1/keys', 'get');
    expect(listed.body).not.toContain(admin.token);
    expect(listed.body).not.toContain(reader.token);
    expect(listed.json().keys.map((k: { id: string }) => k.id)).toEqual([admin.id, reader.id]);

    expect((await app.inject({ method: 'GET', url: '/v1/datasets/herons', headers: bearer(reader.token) })).statusCode).toBe(200);
    const forbidden = await app.inject({ method: 'DELETE', url: '/v1/datasets/herons', headers: bearer(reader.token) });
    expect(forbidden.statusCode).toBe(403);
    expect(forbidden.json()).toMatchObject({ code: 'forbidden', required_role: 'manager' });
    expect((await app.inject({ method: 'GET', url: '/v1/keys', headers: bearer(reader.token) })).statusCode).toBe(403);

    const revoked = await app.inject({ method: 'DELETE', url: `/v1/keys/${reader.id}`, headers: bearer(admin.token) });
    expect(revoked.statusCode).toBe(200);
    expect(revoked.json().revoked_at).not.toBeNull();
    expect((await app.inject({ method: 'GET', url: '/v1/datasets/herons', headers: bearer(reader.token) })).statusCode).toBe(401);
    expect((await app.inject({ method: 'DELETE', url: '/v1/keys/k_0123456789ab', headers: bearer(admin.token) })).json().code).toBe('key-not-found');

    const bad = await app.inject({ method: 'POST', url: '/v1/keys', headers: { ...json, ...bearer(admin.token) }, payload: { role: 'owner' } });
    expect(bad.statusCode).toBe(400);
    expect(bad.json().parameter).toBe('role');
    const unknown = await app.inject({ method: 'POST', url: '/v1/keys', headers: { ...json, ...bearer(admin.token) }, payload: { role: 'reader', dataset: 'nope' } });
    expect(unknown.statusCode).toBe(400);
    expect(unknown.json().parameter).toBe('dataset');
  });

  it('audit records say who created, changed and deleted what', async () => {
    app = await testApp();
    await app.inject({ method: 'POST', url: '/v1/datasets', headers: json, payload: { id: 'herons', settings: { eps: 100 } } });
    const admin = (await app.inject({ method: 'POST', url: '/v1/keys', headers: json, payload: { role: 'admin' } })).json();
    await app.inject({ method: 'PATCH', url: '/v1/datasets/herons', headers: { ...json, ...bearer(admin.token) }, payload: { name: 'Herons' } });
    await app.inject({ method: 'DELETE', url: '/v1/datasets/herons', headers: bearer(admin.token) });
    // refused and read-only requests leave no record
    await app.inject({ method: 'DELETE', url: '/v1/datasets/herons' });
    await app.inject({ method: 'GET', url: '/v1/datasets', headers: bearer(admin.token) });
    const audit = await app.inject({ method: 'GET', url: '/v1/audit', headers: bearer(admin.token) });
    expectMatchesSpec(audit, '/v1/audit', 'get');
    expect(audit.json().records.map((r: Record<string, unknown>) => [r.actor, r.key_id, r.action, r.dataset, r.status])).toEqual([
      ['key', admin.id, 'DELETE /v1/datasets/:id', 'herons', 204],
      ['key', admin.id, 'PATCH /v1/datasets/:id', 'herons', 200],
      ['open', null, 'POST /v1/keys', null, 201],
      ['open', null, 'POST /v1/datasets', null, 201],
    ]);
    expect(audit.json().records[3].target).toBe('/v1/datasets/herons');
  });
});
