/**
 * What the dataset, observation and run routes share: the services they use, the JSON shapes of
 * datasets and runs, and the mapping of store errors to problems. Query strings and JSON bodies
 * are read and checked against openapi.yaml before a handler runs (../schemas.ts).
 */
import { nextSlot } from '../../jobs/schedule.js';
import type { JobPool } from '../../jobs/job-pool.js';
import type { Runner } from '../../jobs/runner.js';
import { SettingsError } from '../../run/settings.js';
import { StoreError, type Dataset, type Run, type Store } from '../../storage/store.js';
import { HttpProblem } from '../errors.js';
import type { components } from '../openapi-types.js';

export interface DatasetServices {
  store: Store;
  runner: Runner;
  /** worker threads for reading large posted batches; null reads them on the main thread */
  jobs: JobPool | null;
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
export function datasetJson(d: Dataset, observations?: number): components['schemas']['Dataset'] {
  const base = `/v1/datasets/${d.id}`;
  return {
    id: d.id,
    name: d.name,
    settings: d.settings,
    id_property: d.idProperty,
    window: d.window,
    schedule: d.schedule === null ? null : { ...d.schedule },
    next_run_at: nextRunAt(d),
    webhook: d.webhook === null ? null : { url: d.webhook.url },
    // stored only after checkPublishBlock (src/publish/publish.ts), which gives this shape
    publish: d.publish as components['schemas']['Publish'],
    created_at: d.createdAt,
    updated_at: d.updatedAt,
    ...(observations === undefined ? {} : { observations }),
    links: { self: base, observations: `${base}/observations`, runs: `${base}/runs`, latest: `${base}/runs/latest` },
  };
}

/** A run as the API shows it. */
export function runJson(r: Run): components['schemas']['Run'] {
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
