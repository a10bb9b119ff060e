/**
 * The service's own routes: /healthz (answers even under pressure), /openapi.yaml (the contract,
 * byte for byte) and /docs (the contract as a page, served from local files only).
 */
import { readFileSync } from 'node:fs';
import type { FastifyInstance } from 'fastify';
import swagger from '@fastify/swagger';
import swaggerUi from '@fastify/swagger-ui';
import { OPENAPI_PATH } from '../contract.js';

const SERVICE_NAME = 'roost';

export default async function serviceRoutes(app: FastifyInstance): Promise<void> {
  const openapiBytes = readFileSync(OPENAPI_PATH);

  app.get('/healthz', { config: { pressureHandler: () => undefined }, logLevel: 'warn' }, async () => ({
    status: app.isClosing() ? 'closing' : 'ok',
    service: SERVICE_NAME,
    workers: app.workPool.threads,
    queued: app.workPool.queued,
    in_progress: app.admission.inProgress,
    uploading: app.uploads.inProgress,
  }));

  app.get('/openapi.yaml', async (_request, reply) => {
    return reply.type('application/yaml').send(openapiBytes);
  });

  await app.register(swagger, { mode: 'static', specification: { path: OPENAPI_PATH, baseDir: '' } });
  await app.register(swaggerUi, {
    routePrefix: '/docs',
    staticCSP: true,
    // everything the page needs is served from here: no outside hosts, and no https upgrade
    // (which would break the page on a plain-HTTP address other than localhost)
    transformStaticCSP: (header: string) =>
      header.replace(/\s*upgrade-insecure-requests;/, '').replace(/ validator\.swagger\.io/, '').replace(/ https:/g, ''),
    // no calls to an outside validator: the page works offline
    uiConfig: { validatorUrl: null, deepLinking: true },
  });
}
