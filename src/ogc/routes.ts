/**
 * OGC API – Features at /features: Part 1 Core with GeoJSON and HTML (OGC 17-069r4) and Part 2
 * with CRS84 only (OGC 18-058r1). Collections are each dataset's stored observations and the
 * four layers (hotspots, centres, noise, points) of its latest succeeded run, named
 * `<dataset>.<kind>`, and for a dataset with publishing settings the four published layers of
 * that run, `<dataset>.published-<kind>`. The listing holds only what the caller may read: the
 * datasets its key reaches, and the published layers of public datasets (all a caller without a
 * key sees). Links are absolute, built from the address the request came to (or the configured
 * public URL). JSON or HTML by `f=` or the Accept header.
 */
import type { FastifyInstance, FastifyReply, FastifyRequest } from 'fastify';
import { featureCollectionString } from '../geometry/geojson.js';
import { Readable } from 'node:stream';
import { categoryNames, hotspotLayerFields, optionalFieldsOf, propertiesJsonSchema, trustFieldsOf, type LayerField } from '../geometry/layer-fields.js';
import { csvLines, flatGeobufChunks, layerColumns, layerFormat, MEDIA_TYPES } from './formats.js';
import { addVary, etagOf, notModified, sendTagged } from '../http/conditional.js';
import { HttpProblem } from '../http/errors.js';
import { mayRead } from '../auth/roles.js';
import { publishedLayers, publishedPublicly } from '../publish/served.js';
import { LAYER_NAMES } from '../run/layers.js';
import { StoreError, type Dataset, type Run, type Store } from '../storage/store.js';
import { collectionId, isPublishedKind, layerOfPublished, parseCollectionId, PUBLISHED_KINDS, type CollectionKind } from './collection-id.js';
import { escapeHtml, page, table, type Link } from './html.js';
import { layerIndex, layerPage, textIndex } from './layers.js';
import type { LayerIndex } from './layer-index.js';
import { CRS84, DEFAULT_LIMIT, MAX_LIMIT, onlyParams, parseFormat, parseItemsQuery, type Bbox, type ItemsQuery } from './query.js';

export const FEATURES_ROOT = '/features';

/** The conformance classes declared; what each requires is tested in test/ogc/conformance.test.ts. */
export const CONFORMANCE = [
  'http://www.opengis.net/spec/ogcapi-features-1/1.0/conf/core',
  'http://www.opengis.net/spec/ogcapi-features-1/1.0/conf/geojson',
  'http://www.opengis.net/spec/ogcapi-features-1/1.0/conf/html',
  'http://www.opengis.net/spec/ogcapi-features-2/1.0/conf/crs',
] as const;

const GEOJSON = 'application/geo+json';
const JSON_TYPE = 'application/json';
const HTML = 'text/html';
const GREGORIAN = 'http://www.opengis.net/def/uom/ISO-8601/0/Gregorian';
const OPENAPI_JSON = 'application/vnd.oai.openapi+json;version=3.1';

const KIND_TEXT: Record<CollectionKind, string> = {
  observations: 'stored observations, as posted',
  hotspots: 'hotspot hulls of the latest succeeded run, with their figures',
  centres: 'hotspot centres of the latest succeeded run, with their figures',
  noise: 'observations in no hotspot in the latest succeeded run',
  points: 'every observation of the latest succeeded run, with its hotspot and role',
  'published-hotspots': 'published (generalised) hotspot outlines of the latest succeeded run',
  'published-centres': 'published (generalised) hotspot centres of the latest succeeded run',
  'published-noise': 'published (generalised) observations in no hotspot in the latest succeeded run, when noise is published',
  'published-points': 'published (generalised) observations of the latest succeeded run',
};

export interface FeaturesOptions {
  /** default: the app's store (the store plugin) */
  store?: Store;
  /** address clients use to reach the service (no trailing slash); absent: the request's own */
  publicUrl?: string | null;
}

export { collectionId, parseCollectionId, type CollectionKind };

/** Whether the answer should be HTML: `f` first, else an Accept header preferring text/html. */
export function wantsHtml(request: FastifyRequest, f: 'json' | 'html' | null): boolean {
  if (f !== null) return f === 'html';
  const accept = (request.headers.accept ?? '').toLowerCase();
  if (!accept.includes(HTML)) return false;
  // the first listed of html and a JSON type wins (browsers list text/html first)
  const h = accept.indexOf(HTML);
  const j = Math.min(...['application/json', GEOJSON].map((t) => accept.indexOf(t)).filter((i) => i >= 0), Infinity);
  return h < j;
}

function baseUrl(request: FastifyRequest, publicUrl: string | null | undefined): string {
  if (publicUrl) return publicUrl.replace(/\/+$/, '');
  return `${request.protocol}://${request.host}`;
}

/** The query string of a request with some parameters replaced (null removes one). */
function withParams(query: Record<string, unknown>, changes: Record<string, string | null>): string {
  const p = new URLSearchParams();
  for (const [k, v] of Object.entries(query)) if (!(k in changes)) for (const x of [v].flat()) p.append(k, String(x));
  for (const [k, v] of Object.entries(changes)) if (v !== null) p.set(k, v);
  const s = p.toString();
  return s === '' ? '' : '?' + s;
}

interface Resolved {
  dataset: Dataset;
  kind: CollectionKind;
  /** the latest succeeded run, or the named one, for layer collections */
  run: Run | null;
  /** whether the id names the run (`<dataset>@<run>.<kind>`) */
  named: boolean;
}

/** The id a resolved collection was asked by. */
function idOf(r: Resolved): string {
  return collectionId(r.dataset.id, r.kind, r.named ? r.run!.id : null);
}

export default async function featuresRoutes(app: FastifyInstance, options: FeaturesOptions = {}): Promise<void> {
  const store = options.store ?? app.store;
  const root = (request: FastifyRequest): string => baseUrl(request, options.publicUrl) + FEATURES_ROOT;
  // every answer here depends on Accept (HTML, JSON, FlatGeobuf or CSV), so caches must key on it
  app.addHook('onSend', async (_request, reply, payload) => {
    addVary(reply, 'Accept');
    return payload;
  });

  const resolve = async (id: string): Promise<Resolved> => {
    const parsed = parseCollectionId(id);
    const dataset = parsed === null ? null : await store.getDataset(parsed.datasetId);
    if (parsed === null || dataset === null) {
      throw new HttpProblem('collection-not-found', `there is no collection ${JSON.stringify(id)}; GET ${FEATURES_ROOT}/collections lists them`);
    }
    if (parsed.kind === 'observations') return { dataset, kind: parsed.kind, run: null, named: false };
    if (isPublishedKind(parsed.kind) && dataset.publish === null) {
      throw new HttpProblem('collection-not-found', `dataset ${JSON.stringify(dataset.id)} is not published (it has no publishing settings), so there is no collection ${JSON.stringify(id)}`);
    }
    if (parsed.runId !== null) {
      const run = await store.getRun(dataset.id, parsed.runId);
      if (run === null || run.status !== 'succeeded') {
        throw new HttpProblem('collection-not-found', `dataset ${JSON.stringify(dataset.id)} has no succeeded run ${JSON.stringify(parsed.runId)}, so there is no collection ${JSON.stringify(id)}; GET /v1/datasets/${dataset.id}/runs lists its runs`);
      }
      return { dataset, kind: parsed.kind, run, named: true };
    }
    const run = await store.latestRun(dataset.id);
    if (run === null) throw new HttpProblem('collection-not-found', `dataset ${JSON.stringify(dataset.id)} has no succeeded run yet, so there is no collection ${JSON.stringify(id)}`);
    return { dataset, kind: parsed.kind, run, named: false };
  };

  /** The index of a layer collection: a stored layer, or a published one made from the run. */
  const indexOf = async (r: Resolved): Promise<LayerIndex> => {
    const kind = r.kind;
    if (kind === 'observations') throw new Error('observations have no layer index');
    if (!isPublishedKind(kind)) return layerIndex(store, r.run!.id, kind);
    const layer = layerOfPublished(kind);
    // keyed by the settings too: the published layers follow the dataset's settings as they are now
    return textIndex(store, `${r.run!.id}/published/${JSON.stringify(r.dataset.publish)}/${layer}`, async () => (await publishedLayers(store, r.dataset, r.run!))[layer]);
  };

  /** Last-Modified of a collection's answers: when its run finished; published layers also follow settings, so none. */
  const modifiedOf = (r: Resolved): string | null => (r.run === null || isPublishedKind(r.kind) ? null : r.run.finishedAt);

  const send = (request: FastifyRequest, reply: FastifyReply, html: boolean, json: unknown, htmlText: () => string, type = JSON_TYPE, lastModified: string | null = null): FastifyReply =>
    html ? sendTagged(request, reply, 'text/html; charset=utf-8', htmlText(), lastModified) : sendTagged(request, reply, type, typeof json === 'string' ? json : JSON.stringify(json), lastModified);

  /** Links to a resource in both representations: self for the one answered, alternate for the other. */
  const selfLinks = (href: string, html: boolean, jsonType = JSON_TYPE, query = ''): Link[] => {
    const sep = query === '' ? '?' : '&';
    return [
      { href: `${href}${query}${sep}f=${html ? 'html' : 'json'}`, rel: 'self', type: html ? HTML : jsonType, title: 'this document' },
      { href: `${href}${query}${sep}f=${html ? 'json' : 'html'}`, rel: 'alternate', type: html ? jsonType : HTML, title: html ? 'this document as JSON' : 'this document as HTML' },
    ];
  };

  /** The description of one collection (OGC 17-069r4 §7.14). */
  const collectionJson = async (request: FastifyRequest, r: Resolved, html: boolean): Promise<Record<string, unknown>> => {
    const id = idOf(r);
    const href = `${root(request)}/collections/${id}`;
    let bbox: Bbox | null = null;
    let interval: [number | null, number | null] | null = null;
    if (r.kind === 'observations') {
      const extent = await store.observationExtent(r.dataset.id);
      bbox = extent.bbox;
      if (extent.first !== null) interval = [extent.first, extent.last];
    } else {
      const index = await indexOf(r);
      bbox = index.bbox;
      interval = index.interval;
    }
    const iso = (t: number | null): string | null => (t === null ? null : new Date(t).toISOString());
    return {
      id,
      title: `${r.dataset.name} — ${r.kind}${r.named ? ` (run ${r.run!.id})` : ''}`,
      description: `Dataset ${r.dataset.id}: ${r.named ? KIND_TEXT[r.kind].replace('the latest succeeded run', `run ${r.run!.id}`) : KIND_TEXT[r.kind]}${r.run ? ` (run ${r.run.id}, finished ${r.run.finishedAt})` : ''}.`,
      itemType: 'feature',
      crs: [CRS84],
      storageCrs: CRS84,
      ...(bbox || interval
        ? {
            extent: {
              ...(bbox ? { spatial: { bbox: [bbox], crs: CRS84 } } : {}),
              ...(interval ? { temporal: { interval: [[iso(interval[0]), iso(interval[1])]], trs: GREGORIAN } } : {}),
            },
          }
        : {}),
      links: [
        ...selfLinks(href, html),
        { href: `${href}/items?f=json`, rel: 'items', type: GEOJSON, title: 'the features as GeoJSON' },
        { href: `${href}/items?f=html`, rel: 'items', type: HTML, title: 'the features as HTML' },
        { href: `${href}/schema`, rel: 'describedby', type: 'application/schema+json', title: 'JSON Schema of the feature properties' },
      ],
    };
  };

  /**
   * The collections the caller may read: all of a dataset it may read, the published layers of
   * a dataset with publishing settings that it may read or that is public. Published layers that
   * cannot be made (unusable settings) are left out rather than failing the listing.
   */
  const listed = async (request: FastifyRequest): Promise<Resolved[]> => {
    const out: Resolved[] = [];
    for (const dataset of await store.listDatasets()) {
      const reads = mayRead(request.principal, dataset.id);
      if (reads) out.push({ dataset, kind: 'observations', run: null, named: false });
      if (!reads && !publishedPublicly(dataset)) continue;
      const run = await store.latestRun(dataset.id);
      if (run === null) continue;
      if (reads) for (const kind of LAYER_NAMES) out.push({ dataset, kind, run, named: false });
      if (dataset.publish === null) continue;
      try {
        await publishedLayers(store, dataset, run);
      } catch (err) {
        if (err instanceof HttpProblem) continue;
        throw err;
      }
      for (const kind of PUBLISHED_KINDS) out.push({ dataset, kind, run, named: false });
    }
    return out;
  };

  app.get(FEATURES_ROOT, async (request, reply) => {
    const query = (request.query ?? {}) as Record<string, unknown>;
    onlyParams(query, ['f']);
    const html = wantsHtml(request, parseFormat(query.f as string | undefined));
    const base = root(request);
    const origin = baseUrl(request, options.publicUrl);
    const links: Link[] = [
      ...selfLinks(base, html),
      { href: `${origin}/openapi.json`, rel: 'service-desc', type: OPENAPI_JSON, title: 'the API definition (OpenAPI 3.1, JSON)' },
      { href: `${origin}/docs`, rel: 'service-doc', type: HTML, title: 'the API documentation' },
      { href: `${base}/conformance`, rel: 'conformance', type: JSON_TYPE, title: 'conformance classes' },
      { href: `${base}/collections`, rel: 'data', type: JSON_TYPE, title: 'the collections' },
    ];
    const doc = {
      title: 'Roost',
      description: 'Observations and the density-based hotspots found in them, as OGC API – Features collections.',
      links,
    };
    return send(request, reply, html, doc, () => page(doc.title, [`<p>${escapeHtml(doc.description)}</p>`], links));
  });

  app.get(`${FEATURES_ROOT}/conformance`, async (request, reply) => {
    const query = (request.query ?? {}) as Record<string, unknown>;
    onlyParams(query, ['f']);
    const html = wantsHtml(request, parseFormat(query.f as string | undefined));
    const doc = { conformsTo: CONFORMANCE, links: selfLinks(`${root(request)}/conformance`, html) };
    return send(request, reply, html, doc, () => page('Conformance', ['<ul>' + CONFORMANCE.map((c) => `<li>${escapeHtml(c)}</li>`).join('') + '</ul>'], doc.links));
  });

  app.get(`${FEATURES_ROOT}/collections`, async (request, reply) => {
    const query = (request.query ?? {}) as Record<string, unknown>;
    onlyParams(query, ['f']);
    const html = wantsHtml(request, parseFormat(query.f as string | undefined));
    const collections: Record<string, unknown>[] = [];
    for (const r of await listed(request)) collections.push(await collectionJson(request, r, false));
    const doc = { links: selfLinks(`${root(request)}/collections`, html), crs: [CRS84], collections };
    return send(request, reply, html, doc, () =>
      page(
        'Collections',
        collections.map((c) => `<section><h2><a href="${escapeHtml(`${root(request)}/collections/${String(c.id)}?f=html`)}">${escapeHtml(String(c.title))}</a></h2><p>${escapeHtml(String(c.description))}</p></section>`),
        doc.links,
      ),
    );
  });

  app.get<{ Params: { collectionId: string } }>(`${FEATURES_ROOT}/collections/:collectionId`, async (request, reply) => {
    const query = (request.query ?? {}) as Record<string, unknown>;
    onlyParams(query, ['f']);
    const html = wantsHtml(request, parseFormat(query.f as string | undefined));
    const r = await resolve(request.params.collectionId);
    const doc = await collectionJson(request, r, html);
    const { links, ...rest } = doc;
    return send(request, reply, html, doc, () => page(String(doc.title), [table(rest)], links as Link[]), JSON_TYPE, modifiedOf(r));
  });

  app.get<{ Params: { collectionId: string } }>(`${FEATURES_ROOT}/collections/:collectionId/schema`, async (request, reply) => {
    onlyParams((request.query ?? {}) as Record<string, unknown>, []);
    const r = await resolve(request.params.collectionId);
    return sendTagged(request, reply, 'application/schema+json', JSON.stringify(schemaOf(r)), modifiedOf(r));
  });

  app.get<{ Params: { collectionId: string } }>(`${FEATURES_ROOT}/collections/:collectionId/items`, async (request, reply) => {
    const query = (request.query ?? {}) as Record<string, unknown>;
    // f=fgb or f=csv (or Accept asking for them): the page as a file with typed columns
    const file = fileFormatOf(query.f, request.headers.accept);
    const q = parseItemsQuery(file === null ? query : withoutF(query));
    const html = file === null && wantsHtml(request, q.format);
    const r = await resolve(request.params.collectionId);
    const href = `${root(request)}/collections/${idOf(r)}/items`;
    const { features, matched, next, prev } = r.kind === 'observations' ? await observationPage(store, r.dataset.id, q) : layerPage(await indexOf(r), q);
    const own = withParams(query, { f: null });
    const links: Link[] = [
      ...selfLinks(href, html, GEOJSON, own),
      { href: `${root(request)}/collections/${idOf(r)}`, rel: 'collection', type: JSON_TYPE, title: 'the collection' },
    ];
    const fmt = html ? 'html' : 'json';
    if (next !== null) links.push({ href: href + withParams(query, { cursor: next, f: fmt }), rel: 'next', type: html ? HTML : GEOJSON, title: 'next page' });
    if (prev !== null) links.push({ href: href + withParams(query, { cursor: prev === '0' ? null : prev, f: fmt }), rel: 'prev', type: html ? HTML : GEOJSON, title: 'previous page' });
    if (file !== null) {
      const fmt = file === 'fgb' ? 'fgb' : 'csv';
      for (const l of links) if (l.rel === 'next' || l.rel === 'prev') l.href = l.href.replace(/([?&])f=json/, `$1f=${fmt}`);
      const link = links.filter((l) => l.rel === 'next' || l.rel === 'prev').map((l) => `<${l.href}>; rel="${l.rel}"`);
      if (link.length > 0) void reply.header('link', link.join(', '));
      if (matched !== null) void reply.header('x-roost-number-matched', String(matched));
      void reply.header('content-crs', `<${CRS84}>`);
      const parsed = features.map((t) => JSON.parse(t) as Parameters<typeof layerColumns>[0][number]);
      const columns = layerColumns(parsed, r.kind === 'hotspots' || r.kind === 'centres' ? hotspotFieldsOf(r.run!) : null);
      const name = idOf(r);
      void reply.header('content-disposition', `inline; filename="${name}.${fmt}"`);
      // the tag names the page: the collection, its run, and the query
      if (notModified(request, reply, etagOf(JSON.stringify([name, r.run?.id ?? null, features.length, matched, Object.entries(query).sort(), r.kind === 'observations' ? features : null])), modifiedOf(r))) return reply.code(304).send();
      return reply.type(MEDIA_TYPES[fmt]).send(Readable.from(fmt === 'fgb' ? flatGeobufChunks(parsed, columns, name) : csvLines(parsed, columns)));
    }
    const timeStamp = new Date().toISOString();
    const extra = { ...(matched === null ? {} : { numberMatched: matched }), numberReturned: features.length, timeStamp, links };
    void reply.header('content-crs', `<${CRS84}>`);
    if (html) return sendTagged(request, reply, 'text/html; charset=utf-8', itemsHtml(r, features, extra, links), modifiedOf(r));
    // the tag leaves out timeStamp, which changes with every answer while the features do not
    const text = featureCollectionString(features, null, extra);
    if (notModified(request, reply, etagOf(featureCollectionString(features, null, { ...extra, timeStamp: undefined })), modifiedOf(r))) return reply.code(304).send();
    return reply.type(GEOJSON).send(text);
  });

  app.get<{ Params: { collectionId: string; featureId: string } }>(`${FEATURES_ROOT}/collections/:collectionId/items/:featureId`, async (request, reply) => {
    const query = (request.query ?? {}) as Record<string, unknown>;
    onlyParams(query, ['f', 'crs']);
    parseItemsQuery(query, ['f', 'crs']);
    const html = wantsHtml(request, parseFormat(query.f as string | undefined));
    const r = await resolve(request.params.collectionId);
    const fid = request.params.featureId;
    let text: string | null;
    if (r.kind === 'observations') text = await store.getObservation(r.dataset.id, fid);
    else {
      const index = await indexOf(r);
      const k = index.find(fid);
      text = k < 0 ? null : index.feature(k);
    }
    if (text === null) throw new HttpProblem('feature-not-found', `collection ${idOf(r)} has no feature ${JSON.stringify(fid)}`);
    const coll = `${root(request)}/collections/${idOf(r)}`;
    const links: Link[] = [...selfLinks(`${coll}/items/${encodeURIComponent(fid)}`, html, GEOJSON), { href: coll, rel: 'collection', type: JSON_TYPE, title: 'the collection' }];
    void reply.header('content-crs', `<${CRS84}>`);
    if (html) {
      const f = JSON.parse(text) as { properties: Record<string, unknown> | null; geometry: unknown };
      return sendTagged(request, reply, 'text/html; charset=utf-8', page(`Feature ${fid}`, [table({ ...(f.properties ?? {}), geometry: f.geometry })], links), modifiedOf(r));
    }
    return sendTagged(request, reply, GEOJSON, text.slice(0, -1) + ',"links":' + JSON.stringify(links) + '}', modifiedOf(r));
  });

  /** JSON Schema of a collection's feature properties. */
  function schemaOf(r: Resolved): Record<string, unknown> {
    const id = idOf(r);
    if (r.kind === 'hotspots' || r.kind === 'centres') {
      const hotspots = (r.run!.summary?.['hotspots'] ?? []) as Record<string, unknown>[];
      return propertiesJsonSchema(hotspotLayerFields(categoryNames(hotspots), trustFieldsOf(hotspots), optionalFieldsOf(hotspots)), id);
    }
    if (isPublishedKind(r.kind)) return publishedSchema(r.kind, id);
    const own = { description: "the observation's own properties as posted; their names and types are the posting app's", additionalProperties: true };
    if (r.kind === 'observations') return { $schema: 'https://json-schema.org/draft/2020-12/schema', title: id, type: 'object', ...own, properties: { observed_at: { type: 'string', format: 'date-time' } } };
    return {
      $schema: 'https://json-schema.org/draft/2020-12/schema',
      title: id,
      type: 'object',
      ...own,
      required: ['hotspot_id', 'role'],
      properties: {
        hotspot_id: { type: ['integer', 'null'], description: "the observation's hotspot in the run; null for noise" },
        role: { type: 'string', enum: ['core', 'border', 'noise'] },
      },
    };
  }
}

/** JSON Schema of a published layer's properties (src/publish/publish.ts says what is kept). */
function publishedSchema(kind: CollectionKind, title: string): Record<string, unknown> {
  const head = { $schema: 'https://json-schema.org/draft/2020-12/schema', title, type: 'object' };
  if (kind === 'published-hotspots' || kind === 'published-centres') {
    return {
      ...head,
      description: 'figures of a published hotspot; the count of each category (count_<value>) appears only when the counted property is published',
      required: ['hotspot_id', 'count', 'area_km2', 'density_per_km2', 'centre_lon', 'centre_lat'],
      additionalProperties: { type: 'integer' },
      properties: {
        hotspot_id: { type: 'integer' },
        track_id: { type: 'string' },
        count: { type: 'integer', description: 'observations in the hotspot' },
        core_count: { type: 'integer' },
        border_count: { type: 'integer' },
        weight: { type: 'number' },
        radius_m: { type: 'number' },
        area_km2: { type: 'number', description: 'area of the published outline, km²' },
        density_per_km2: { type: 'number' },
        centre_lon: { type: 'number', description: "the centre of the grid cell holding the hotspot's centre" },
        centre_lat: { type: 'number' },
        p_value: { type: 'number', description: 'runs with a Monte Carlo test' },
        significant: { type: 'boolean', description: 'runs with a Monte Carlo test' },
        stability: { type: 'number', description: 'runs with resampling' },
      },
    };
  }
  return {
    ...head,
    description: 'a published observation: the centre of its grid cell, its hotspot and role, and only the properties the publishing settings allow',
    required: ['hotspot_id', 'role'],
    additionalProperties: true,
    properties: {
      hotspot_id: { type: ['integer', 'null'], description: "the observation's hotspot; null for noise" },
      role: { type: ['string', 'null'], enum: ['core', 'border', 'noise', null] },
    },
  };
}

/** The file format asked of an items page: `f=fgb` / `f=csv`, or (without `f`) an Accept header naming one. */
function fileFormatOf(f: unknown, accept: string | undefined): 'fgb' | 'csv' | null {
  if (f === 'fgb' || f === 'csv') return f;
  if (f !== undefined) return null;
  const chosen = layerFormat(undefined, accept);
  return chosen === 'geojson' ? null : chosen;
}

function withoutF(query: Record<string, unknown>): Record<string, unknown> {
  const { f: _f, ...rest } = query;
  return rest;
}

/** The declared fields of a run's hotspots and centres. */
function hotspotFieldsOf(run: Run): LayerField[] {
  const hotspots = (run.summary?.['hotspots'] ?? []) as Record<string, unknown>[];
  return hotspotLayerFields(categoryNames(hotspots), trustFieldsOf(hotspots), optionalFieldsOf(hotspots));
}

/** A page of observations: the store pages by its own cursor, which is passed through. */
async function observationPage(store: Store, datasetId: string, q: ItemsQuery): Promise<{ features: string[]; matched: number | null; next: string | null; prev: null }> {
  const filter = { ...(q.bbox ? { bbox: q.bbox } : {}), ...(q.datetime ?? {}) };
  try {
    const p = await store.listObservations(datasetId, { ...filter, limit: q.limit, ...(q.cursor === null ? {} : { cursor: q.cursor }) });
    const matched = await store.countObservations(datasetId, filter);
    return { features: p.features, matched, next: p.nextCursor, prev: null };
  } catch (err) {
    if (err instanceof StoreError && err.code === 'invalid') throw new HttpProblem('invalid-parameter', err.message, { parameter: /cursor/.test(err.message) ? 'cursor' : 'query' });
    throw err;
  }
}

function itemsHtml(r: Resolved, features: string[], extra: { numberMatched?: number; numberReturned: number }, links: Link[]): string {
  const rows = features.map((text) => {
    const f = JSON.parse(text) as { id?: unknown; properties: Record<string, unknown> | null; geometry: { type: string; coordinates: unknown } | null };
    return { id: f.id ?? null, geometry: f.geometry ? (f.geometry.type === 'Point' ? JSON.stringify(f.geometry.coordinates) : f.geometry.type) : null, ...(f.properties ?? {}) };
  });
  const cols = [...new Set(rows.flatMap((row) => Object.keys(row)))];
  const head = '<tr>' + cols.map((c) => `<th>${escapeHtml(c)}</th>`).join('') + '</tr>';
  const body = rows.map((row) => '<tr>' + cols.map((c) => `<td>${escapeHtml(String((row as Record<string, unknown>)[c] ?? ''))}</td>`).join('') + '</tr>').join('');
  const count = `<p>${extra.numberReturned} features${extra.numberMatched === undefined ? '' : ` of ${extra.numberMatched}`}.</p>`;
  return page(`${r.dataset.name} — ${r.kind}`, [count, `<table>${head}${body}</table>`], links);
}

export { DEFAULT_LIMIT, MAX_LIMIT };
