/**
 * Vary on answers chosen by Accept: the name is added to what is already there (CORS sets
 * `Vary: Origin`), never twice, and `*` stays alone (RFC 9110 §12.5.5).
 */
import Fastify from 'fastify';
import { describe, expect, it } from 'vitest';
import { addVary } from '../../src/http/conditional.js';

async function varyAfter(before: string | undefined): Promise<string | undefined> {
  const app = Fastify();
  app.get('/', async (_request, reply) => {
    if (before !== undefined) void reply.header('vary', before);
    addVary(reply, 'Accept');
    addVary(reply, 'accept');
    return 'x';
  });
  const res = await app.inject({ method: 'GET', url: '/' });
  await app.close();
  const v = res.headers['vary'];
  return v === undefined ? undefined : String(v);
}

describe('addVary', () => {
  it('adds Accept once, keeping Origin, and leaves * alone', async () => {
    expect(await varyAfter(undefined)).toBe('Accept');
    expect(await varyAfter('Origin')).toBe('Origin, Accept');
    expect(await varyAfter('Origin, Accept')).toBe('Origin, Accept');
    expect(await varyAfter('*')).toBe('*');
  });
});
