/**
 * Shutting down: once close() has begun, new requests are answered 503 problem+json (with
 * Connection: close) while those in flight finish. `app.isClosing()` tells /healthz.
 */
import type { FastifyInstance } from 'fastify';
import fp from 'fastify-plugin';
import { HttpProblem } from '../errors.js';

declare module 'fastify' {
  interface FastifyInstance {
    /** true once close() has begun */
    isClosing(): boolean;
  }
}

export interface ShutdownOptions {
  /** seconds a client is asked to wait (Retry-After) */
  retryAfterS: number;
}

async function shutdown(app: FastifyInstance, options: ShutdownOptions): Promise<void> {
  let closing = false;
  const retryAfter = { 'retry-after': String(options.retryAfterS) };
  app.decorate('isClosing', () => closing);
  app.addHook('preClose', async () => {
    closing = true;
  });
  app.addHook('onRequest', async (_request, reply) => {
    if (!closing) return;
    reply.header('connection', 'close');
    throw new HttpProblem('overloaded', 'The service is shutting down; retry on another instance or in a moment.', {}, retryAfter);
  });
}

export default fp(shutdown, { name: 'roost-shutdown', fastify: '5.x', dependencies: ['roost-problems'] });
