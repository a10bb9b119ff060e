/**
 * The service's own routes: /healthz (answers even under pressure), /openapi.yaml (the contract,
 * byte for byte), /openapi.json (the same as JSON, naming the address it was fetched from) and
 * /docs (the contract as a page, served from local files only, calling the address it was loaded
 * from).
 */
import { readFileSync } from 'node:fs';
import type { FastifyInstance, FastifyRequest } from 'fastify';
import { parse } from 'yaml';
import swagger from '@fastify/swagger';
import swaggerUi from '@fastify/swagger-ui';
import { OPENAPI_PATH } from '../contract.js';

const SERVICE_NAME = 'roost';

/** The address clients reach this service at: the configured public URL, else the request's own. */
function serviceUrl(request: FastifyRequest, publicUrl: string | null | undefined): string {
  return publicUrl ? publicUrl.replace(/\/+$/, '') : `${request.protocol}://${request.host}`;
}

/** The OpenAPI document with its server list replaced by one address. */
function withServer(spec: Readonly<Record<string, unknown>>, url: string): Record<string, unknown> {
  return { ...spec, servers: [{ url, description: 'this service' }] };
}

export interface ServiceRouteOptions {
  /** address clients use to reach the service; absent or empty: each request's own */
  publicUrl?: string | null;
}

export default async function serviceRoutes(app: FastifyInstance, options: ServiceRouteOptions = {}): Promise<void> {
  const openapiBytes = readFileSync(OPENAPI_PATH);
  const openapiDoc = parse(openapiBytes.toString('utf8')) as Record<string, unknown>;

  app.get('/healthz', { config: { pressureHandler: () => undefined }, logLevel: 'warn' }, async () => ({
    status: app.isClosing() ? 'closing' : 'ok',
    service: SERVICE_NAME,
    workers: app.workPool.threads,
    queued: app.workPool.queued,
    in_progress: app.admission.inProgress,
    uploading: app.uploads.inProgress,
    storing: app.storing.inProgress,
  }));

  app.get('/openapi.yaml', async (_request, reply) => {
    return reply.type('application/yaml').send(openapiBytes);
  });

  // the same document as JSON (what OGC API clients read), naming the address it was fetched from
  app.get('/openapi.json', async (request, reply) => {
    // its own media type, or plain JSON for a client that asks for that but not for it
    const accept = request.headers.accept ?? '';
    const type = accept.includes('application/json') && !accept.includes('application/vnd.oai.openapi+json') ? 'application/json' : 'application/vnd.oai.openapi+json;version=3.1';
    return reply.type(type).send(JSON.stringify(withServer(openapiDoc, serviceUrl(request, options.publicUrl))));
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
    // "Try it out" calls the service the page was loaded from, whatever its address
    transformSpecification: (spec, request) => withServer(spec, serviceUrl(request, options.publicUrl)),
  });
}
