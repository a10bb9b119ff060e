/**
 * Audit records: every request that changed or deleted something (POST, PUT, PATCH, DELETE
 * answered 2xx, clustering posted points aside) is recorded with who made it (the key id, or open
 * mode), what (method and route), on which dataset and resource, and when. Admins read them at
 * GET /v1/audit. A record that cannot be written is logged; the answer has been sent already.
 */
import type { FastifyInstance, FastifyReply, FastifyRequest } from 'fastify';
import fp from 'fastify-plugin';

const CHANGING = new Set(['POST', 'PUT', 'PATCH', 'DELETE']);
/** routes that change nothing stored although they are POSTs */
const COMPUTE = new Set(['/v1/cluster', '/v1/k-distance']);

async function auditPlugin(app: FastifyInstance): Promise<void> {
  app.addHook('onResponse', async (request: FastifyRequest, reply: FastifyReply) => {
    const route = request.routeOptions.url;
    if (route === undefined || !CHANGING.has(request.method) || COMPUTE.has(route)) return;
    if (reply.statusCode < 200 || reply.statusCode >= 300) return;
    const params = (request.params ?? {}) as Record<string, string | undefined>;
    const principal = request.principal;
    try {
      await app.store.appendAudit({
        keyId: principal?.keyId ?? null,
        actor: principal?.keyId ? 'key' : 'open',
        action: `${request.method} ${route}`,
        datasetId: params.id ?? null,
        // a creation names what it made in Location
        target: params.obsId ?? params.run ?? params.keyId ?? (typeof reply.getHeader('location') === 'string' ? (reply.getHeader('location') as string) : null),
        status: reply.statusCode,
      });
    } catch (err) {
      request.log.warn({ err }, 'audit record not written');
    }
  });
}

export default fp(auditPlugin, { name: 'roost-audit', fastify: '5.x', dependencies: ['roost-store', 'roost-access'] });
