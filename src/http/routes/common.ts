/**
 * What the dataset, observation and run routes share: the services they use, JSON bodies read
 * on the main thread (small documents only), the JSON shapes of datasets and runs, and the
 * mapping of store errors to problems.
 */
import { nextSlot } from '../../jobs/schedule.js';
import type { FastifyRequest } from 'fastify';
import type { JobPool } from '../../jobs/job-pool.js';
import type { Runner } from '../../jobs/runner.js';
import { SettingsError } from '../../run/settings.js';
import { StoreError, type Dataset, type Run, type Store } from '../../storage/store.js';
import { HttpProblem } from '../errors.js';

export interface DatasetServices {
  store: Store;
  runner: Runner;
  /** worker threads for reading large posted batches; null reads them on the main thread */
  jobs: JobPool | null;
}

/** Largest JSON body read on the main thread (dataset definitions, run overrides), bytes. */
export const MAX_JSON_BODY_BYTES = 1024 * 1024;

/** The request body as a JSON object; an absent body gives `{}`. */
export function jsonObject(request: FastifyRequest): Record<string, unknown> {
  const body = request.body as Uint8Array | undefined;
  if (body === undefined || body === null || body.byteLength === 0) return {};
  if (body.byteLength > MAX_JSON_BODY_BYTES) throw new HttpProblem('body-too-large', `this endpoint reads JSON documents of at most ${MAX_JSON_BODY_BYTES} bytes`, { limit_bytes: MAX_JSON_BODY_BYTES });
  let doc: unknown;
  try {
    doc = JSON.parse(Buffer.from(body.buffer, body.byteOffset, body.byteLength).toString('utf8'));
  } catch (err) {
    throw new HttpProblem('malformed-body', `the body is not JSON: ${(err as Error).message}`);
  }
  if (doc === null || typeof doc !== 'object' || Array.isArray(doc)) throw new HttpProblem('malformed-body', 'the body must be a JSON object');
  return doc as Record<string, unknown>;
}

/** A settings problem as a 400 naming the parameter under `prefix` (for example "settings.eps"). */
export function settingsProblem(err: unknown, prefix = ''): never {
  if (err instanceof SettingsError) throw new HttpProblem('invalid-parameter', err.message, { parameter: prefix + err.parameter });
  throw err;
}

/** A store refusal as a problem; other errors pass through. */
export function storeProblem(err: unknown): never {
  if (err instanceof StoreError) {
    if (err.code === 'invalid') throw new HttpProblem('invalid-parameter', err.message, { parameter: 'query' });
    if (err.code === 'not-found') throw new HttpProblem('not-found', err.message);
  }
  throw err;
}

export async function requireDataset(store: Store, id: string): Promise<Dataset> {
  const d = await store.getDataset(id);
  if (d === null) throw new HttpProblem('dataset-not-found', `there is no dataset ${JSON.stringify(id)}; GET /v1/datasets lists them`);
  return d;
}

export async function requireRun(store: Store, datasetId: string, runId: string): Promise<Run> {
  const r = await store.getRun(datasetId, runId);
  if (r === null) throw new HttpProblem('run-not-found', `dataset ${JSON.stringify(datasetId)} has no run ${JSON.stringify(runId)}; GET /v1/datasets/${datasetId}/runs lists them`);
  return r;
}

/** A boolean query flag: absent, `true` or `false` (also 1/0). */
export function flag(query: Record<string, unknown>, name: string): boolean {
  const v = query[name];
  if (v === undefined || v === '' || v === 'false' || v === '0') return false;
  if (v === 'true' || v === '1') return true;
  throw new HttpProblem('invalid-parameter', `${name} must be true or false, got ${JSON.stringify(v)}`, { parameter: name });
}

/** A whole-number query parameter within bounds, or the default. */
export function integer(query: Record<string, unknown>, name: string, dflt: number, min: number, max: number): number {
  const v = query[name];
  if (v === undefined || v === '') return dflt;
  const n = typeof v === 'string' && /^\d+$/.test(v) ? Number(v) : NaN;
  if (!(n >= min && n <= max)) throw new HttpProblem('invalid-parameter', `${name} must be a whole number from ${min} to ${max}, got ${JSON.stringify(v)}`, { parameter: name });
  return n;
}

/**
 * When the dataset's schedule next fires (RFC 3339, UTC), or null without a usable schedule.
 * The scheduled run is created at that slot, or within --schedule-scan-ms of it.
 */
function nextRunAt(d: Dataset, now = new Date()): string | null {
  if (d.schedule === null) return null;
  try {
    return nextSlot(d.schedule, now)?.toISOString() ?? null;
  } catch {
    return null; // stored before the checks of today; the scheduler warns about it
  }
}

/** A dataset as the API shows it (the webhook secret is never shown). */
export function datasetJson(d: Dataset, observations?: number): Record<string, unknown> {
  const base = `/v1/datasets/${d.id}`;
  return {
    id: d.id,
    name: d.name,
    settings: d.settings,
    id_property: d.idProperty,
    window: d.window,
    schedule: d.schedule,
    next_run_at: nextRunAt(d),
    webhook: d.webhook === null ? null : { url: d.webhook.url },
    publish: d.publish,
    created_at: d.createdAt,
    updated_at: d.updatedAt,
    ...(observations === undefined ? {} : { observations }),
    links: { self: base, observations: `${base}/observations`, runs: `${base}/runs`, latest: `${base}/runs/latest` },
  };
}

/** A run as the API shows it. */
export function runJson(r: Run): Record<string, unknown> {
  const base = `/v1/datasets/${r.datasetId}/runs/${r.id}`;
  return {
    id: r.id,
    dataset_id: r.datasetId,
    status: r.status,
    trigger: r.trigger,
    progress: r.progress,
    settings: r.settings,
    error: r.error,
    created_at: r.createdAt,
    started_at: r.startedAt,
    finished_at: r.finishedAt,
    updated_at: r.updatedAt,
    timings_ms: r.timings,
    summary: r.summary,
    links: {
      self: base,
      cancel: `${base}/cancel`,
      hotspots: `${base}/hotspots`,
      centres: `${base}/centres`,
      noise: `${base}/noise`,
      points: `${base}/points`,
    },
  };
}
