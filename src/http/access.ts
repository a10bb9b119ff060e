/**
 * Who may call what. Every operation in openapi.yaml declares `x-roost-access`: `public`, or
 * `{role, scope}` with scope `dataset` (the `{id}` path parameter names the dataset),
 * `collection` (the dataset named by an OGC API `{collectionId}`), `compute` (clustering posted
 * points, no stored data), `service`, or `listing` (any key; the route lists only what the key
 * may read, roles.ts `mayRead`), and optionally `published: true` for the published layers that
 * anyone may read when the dataset's publishing settings say `public` (a `listing` marked so is
 * open to a caller without a key, and lists those layers only). A key may read whatever a
 * caller without one may.
 * The table is read from the document itself, so the contract and the check cannot drift apart;
 * a route the document does not list, or lists without a declaration, is refused once keys exist.
 *
 * Open mode: while the store holds no key in force, every request acts as an unlimited admin,
 * as a service on one's own machine did before keys existed (the server refuses to listen beyond
 * loopback in that state unless told `--open`; see server.ts). A bearer token, when given, is
 * checked in either mode: an unknown or revoked one is a 401.
 *
 * 401 (no usable key) carries `WWW-Authenticate: Bearer` (RFC 6750 §3); 403 (a key without the
 * role, or limited to another dataset) says which role or dataset is needed.
 */
import type { FastifyInstance, FastifyRequest } from 'fastify';
import { refusal, isRole, type Principal, type Requirement } from '../auth/roles.js';
import { bearerToken, hashToken, isTokenShaped } from '../auth/tokens.js';
import { isPublishedKind, parseCollectionId } from '../ogc/collection-id.js';
import { publishedPublicly as publicDataset } from '../publish/served.js';
import type { Store } from '../storage/store.js';
import { HttpProblem } from './errors.js';

/**
 * What an operation needs, as declared in openapi.yaml. Scope `collection` is `dataset` with the
 * dataset named by the `{collectionId}` path parameter (`<dataset>.<kind>`, src/ogc/collection-id.ts);
 * a collection of a published kind counts as a published layer.
 */
export type Access = 'public' | { role: Requirement['role']; scope: Requirement['scope'] | 'collection'; published?: boolean };

declare module 'fastify' {
  interface FastifyRequest {
    /** who is asking; set by the access check (null on public routes) */
    principal: Principal | null;
  }
}

const METHODS = ['get', 'put', 'post', 'patch', 'delete'];

/** `/v1/datasets/{id}` → `/v1/datasets/:id` (the route form Fastify reports). */
export function routeOf(openapiPath: string): string {
  return openapiPath.replace(/\{([^}]+)\}/g, ':$1');
}

/**
 * The access table of an OpenAPI document: `METHOD route` → Access. Throws when an operation
 * has no valid `x-roost-access`, so a new route cannot be added without saying who may call it.
 */
export function accessTable(doc: { paths?: Record<string, Record<string, unknown>> }): Map<string, Access> {
  const table = new Map<string, Access>();
  for (const [path, item] of Object.entries(doc.paths ?? {})) {
    for (const method of METHODS) {
      const op = item[method] as Record<string, unknown> | undefined;
      if (!op) continue;
      const a = op['x-roost-access'];
      const where = `${method.toUpperCase()} ${path}`;
      if (a === 'public') {
        table.set(`${method.toUpperCase()} ${routeOf(path)}`, 'public');
        continue;
      }
      const o = a as Record<string, unknown> | undefined;
      // an operation that declares nothing stays out of the table: refused once keys exist
      // (test/http/access.test.ts requires every operation to declare its access)
      if (o === undefined) continue;
      if (!isRole(o.role) || !['dataset', 'compute', 'service', 'listing', 'collection'].includes(o.scope as string)) {
        throw new Error(`openapi.yaml: ${where} needs x-roost-access: public, or {role: reader|contributor|manager|admin, scope: dataset|compute|service|listing|collection}`);
      }
      if (o.scope === 'dataset' && !path.includes('{id}')) throw new Error(`openapi.yaml: ${where} has scope dataset but no {id} parameter`);
      if (o.scope === 'collection' && !path.includes('{collectionId}')) throw new Error(`openapi.yaml: ${where} has scope collection but no {collectionId} parameter`);
      table.set(`${method.toUpperCase()} ${routeOf(path)}`, { role: o.role, scope: o.scope as Exclude<Access, 'public'>['scope'], published: o.published === true });
    }
  }
  return table;
}

/** The principal of open mode: no key in the store. */
export const OPEN_PRINCIPAL: Principal = Object.freeze({ keyId: null, role: 'admin', datasetId: null });

export interface AccessOptions {
  store: Store;
  table: Map<string, Access>;
  /** routes outside the document that anyone may call (prefix match), e.g. the documentation page's files */
  publicPrefixes?: string[];
  /** how long "are there keys?" is remembered, ms; default 1000 (other instances' first key shows within that) */
  keyCountTtlMs?: number;
}

/** What the access check needs to know about keys; `forget()` after creating or revoking one. */
export interface KeyPresence {
  any(): Promise<boolean>;
  forget(): void;
}

export function keyPresence(store: Store, ttlMs = 1000): KeyPresence {
  let known: { value: boolean; at: number } | null = null;
  return {
    async any() {
      const now = Date.now();
      if (known !== null && now - known.at < ttlMs) return known.value;
      const value = (await store.countKeys()) > 0;
      known = { value, at: now };
      return value;
    },
    forget() {
      known = null;
    },
  };
}

const challenge = { 'www-authenticate': 'Bearer realm="roost"' };

/** Whether the dataset's publishing settings make its published layers readable by anyone. */
async function publishedPublicly(store: Store, datasetId: string | null): Promise<boolean> {
  if (datasetId === null) return false;
  return publicDataset(await store.getDataset(datasetId));
}

/**
 * Adds the access check (an onRequest hook) to the app. Call on the root instance, after the
 * hooks that must run first (request ids, shutdown) and before routes are added.
 */
export function registerAccess(app: FastifyInstance, options: AccessOptions): KeyPresence {
  const presence = keyPresence(options.store, options.keyCountTtlMs);
  const prefixes = options.publicPrefixes ?? [];
  app.decorateRequest('principal', null);
  app.addHook('onRequest', async (request: FastifyRequest) => {
    const route = request.routeOptions.url;
    if (route === undefined) return; // no such route: the not-found answer tells nothing
    // CORS preflights carry no credentials by definition (Fetch standard); they change nothing
    if (request.method === 'OPTIONS') return;
    const method = request.method === 'HEAD' ? 'GET' : request.method;
    const access = options.table.get(`${method} ${route}`) ?? (prefixes.some((p) => route === p || route.startsWith(p + '/')) ? 'public' : undefined);
    if (access === 'public') return;
    const params = (request.params ?? {}) as Record<string, string | undefined>;
    let datasetId = params.id ?? null;
    // what a request without a key may still read: the published layers of a public dataset,
    // and a listing that offers published layers (it lists only what the caller may read)
    let published = access !== undefined && access.published === true;
    let need: Requirement | undefined = access === undefined ? undefined : { role: access.role, scope: access.scope === 'collection' ? 'dataset' : access.scope };
    if (access !== undefined && access.scope === 'collection') {
      const parsed = parseCollectionId(params.collectionId ?? '');
      datasetId = parsed?.datasetId ?? null;
      published = published && parsed !== null && isPublishedKind(parsed.kind);
    }
    const openToAll = async (): Promise<boolean> => published && (need!.scope === 'listing' || (await publishedPublicly(options.store, datasetId)));

    const token = bearerToken(request.headers.authorization);
    if (token === undefined) throw new HttpProblem('unauthorized', 'The Authorization header must be "Bearer <token>".', {}, challenge);
    let principal: Principal;
    if (token !== null) {
      const key = isTokenShaped(token) ? await options.store.findKey(hashToken(token)) : null;
      if (key === null) throw new HttpProblem('unauthorized', 'The bearer token is not a key in force here (unknown or revoked).', {}, challenge);
      principal = { keyId: key.id, role: key.role, datasetId: key.datasetId };
    } else if (await presence.any()) {
      if (await openToAll()) {
        request.principal = null;
        return;
      }
      throw new HttpProblem('unauthorized', 'This needs an API key: send "Authorization: Bearer <token>" (an admin creates keys with roost keys create).', {}, challenge);
    } else {
      principal = OPEN_PRINCIPAL;
    }
    if (need === undefined) {
      if (principal === OPEN_PRINCIPAL) return;
      throw new HttpProblem('forbidden', `${request.method} ${route} is not open to keys.`);
    }
    const why = refusal(principal, need, datasetId);
    // a key may read whatever a request without one may (a public dataset's published layers)
    if (why !== null && !(await openToAll())) throw new HttpProblem('forbidden', `${why.detail}.`, { required_role: need.role });
    request.principal = principal;
  });
  return presence;
}
