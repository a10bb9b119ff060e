/**
 * /v1/datasets/{id}/observations: posting batches (one transaction each, idempotent by id),
 * listing with bbox / datetime / property filters and cursor paging, and retracting one.
 *
 * Bodies up to SMALL_BODY_BYTES are read and stored on the main thread (a phone's single sighting
 * should not pay a thread hop); larger ones are read, stored in one transaction and placed in a
 * job thread with its own store connection (LARGE_STORE_BYTES), so that a post of 100 000
 * observations never holds up the event loop; /healthz counts them as `storing`. The answer to a post says where each
 * observation stands against the latest succeeded run's hotspots (see src/run/which-hotspot.ts):
 * the hotspot it falls in, whether it lies inside that hull, the hotspot's size, or the nearest
 * hotspot when it is in none.
 */
import type { FastifyInstance, FastifyReply, FastifyRequest } from 'fastify';
import { bboxOfPositions, COORDINATE_DECIMALS, featureCollectionString } from '../../geometry/geojson.js';
import { readRecords, type RecordBatch, type RecordOptions } from '../../ingest/records.js';
import { compileTimeFormat } from '../../ingest/checks.js';
import { InputError, type InputProblem } from '../../ingest/types.js';
import { parseCondition } from '../../run/settings.js';
import type { Dataset, ListObservationsOptions, Store, WhereCondition } from '../../storage/store.js';
import type { StoreConfig } from '../../storage/index.js';
import { StoreError } from '../../storage/store.js';
import { formatOf } from '../body.js';
import { sendTagged } from '../conditional.js';
import { DEFAULT_CONFIG } from '../config.js';
import { HttpProblem, MAX_LISTED_PROBLEMS } from '../errors.js';
import { JobQueueFull, type JobPool } from '../../jobs/job-pool.js';
import type { StoreOutcome } from '../../jobs/job-worker.js';
import { BatchNotStored, HotspotLookup, MAX_PLACEMENTS, storeBatch, type StoredBatch } from '../../jobs/store-batch.js';
import { requireDataset, settingsProblem, storeProblem } from './common.js';

/** Bodies up to this many bytes are read on the main thread. */
export const SMALL_BODY_BYTES = 64 * 1024;

/**
 * Bodies over this many bytes (about 250 point features) are read, stored and placed in a job
 * thread with its own connection to the database (src/jobs/store-batch.ts), when the store can
 * be opened there (a file or PostgreSQL, not ':memory:'); smaller ones on the main thread.
 */
export const LARGE_STORE_BYTES = SMALL_BODY_BYTES;

/** 422 body members for rejected features, in the form of the clustering endpoints. */
function problemList(problems: { index: number | null; id?: string | number; code: string; message: string }[], total: number): Record<string, unknown> {
  return {
    problems: problems.slice(0, MAX_LISTED_PROBLEMS).map((p) => ({ index: p.index, ...(p.id !== undefined ? { id: p.id } : {}), code: p.code, message: p.message })),
    problems_total: Math.max(total, problems.length),
  };
}

function inputProblem(problems: InputProblem[], total: number, message: string): never {
  if (problems.some((p) => p.code === 'too-many-features')) throw new HttpProblem('body-too-large', message);
  const unreadable = problems.length > 0 && problems.every((p) => p.index === null);
  if (unreadable) throw new HttpProblem('malformed-body', message, problemList(problems, total));
  throw new HttpProblem('invalid-observations', message, problemList(problems, total));
}

/** Parses `datetime`: an RFC 3339 instant, or an interval a/b with open ends `..` (both ends inclusive). */
export function parseDatetime(text: string): { from?: number; to?: number } {
  const instant = (s: string): number => {
    const t = /^\d{4}-\d{2}-\d{2}T\d{2}:\d{2}:\d{2}(\.\d+)?(Z|[+-]\d{2}:\d{2})$/i.test(s) ? Date.parse(s) : NaN;
    if (!Number.isFinite(t)) {
      throw new HttpProblem('invalid-parameter', `datetime: ${JSON.stringify(s)} is not an RFC 3339 instant such as 2026-04-01T00:00:00Z`, { parameter: 'datetime' });
    }
    return t;
  };
  const parts = text.split('/');
  if (parts.length === 1) {
    const t = instant(text);
    return { from: t, to: t + 1 };
  }
  if (parts.length !== 2 || ((parts[0] === '..' || parts[0] === '') && (parts[1] === '..' || parts[1] === ''))) {
    throw new HttpProblem('invalid-parameter', 'datetime: give an instant, or an interval start/end where one end may be ".."', { parameter: 'datetime' });
  }
  const out: { from?: number; to?: number } = {};
  if (parts[0] !== '..' && parts[0] !== '') out.from = instant(parts[0]!);
  if (parts[1] !== '..' && parts[1] !== '') out.to = instant(parts[1]!) + 1;
  if (out.from !== undefined && out.to !== undefined && out.from >= out.to) {
    throw new HttpProblem('invalid-parameter', 'datetime: the interval ends before it starts', { parameter: 'datetime' });
  }
  return out;
}

function parseBbox(text: unknown): [number, number, number, number] {
  const parts = typeof text === 'string' ? text.split(',').map((s) => (s.trim() === '' ? NaN : Number(s))) : [];
  const [w, s, e, n] = parts as [number, number, number, number];
  if (parts.length !== 4 || !parts.every(Number.isFinite) || Math.abs(w) > 180 || Math.abs(e) > 180 || s < -90 || n > 90 || s > n) {
    throw new HttpProblem('invalid-parameter', `bbox must be west,south,east,north in degrees (west > east crosses the antimeridian), got ${JSON.stringify(text)}`, { parameter: 'bbox' });
  }
  return [w, s, e, n];
}

const BBOX_SCALE = 10 ** COORDINATE_DECIMALS;
const floorTo = (x: number): number => Math.floor(x * BBOX_SCALE) / BBOX_SCALE;
const ceilTo = (x: number): number => Math.ceil(x * BBOX_SCALE) / BBOX_SCALE;

async function readBatch(jobs: JobPool | null, body: Uint8Array, options: RecordOptions): Promise<RecordBatch> {
  if (jobs === null || body.byteLength <= SMALL_BODY_BYTES) {
    try {
      return readRecords(Buffer.from(body.buffer, body.byteOffset, body.byteLength), options);
    } catch (err) {
      if (err instanceof InputError) inputProblem(err.problems, err.total, err.message);
      throw err;
    }
  }
  const out = await jobs.records({ body, options }).catch((err: unknown) => {
    if (err instanceof JobQueueFull) throw new HttpProblem('overloaded', 'Every thread reading posted batches is busy and the waiting line is full; retry later.', {}, { 'retry-after': String(DEFAULT_CONFIG.retryAfterS) });
    throw err;
  });
  if (!out.ok) inputProblem(out.problems, out.total, out.message);
  return out.batch;
}

/**
 * The reader's options: those a post gives in its query (lon_column, lat_column, time_column,
 * time_format), for this post only, over the dataset's settings of the same names.
 */
function recordOptions(d: Dataset, format: RecordOptions['format'], partial: boolean, query: Record<string, unknown>, maxFeatures: number): RecordOptions {
  const text = (v: unknown): string | null => (typeof v === 'string' && v !== '' ? v : null);
  const setting = (name: string): string | null => text(query[name]) ?? text(d.settings[name]);
  const timeFormat = setting('time_format');
  if (timeFormat !== null) {
    const f = compileTimeFormat(timeFormat);
    if (typeof f === 'string') throw new HttpProblem('invalid-parameter', f, { parameter: 'time_format' });
  }
  return {
    format,
    idProperty: d.idProperty,
    weightProperty: text(d.settings.weight),
    partial,
    lonColumn: setting('lon_column'),
    latColumn: setting('lat_column'),
    timeColumn: setting('time_column'),
    timeFormat,
    maxFeatures,
  };
}

export interface ObservationRouteOptions {
  /** most observations in one post (more: 413); default DEFAULT_CONFIG.maxPostFeatures */
  maxPostFeatures?: number;
}

type Rejection = { index: number | null; id?: string | number; code: string; message: string };

/** The observations the store kept back as conflicting with stored ones, at their input index. */
function conflictsOf(done: StoredBatch): Rejection[] {
  return done.result.conflicts.map((id, k) => ({
    index: done.conflictIndex[k] ?? null,
    id,
    code: 'conflict',
    message: `an observation with id ${JSON.stringify(id)} is stored with other content (or given twice with different content); send replace=true to replace it`,
  }));
}

/** The refusal of a batch the store did not keep: conflicts alone, or invalid features and conflicts without partial. */
function unstoredProblem(done: StoredBatch, conflicts: Rejection[]): HttpProblem {
  if (conflicts.length > 0 && done.rejected.length === 0) {
    return new HttpProblem('observation-conflict', `${conflicts.length} observation${conflicts.length > 1 ? 's have ids' : ' has an id'} stored with other content; nothing was stored. Send replace=true to replace them, or partial=true to store the rest.`, problemList(conflicts, conflicts.length));
  }
  return new HttpProblem('invalid-observations', 'some observations are not valid or conflict with stored ones; nothing was stored', problemList([...done.rejected, ...conflicts].sort((a, b) => (a.index ?? 0) - (b.index ?? 0)), done.rejected.length + conflicts.length));
}

/** The answer's counts and lists for a stored batch. */
function ingestAnswer(datasetId: string, done: StoredBatch, rejections: Rejection[]): Record<string, unknown> {
  const { result } = done;
  return {
    dataset_id: datasetId,
    stored: result.stored,
    accepted: result.accepted.length,
    duplicate: result.duplicates.length,
    replaced: result.replaced.length,
    rejected: rejections.length,
    duplicates: result.duplicates.slice(0, MAX_LISTED_PROBLEMS),
    rejections: rejections.slice(0, MAX_LISTED_PROBLEMS).map((r) => ({ index: r.index, ...(r.id !== undefined ? { id: r.id } : {}), code: r.code, reason: r.message })),
  };
}

/** Adds to the answer where the posted observations stand against the latest run's hotspots: one observation, or each of a collection up to MAX_PLACEMENTS. */
function addPlacements(done: StoredBatch, rejected: number, answer: Record<string, unknown>): void {
  if (done.count === 1 && rejected === 0) {
    answer.observation_id = done.shown[0]!.id;
    answer.latest_run = done.latestRun;
    answer.hotspot = done.placements?.[0]?.hotspot ?? null;
    answer.nearest_hotspot = done.placements?.[0]?.nearest_hotspot ?? null;
  } else if (done.count > 0) {
    // in input order
    answer.latest_run = done.latestRun;
    answer.placements = done.placements === null ? [] : done.shown.map((r, k) => ({ index: r.index, observation_id: r.id, ...done.placements![k]! }));
    answer.placements_total = done.count;
  }
}

/** The problem for a store that failed on a batch (nothing of it is stored); the cause goes to the log. */
function storeFailed(request: FastifyRequest, err: { message: string; stack?: string }): never {
  request.log.error({ err: { message: err.message, stack: err.stack } }, 'storing a posted batch failed');
  throw new HttpProblem('store-failed', `The database did not store this batch; nothing of it was stored. Send it again later (it is safe to repeat: observations already stored are recognised by id). If it keeps failing, tell the operator the request id ${String(request.id)}.`, {}, { 'retry-after': String(DEFAULT_CONFIG.retryAfterS) });
}

/** How posts are stored: the app's store and lookup on this thread, or a job thread for large ones. */
interface PostServices {
  store: Store;
  jobs: JobPool | null;
  /** how a job thread opens the store; null: every post is stored on this thread */
  storeConfig: StoreConfig | null;
  lookup: HotspotLookup;
  /** large posts being stored in a job thread now (shown by /healthz) */
  storing: { inProgress: number };
}

/** A large post, read, stored and placed in a job thread. */
async function storeInThread(request: FastifyRequest, s: PostServices, datasetId: string, body: Uint8Array, options: RecordOptions, ingest: { replace: boolean; partial: boolean }): Promise<StoredBatch> {
  s.storing.inProgress++;
  let out: StoreOutcome;
  try {
    out = await s.jobs!.store({ store: s.storeConfig!, datasetId, body, options, ...ingest });
  } catch (err) {
    if (err instanceof JobQueueFull) throw new HttpProblem('overloaded', 'Every thread storing posted batches is busy and the waiting line is full; retry later.', {}, { 'retry-after': String(DEFAULT_CONFIG.retryAfterS) });
    throw err;
  } finally {
    s.storing.inProgress--;
  }
  if (out.ok) return out.stored;
  if ('input' in out) return inputProblem(out.input.problems, out.input.total, out.input.message);
  if (out.failure.code !== null) storeProblem(new StoreError(out.failure.code, out.failure.message));
  return storeFailed(request, out.failure);
}

/** A post read and stored on this thread. */
async function storeHere(request: FastifyRequest, s: PostServices, datasetId: string, body: Uint8Array, options: RecordOptions, ingest: { replace: boolean; partial: boolean }): Promise<StoredBatch> {
  const batch = await readBatch(s.jobs, body, options);
  return storeBatch(s.store, s.lookup, '', datasetId, batch, ingest).catch((err: unknown) => {
    if (!(err instanceof BatchNotStored)) throw err;
    if (err.cause instanceof StoreError) return storeProblem(err.cause);
    const e = err.cause instanceof Error ? err.cause : err;
    return storeFailed(request, { message: e.message, stack: e.stack });
  });
}

/** POST /v1/datasets/{id}/observations */
function postObservationsHandler(s: PostServices, maxFeatures: number) {
  return async (request: FastifyRequest<{ Params: { id: string } }>) => {
    const query = (request.query ?? {}) as Record<string, unknown>;
    const ingest = { replace: query.replace === true, partial: query.partial === true };
    const dataset = await requireDataset(s.store, request.params.id);
    const body = request.body as Uint8Array | undefined;
    if (!body || body.byteLength === 0) throw new HttpProblem('malformed-body', 'The request body is empty; send a GeoJSON Feature or FeatureCollection, CSV, or a GeoJSON text sequence.');
    const options = recordOptions(dataset, formatOf(request.headers['content-type']), ingest.partial, query, maxFeatures);
    const large = s.jobs !== null && s.storeConfig !== null && body.byteLength > LARGE_STORE_BYTES;
    const done = await (large ? storeInThread : storeHere)(request, s, dataset.id, body, options, ingest);
    const conflicts = conflictsOf(done);
    if (!done.result.stored) throw unstoredProblem(done, conflicts);
    const rejections = [...done.rejected, ...conflicts].sort((a, b) => (a.index ?? 0) - (b.index ?? 0));
    const answer = ingestAnswer(dataset.id, done, rejections);
    addPlacements(done, rejections.length, answer);
    return answer;
  };
}

/** The listing's filters from its query: bbox on the sphere, datetime, `where` conditions, cursor. */
function listOptions(query: Record<string, unknown>): ListObservationsOptions {
  const options: ListObservationsOptions = { limit: (query.limit as number | undefined) ?? 1000 };
  if (query.bbox !== undefined) options.bbox = parseBbox(query.bbox);
  if (query.datetime !== undefined) Object.assign(options, parseDatetime(String(query.datetime)));
  if (query.where !== undefined) {
    const where: WhereCondition[] = [];
    try {
      for (const c of [query.where].flat()) where.push(parseCondition(c));
    } catch (err) {
      settingsProblem(err);
    }
    options.where = where;
  }
  if (query.cursor !== undefined) options.cursor = String(query.cursor);
  return options;
}

/** The address of the listing's next page: the same query with the next cursor. */
function nextObservationsLink(datasetId: string, query: Record<string, unknown>, cursor: string): Record<string, string> {
  const next = new URLSearchParams();
  for (const [k, v] of Object.entries(query)) if (k !== 'cursor') for (const x of [v].flat()) next.append(k, String(x));
  next.set('cursor', cursor);
  return { rel: 'next', type: 'application/geo+json', href: `/v1/datasets/${datasetId}/observations?${next.toString()}` };
}

/** GET /v1/datasets/{id}/observations */
function listObservationsHandler(store: Store) {
  return async (request: FastifyRequest<{ Params: { id: string } }>, reply: FastifyReply) => {
    const query = (request.query ?? {}) as Record<string, unknown>;
    const dataset = await requireDataset(store, request.params.id);
    const options = listOptions(query);
    let page;
    try {
      page = await store.listObservations(dataset.id, options);
    } catch (err) {
      if (err instanceof StoreError && err.code === 'invalid') throw new HttpProblem('invalid-parameter', err.message, { parameter: /cursor/.test(err.message) ? 'cursor' : 'query' });
      throw err;
    }
    const links = page.nextCursor === null ? [] : [nextObservationsLink(dataset.id, query, page.nextCursor)];
    // the bbox of this page's observations (RFC 7946 §5), west > east when they straddle the
    // antimeridian; rounded outwards, as the features keep their coordinates as posted
    const box = bboxOfPositions(page.lon, page.lat);
    const bbox = box === null ? null : [floorTo(box[0]), floorTo(box[1]), ceilTo(box[2]), ceilTo(box[3])];
    const text = featureCollectionString(page.features, bbox, { numberReturned: page.features.length, links });
    return sendTagged(request, reply, 'application/geo+json', text);
  };
}

/** DELETE /v1/datasets/{id}/observations/{obsId} */
function retractObservationHandler(store: Store) {
  return async (request: FastifyRequest<{ Params: { id: string; obsId: string } }>, reply: FastifyReply) => {
    const dataset = await requireDataset(store, request.params.id);
    if (!(await store.deleteObservation(dataset.id, request.params.obsId))) {
      throw new HttpProblem('observation-not-found', `dataset ${JSON.stringify(dataset.id)} has no observation ${JSON.stringify(request.params.obsId)}`);
    }
    return reply.code(204).send();
  };
}

export default async function observationRoutes(app: FastifyInstance, options: ObservationRouteOptions = {}): Promise<void> {
  const { store, jobPool, storeConfig, storing } = app;
  const services: PostServices = { store, jobs: jobPool, storeConfig, lookup: new HotspotLookup(), storing };
  app.post('/v1/datasets/:id/observations', postObservationsHandler(services, options.maxPostFeatures ?? DEFAULT_CONFIG.maxPostFeatures));
  app.get('/v1/datasets/:id/observations', listObservationsHandler(store));
  app.delete('/v1/datasets/:id/observations/:obsId', retractObservationHandler(store));
}
