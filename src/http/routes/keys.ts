/**
 * /v1/keys and /v1/audit, for admins: keys are created (the token is in that one answer and never
 * again), listed and revoked; the audit records say who changed or deleted what, and when.
 */
import type { FastifyInstance } from 'fastify';
import { checkKeyRequest, issueKey, keyJson, KeyRequestError } from '../../auth/keys.js';
import { isKeyId } from '../../auth/tokens.js';
import { StoreError } from '../../storage/store.js';
import { HttpProblem } from '../errors.js';

export default async function keyRoutes(app: FastifyInstance): Promise<void> {
  const { store } = app;

  app.post('/v1/keys', async (request, reply) => {
    const doc = request.body as Record<string, unknown>;
    try {
      const { key, token } = await issueKey(store, checkKeyRequest(doc));
      app.keyPresence.forget();
      return reply.code(201).header('location', `/v1/keys/${key.id}`).send({ ...keyJson(key), token });
    } catch (err) {
      if (err instanceof KeyRequestError) throw new HttpProblem('invalid-parameter', err.message, { parameter: err.field });
      throw err;
    }
  });

  app.get('/v1/keys', async () => ({ keys: (await store.listKeys()).map(keyJson) }));

  app.delete<{ Params: { keyId: string } }>('/v1/keys/:keyId', async (request) => {
    const id = request.params.keyId;
    const key = isKeyId(id) ? await store.revokeKey(id) : null;
    if (key === null) throw new HttpProblem('key-not-found', `there is no key ${JSON.stringify(id)}; GET /v1/keys lists them`);
    app.keyPresence.forget();
    return keyJson(key);
  });

  app.get('/v1/audit', async (request) => {
    const query = (request.query ?? {}) as Record<string, unknown>;
    const limit = (query.limit as number | undefined) ?? 100;
    let page;
    try {
      page = await store.listAudit({ limit, cursor: query.cursor === undefined ? undefined : String(query.cursor) });
    } catch (err) {
      if (err instanceof StoreError && err.code === 'invalid') throw new HttpProblem('invalid-parameter', err.message, { parameter: 'cursor' });
      throw err;
    }
    return {
      records: page.records.map((r) => ({ at: r.at, key_id: r.keyId, actor: r.actor, action: r.action, dataset: r.datasetId, target: r.target, status: r.status })),
      next: page.nextCursor === null ? null : `/v1/audit?limit=${limit}&cursor=${page.nextCursor}`,
    };
  });
}
