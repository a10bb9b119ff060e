/**
 * The service's edge: checks every request meets before any route, and the headers every answer
 * carries.
 *
 * - Host: the Host header must name this service (the configured names; by default the loopback
 *   names, the listening address when it is a specific one, and the public URL's host). A page on
 *   another site that rebinds its own name to 127.0.0.1 (DNS rebinding) sends its own name as
 *   Host and is answered 421.
 * - Origin: a request that can change something (POST, PUT, PATCH, DELETE) carrying an Origin
 *   header is refused (403) unless the origin is this service's own or on the CORS allow-list:
 *   a web page the user visits cannot start, cancel or delete anything through the user's browser.
 *   Requests without Origin (curl, survey apps, servers) are not browsers acting for a page.
 * - Security headers (@fastify/helmet) on every answer; the documentation page keeps the
 *   Content-Security-Policy @fastify/swagger-ui gives it.
 * - CORS (@fastify/cors) for the origins on the allow-list only (none by default), so a web map
 *   elsewhere can load layers from here when the operator says so.
 * - Rate limits (@fastify/rate-limit) per key, or per address for requests without one: 429
 *   problem+json with Retry-After and the IETF RateLimit headers. Counted after the access check,
 *   so a refused request is not counted against the key it named.
 */
import type { FastifyInstance, FastifyRequest } from 'fastify';
import cors from '@fastify/cors';
import helmet from '@fastify/helmet';
import rateLimit from '@fastify/rate-limit';
import type { ServerConfig } from './config.js';
import { HttpProblem } from './errors.js';

const LOOPBACK_NAMES = ['localhost', '127.0.0.1', '[::1]', '::1'];
const CHANGING = new Set(['POST', 'PUT', 'PATCH', 'DELETE']);

/** Comma-separated list → trimmed, non-empty entries. */
export function listOf(text: string): string[] {
  return text
    .split(',')
    .map((s) => s.trim())
    .filter((s) => s !== '');
}

/** Host names (lower case, without port) this service answers for. */
export function allowedHosts(config: ServerConfig): Set<string> {
  const hosts = new Set(LOOPBACK_NAMES);
  if (config.host !== '0.0.0.0' && config.host !== '::') hosts.add(config.host.toLowerCase());
  if (config.publicUrl !== '') hosts.add(new URL(config.publicUrl).hostname.toLowerCase());
  for (const h of listOf(config.allowedHosts)) hosts.add(h.toLowerCase());
  return hosts;
}

/** The host name of a Host header value (port and brackets handled), lower case. */
export function hostName(header: string): string {
  const h = header.trim().toLowerCase();
  if (h.startsWith('[')) return h.slice(0, h.indexOf(']') + 1);
  const colon = h.lastIndexOf(':');
  return colon === -1 ? h : h.slice(0, colon);
}

/** Registers the edge checks and plugins; call before any route is added. */
export async function registerEdge(app: FastifyInstance, config: ServerConfig): Promise<void> {
  const hosts = allowedHosts(config);
  const corsOrigins = new Set(listOf(config.corsOrigins).map((o) => o.replace(/\/+$/, '')));
  const ownOrigins = new Set<string>();
  if (config.publicUrl !== '') ownOrigins.add(new URL(config.publicUrl).origin);

  app.addHook('onRequest', async (request: FastifyRequest) => {
    const host = request.headers.host;
    if (host !== undefined && !hosts.has(hostName(host))) {
      throw new HttpProblem('host-not-allowed', `This service does not answer for the host name ${JSON.stringify(hostName(host))}; the operator can add it with --allowed-hosts.`);
    }
    const origin = request.headers.origin;
    if (origin !== undefined && CHANGING.has(request.method)) {
      let same = false;
      try {
        const o = new URL(origin);
        // the service's own pages: the origin names this very host (and port)
        same = host !== undefined && o.host.toLowerCase() === host.trim().toLowerCase() && hosts.has(o.hostname.toLowerCase());
      } catch {
        same = false;
      }
      if (!same && !ownOrigins.has(origin) && !corsOrigins.has(origin)) {
        throw new HttpProblem('origin-not-allowed', `Requests from ${JSON.stringify(origin)} may not change anything here; the operator can allow the origin with --cors-origins.`);
      }
    }
  });

  await app.register(helmet, {
    // the JSON and GeoJSON answers load nothing; the documentation page sets its own policy
    contentSecurityPolicy: { directives: { defaultSrc: ["'self'"], imgSrc: ["'self'", 'data:'], upgradeInsecureRequests: null } },
    // served over plain HTTP on loopback too; HSTS belongs to the TLS proxy in front
    strictTransportSecurity: false,
    // layers are meant to be loaded by web maps on other origins once CORS allows them
    crossOriginResourcePolicy: { policy: corsOrigins.size > 0 ? 'cross-origin' : 'same-origin' },
  });

  // with no origin listed there is nothing to allow: no CORS headers and no preflight route
  if (corsOrigins.size > 0) await app.register(cors, {
    origin: (origin, cb) => cb(null, origin !== undefined && corsOrigins.has(origin)),
    methods: ['GET', 'HEAD', 'POST', 'PATCH', 'DELETE'],
    allowedHeaders: ['authorization', 'content-type', 'x-request-id'],
    exposedHeaders: ['x-request-id', 'retry-after', 'ratelimit-limit', 'ratelimit-remaining', 'ratelimit-reset'],
    maxAge: 600,
  });

  if (config.rateLimitPerMinute > 0) {
    await app.register(rateLimit, {
      global: true,
      hook: 'preHandler',
      max: config.rateLimitPerMinute,
      timeWindow: 60_000,
      enableDraftSpec: true,
      keyGenerator: (request) => (request.principal?.keyId ? `key:${request.principal.keyId}` : `address:${request.ip}`),
      allowList: (request) => request.routeOptions.url === '/healthz',
      errorResponseBuilder: (_request, context) =>
        new HttpProblem('rate-limited', `More than ${context.max} requests in ${context.after}; retry after ${Math.ceil(context.ttl / 1000)} s.`, { limit: context.max }, { 'retry-after': String(Math.ceil(context.ttl / 1000)) }),
    });
  }
}
