/**
 * A service with keys of every role, for the access tests: datasets `d1` (holding observations
 * and a run) and `d2`, an unlimited key per role, a manager key limited to `d2` and an admin key
 * limited to `d1`. Requests are built for every operation of openapi.yaml with its path
 * parameters filled in, and the expected answer is worked out from the operation's
 * `x-roost-access` declaration with the role order written here, not taken from the code.
 */
import { readFileSync } from 'node:fs';
import type { FastifyInstance } from 'fastify';
import { parse } from 'yaml';
import { buildApp, OPENAPI_PATH } from '../../src/http/app.js';
import { hashToken, newToken } from '../../src/auth/tokens.js';
import type { Store } from '../../src/storage/store.js';
import { testConfig } from './helper.js';

export type Who = 'none' | 'reader' | 'contributor' | 'manager' | 'admin' | 'manager@d2' | 'admin@d1';
export const WHO: Who[] = ['none', 'reader', 'contributor', 'manager', 'admin', 'manager@d2', 'admin@d1'];
/** the product brief's role order: each includes the ones before it */
const RANK = { reader: 0, contributor: 1, manager: 2, admin: 3 } as const;

export interface Operation {
  method: string;
  path: string;
  operationId: string;
  access: 'public' | { role: keyof typeof RANK; scope: 'dataset' | 'compute' | 'service' | 'listing' | 'collection'; published?: boolean } | undefined;
}

const spec = parse(readFileSync(OPENAPI_PATH, 'utf8')) as { paths: Record<string, Record<string, Record<string, unknown>>> };

export const OPERATIONS: Operation[] = Object.entries(spec.paths).flatMap(([path, item]) =>
  ['get', 'post', 'put', 'patch', 'delete']
    .filter((m) => item[m] !== undefined)
    .map((m) => ({ method: m.toUpperCase(), path, operationId: String(item[m]!.operationId), access: item[m]!['x-roost-access'] as Operation['access'] })),
);

/** Whether an operation names a dataset in its path: `{id}`, or an OGC API `{collectionId}`. */
export function namesDataset(op: Operation): boolean {
  return op.path.includes('{id}') || op.path.includes('{collectionId}');
}

/**
 * The answer the spec promises: 'pass' (anything but 401/403), 401 or 403. `published` says the
 * request is for a published layer (so `published: true` applies), `datasetPublic` that its
 * dataset is published as public. A listing marked `published` is open to all (it lists what the
 * caller may read); any key may read what a caller without one may.
 */
export function expected(op: Operation, who: Who, datasetId: string | null, datasetPublic = false, published = true): 'pass' | 401 | 403 {
  const a = op.access;
  if (a === 'public') return 'pass';
  const open = a !== undefined && a.published === true && (a.scope === 'listing' || (published && datasetPublic));
  if (who === 'none') return open ? 'pass' : 401;
  if (a === undefined) return 403;
  const [role, limit] = who.split('@') as [keyof typeof RANK, string | undefined];
  if (RANK[role] < RANK[a.role]) return 403;
  if (open || limit === undefined || a.scope === 'compute' || a.scope === 'listing') return 'pass';
  if (a.scope === 'service') return 403;
  return datasetId === limit ? 'pass' : 403;
}

/** The concrete URL of an operation, with `{id}` set to `datasetId` (and `{collectionId}` to one of its collections, `kind` by default observations). */
export function urlOf(op: Operation, datasetId: string, ids: { run: string; keyId: string }, kind = 'observations'): string {
  return op.path
    .replace('{id}', encodeURIComponent(datasetId))
    .replace('{collectionId}', `${encodeURIComponent(datasetId)}.${kind}`)
    .replace('{run}', ids.run)
    .replace('{layer}', 'hotspots')
    .replace('{obsId}', 'o1')
    .replace('{track}', 't000001')
    .replace('{keyId}', ids.keyId)
    .replace(/\{[^}]+\}/g, 'x');
}

export interface AccessService {
  app: FastifyInstance;
  store: Store;
  tokens: Record<Exclude<Who, 'none'>, string>;
  run: string;
  /** a key that exists to be revoked */
  spareKeyId: string;
  /** puts back what an allowed request may have deleted or revoked */
  restore(): Promise<void>;
  close(): Promise<void>;
}

const FEATURES = JSON.stringify({
  type: 'FeatureCollection',
  features: Array.from({ length: 12 }, (_, i) => ({ type: 'Feature', id: `o${i + 1}`, geometry: { type: 'Point', coordinates: [8.5 + (i % 4) * 1e-4, 47.4 + Math.floor(i / 4) * 1e-4] }, properties: { kind: 'a' } })),
});

export async function accessService(store: Store): Promise<AccessService> {
  const app = await buildApp({ config: testConfig({ rateLimitPerMinute: 0 }), store, logger: false });
  await app.ready();
  const keys: { who: Exclude<Who, 'none'>; id: string; role: keyof typeof RANK; datasetId: string | null; token: string }[] = [];
  let n = 0;
  for (const who of WHO.slice(1) as Exclude<Who, 'none'>[]) {
    const [role, limit] = who.split('@') as [keyof typeof RANK, string | undefined];
    keys.push({ who, id: `k_${(++n).toString(16).padStart(12, '0')}`, role, datasetId: limit ?? null, token: newToken() });
  }
  const spare = { id: 'k_00000000ffff', token: newToken() };
  const restore = async (): Promise<void> => {
    for (const id of ['d1', 'd2']) {
      if ((await store.getDataset(id)) === null) {
        await store.createDataset({ id, name: id, settings: { eps: 50, min_points: 3 }, idProperty: null, window: null, schedule: null, webhook: null });
      }
    }
    for (const k of keys) {
      if ((await store.findKey(hashToken(k.token))) === null) {
        // gone with its dataset: put back under the same id and token
        await store.createKey({ id: k.id, tokenHash: hashToken(k.token), role: k.role, datasetId: k.datasetId, label: k.who });
      }
    }
    if ((await store.listKeys()).every((k) => k.id !== spare.id)) await store.createKey({ id: spare.id, tokenHash: hashToken(spare.token), role: 'reader', datasetId: null, label: 'spare' });
  };
  await restore();
  const admin = keys.find((k) => k.who === 'admin')!.token;
  const posted = await app.inject({ method: 'POST', url: '/v1/datasets/d1/observations', headers: { authorization: `Bearer ${admin}`, 'content-type': 'application/geo+json' }, payload: FEATURES });
  if (posted.statusCode !== 200 && posted.statusCode !== 201) throw new Error(`seeding observations: ${posted.statusCode} ${posted.body}`);
  const run = (await store.createRun({ datasetId: 'd1', settings: { eps: 50, min_points: 3 }, trigger: 'request' })).id;
  return {
    app,
    store,
    tokens: Object.fromEntries(keys.map((k) => [k.who, k.token])) as AccessService['tokens'],
    run,
    spareKeyId: spare.id,
    restore,
    close: () => app.close(),
  };
}
