/**
 * Access control for every route group registered after it (see ../access.ts): the table comes
 * from openapi.yaml's `x-roost-access` declarations. Decorates `app.keyPresence`, which key
 * routes tell when a key is created or revoked.
 */
import type { FastifyInstance } from 'fastify';
import fp from 'fastify-plugin';
import { accessTable, registerAccess, type KeyPresence } from '../access.js';
import { loadContract } from '../contract.js';

declare module 'fastify' {
  interface FastifyInstance {
    keyPresence: KeyPresence;
  }
}

async function accessPlugin(app: FastifyInstance): Promise<void> {
  const table = accessTable(loadContract() as { paths: Record<string, Record<string, unknown>> });
  // the documentation page's and the map page's own files (scripts, styles, the document it shows)
  // are public like the pages; the data they show is read from the API, with a key
  app.decorate('keyPresence', registerAccess(app, { store: app.store, table, publicPrefixes: ['/docs', '/assets'] }));
}

export default fp(accessPlugin, { name: 'roost-access', fastify: '5.x', dependencies: ['roost-store'] });
