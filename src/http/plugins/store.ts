/**
 * The store of datasets, observations and runs (`app.store`), opened with migrations applied and
 * closed with the app, and how worker threads open it (`app.storeConfig`; null runs stored jobs
 * on the main thread, as an in-memory SQLite database cannot be shared).
 */
import type { FastifyInstance } from 'fastify';
import fp from 'fastify-plugin';
import { isPostgresUrl, openStore, type StoreConfig } from '../../storage/index.js';
import type { Store } from '../../storage/store.js';

declare module 'fastify' {
  interface FastifyInstance {
    store: Store;
    storeConfig: StoreConfig | null;
  }
}

export interface StoreOptions {
  /** PostgreSQL URL, or '' for SQLite */
  databaseUrl: string;
  /** SQLite file, or ':memory:' */
  dbPath: string;
  /** a store to use instead of opening the configured one (closed with the app all the same) */
  store?: Store;
  /** how worker threads open that store; absent: stored runs execute on the main thread */
  storeConfig?: StoreConfig;
}

async function storePlugin(app: FastifyInstance, options: StoreOptions): Promise<void> {
  const configured: StoreConfig = { databaseUrl: options.databaseUrl || null, sqlitePath: options.dbPath };
  const memory = !isPostgresUrl(options.databaseUrl) && options.dbPath === ':memory:';
  const storeConfig = options.store ? (options.storeConfig ?? null) : memory ? null : configured;
  const store = options.store ?? (await openStore(configured));
  app.decorate('store', store);
  app.decorate('storeConfig', storeConfig);
  app.addHook('onClose', async () => {
    await store.close();
  });
}

export default fp(storePlugin, { name: 'roost-store', fastify: '5.x' });
