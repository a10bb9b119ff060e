/**
 * The only part of the service that touches the process: listens, and on SIGTERM or SIGINT
 * stops taking requests, lets those in flight finish (up to the grace time) and stops the workers.
 */
import type { FastifyInstance } from 'fastify';
import { buildApp } from './app.js';
import { ConfigError, type ServerConfig } from './config.js';
import { startupAccess } from './open-mode.js';

export interface RunningServer {
  app: FastifyInstance;
  /** base URL the server listens on, for example http://127.0.0.1:8080 */
  url: string;
  /**
   * Stops listening, waits for requests in flight up to config.shutdownGraceMs, then cuts the
   * remaining connections; resolves once the workers have stopped.
   */
  close(): Promise<void>;
}

/**
 * Builds the application and listens on config.host:config.port. Refuses (ConfigError) to listen
 * beyond loopback with no API key in the store unless config.open (see open-mode.ts).
 * With `handleSignals` (default true) the first SIGTERM/SIGINT closes gracefully and exits;
 * a second one exits at once.
 */
export async function startServer(config: ServerConfig, options: { handleSignals?: boolean } = {}): Promise<RunningServer> {
  const app = await buildApp({ config });
  const decision = startupAccess(config.host, await app.store.countKeys(), config.open);
  if (!decision.ok) {
    await app.close();
    throw new ConfigError(decision.message);
  }
  app.log[decision.level]({ host: config.host }, decision.message);
  const url = await app.listen({ port: config.port, host: config.host });

  let closing: Promise<void> | null = null;
  let stopListening = (): void => undefined;
  const close = (): Promise<void> => {
    closing ??= (async () => {
      const cut = setTimeout(() => {
        app.log.warn({ grace_ms: config.shutdownGraceMs }, 'grace time over; closing remaining connections');
        app.server.closeAllConnections();
      }, config.shutdownGraceMs);
      cut.unref();
      try {
        await app.close();
      } finally {
        clearTimeout(cut);
        stopListening();
      }
    })();
    return closing;
  };

  if (options.handleSignals ?? true) {
    const onSignal = (signal: NodeJS.Signals): void => {
      if (closing) {
        app.log.warn({ signal }, 'second signal; exiting now');
        process.exit(1);
      }
      app.log.info({ signal }, 'closing: no new requests, finishing those in flight');
      close().then(
        () => {
          app.log.info('closed');
          process.exit(0);
        },
        (err: unknown) => {
          app.log.error({ err }, 'error while closing');
          process.exit(1);
        },
      );
    };
    process.on('SIGTERM', onSignal);
    process.on('SIGINT', onSignal);
    stopListening = () => {
      process.removeListener('SIGTERM', onSignal);
      process.removeListener('SIGINT', onSignal);
    };
  }
  return { app, url, close };
}
