/**
 * Random tokens, callers and operations thrown at a service that has keys: no request gets past
 * a 401 or 403 that openapi.yaml's declarations say it must get, whatever the token looks like
 * (garbage, token-shaped but unknown, revoked, or a real key of some role and dataset limit).
 */
import fc from 'fast-check';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { newToken } from '../../src/auth/tokens.js';
import { openStore } from '../../src/storage/index.js';
import { accessService, expected, namesDataset, OPERATIONS, urlOf, WHO, type AccessService, type Who } from './access-fixture.js';

/** fixed so every run draws the same cases; ROOST_FC_SEED varies it on purpose */
const SEED = Number(process.env.ROOST_FC_SEED ?? 20261203);
const RUNS = Math.max(20, Number(process.env.ROOST_FC_RUNS ?? 300));
console.log(`test/http/access-property.test.ts: fast-check seed ${SEED} (set ROOST_FC_SEED to vary), ${RUNS} runs`);

type Caller = { kind: 'key'; who: Exclude<Who, 'none'> } | { kind: 'none' } | { kind: 'revoked' } | { kind: 'header'; value: string };

const caller: fc.Arbitrary<Caller> = fc.oneof(
  fc.constantFrom(...(WHO.slice(1) as Exclude<Who, 'none'>[])).map((who) => ({ kind: 'key' as const, who })),
  fc.constant({ kind: 'none' as const }),
  fc.constant({ kind: 'revoked' as const }),
  // a token of the right shape that no key has
  fc.constant(null).map(() => ({ kind: 'header' as const, value: `Bearer ${newToken()}` })),
  fc.string({ maxLength: 60 }).map((t) => ({ kind: 'header' as const, value: `Bearer ${t}` })),
  fc.string({ maxLength: 60 }).map((t) => ({ kind: 'header' as const, value: t })),
  fc.constantFrom('Basic YWRtaW46YWRtaW4=', 'Bearer', 'bearer roost_', 'Token x', '').map((value) => ({ kind: 'header' as const, value })),
);

describe('access under random callers', () => {
  let s: AccessService;
  let revoked: string;
  beforeAll(async () => {
    s = await accessService(await openStore({ sqlitePath: ':memory:' }));
    const made = await s.app.inject({ method: 'POST', url: '/v1/keys', headers: { authorization: `Bearer ${s.tokens.admin}`, 'content-type': 'application/json' }, payload: { role: 'admin' } });
    revoked = made.json().token;
    await s.app.inject({ method: 'DELETE', url: `/v1/keys/${made.json().id}`, headers: { authorization: `Bearer ${s.tokens.admin}` } });
  });
  afterAll(async () => {
    await s?.close();
  });

  it('never gets past a 401 or 403 it should get', async () => {
    await fc.assert(
      fc.asyncProperty(caller, fc.constantFrom(...OPERATIONS), fc.constantFrom('d1', 'd2', 'zz'), async (c, op, datasetId) => {
        await s.restore();
        const headers: Record<string, string> = { 'content-type': 'application/json' };
        let who: Who = 'none';
        if (c.kind === 'key') {
          who = c.who;
          headers.authorization = `Bearer ${s.tokens[c.who]}`;
        } else if (c.kind === 'revoked') headers.authorization = `Bearer ${revoked}`;
        else if (c.kind === 'header') headers.authorization = c.value;
        const res = await s.app.inject({ method: op.method as 'GET', url: urlOf(op, datasetId, { run: s.run, keyId: s.spareKeyId }), headers, payload: ['POST', 'PATCH', 'PUT'].includes(op.method) ? '{}' : undefined });
        const dataset = namesDataset(op) ? datasetId : null;
        // any Authorization header that is not a key in force counts as no key at all, or worse
        const want = c.kind === 'key' || c.kind === 'none' ? expected(op, who, dataset) : op.access === 'public' ? 'pass' : 401;
        if (want !== 'pass') expect(res.statusCode, `${op.method} ${op.path} ${JSON.stringify(c)}`).toBe(want);
        else expect([401, 403], `${op.method} ${op.path} ${JSON.stringify(c)}`).not.toContain(res.statusCode);
        expect(res.statusCode).toBeLessThan(500);
      }),
      { seed: SEED, numRuns: RUNS, examples: [[{ kind: 'revoked' }, OPERATIONS.find((o) => o.operationId === 'listKeys')!, 'd1']] },
    );
  });
});
