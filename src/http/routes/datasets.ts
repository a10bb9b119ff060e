/**
 * /v1/datasets and /v1/datasets/{id}: creating, listing, reading, changing and deleting datasets.
 * Settings use the API's names and are checked with the same validator as /v1/cluster; PATCH
 * merges `settings` member by member (RFC 7396: null removes a member) and replaces the rest.
 */
import { mayRead } from '../../auth/roles.js';
import type { FastifyInstance } from 'fastify';
import { windowProblem } from '../../jobs/execute.js';
import { scheduleProblem } from '../../jobs/schedule.js';
import { resolveRunSettings } from '../../trust/options.js';
import { StoreError, type DatasetPatch, type NewDataset } from '../../storage/store.js';
import { checkPublishBlock, PublishError } from '../../publish/publish.js';
import { checkWebhookAddress, checkWebhookUrl, WebhookAddressError } from '../../jobs/webhook-address.js';
import { HttpProblem } from '../errors.js';
import type { components } from '../openapi-types.js';
import { datasetJson, requireDataset, settingsProblem } from './common.js';

export interface DatasetRouteOptions {
  /** let webhooks reach private-network and loopback addresses (see src/jobs/webhook-address.ts) */
  allowPrivateWebhooks?: boolean;
  /** shortest time allowed between two slots of a schedule, milliseconds (0: no floor); default 5 minutes */
  scheduleMinIntervalMs?: number;
}

function bad(parameter: string, detail: string): never {
  throw new HttpProblem('invalid-parameter', `${parameter}: ${detail}`, { parameter });
}

/** Settings (an object, as the schema says) checked by the clustering and trust settings validators. */
function checkSettings(settings: Record<string, unknown>): Record<string, unknown> {
  try {
    resolveRunSettings(settings);
  } catch (err) {
    settingsProblem(err, 'settings.');
  }
  return settings;
}

/** A text member (string or null, as the schema says) that must not be blank. */
function optionalText(doc: DatasetInput, name: 'id_property' | 'window'): string | null | undefined {
  const v = doc[name];
  if (typeof v === 'string' && v.trim() === '') bad(name, 'must be a non-empty string or null');
  return v;
}

/** A create or patch body, whose shape the route schema (DatasetInput in openapi.yaml) has checked. */
type DatasetInput = components['schemas']['DatasetInput'];

/** The fields of a create or patch body, checked for meaning; absent fields stay undefined. */
function readFields(doc: DatasetInput, allowPrivateWebhooks: boolean, scheduleMinIntervalMs?: number): DatasetPatch & { id?: string } {
  const out: DatasetPatch & { id?: string } = {};
  if (doc.id !== undefined) out.id = doc.id;
  if (doc.name !== undefined) {
    if (doc.name.trim() === '') bad('name', 'must be a non-empty string');
    out.name = doc.name;
  }
  const idProperty = optionalText(doc, 'id_property');
  if (idProperty !== undefined) out.idProperty = idProperty;
  const window = optionalText(doc, 'window');
  if (window !== undefined) {
    if (window !== null) {
      const problem = windowProblem(window);
      if (problem !== null) bad('window', problem.replace(/^window /, ''));
    }
    out.window = window;
  }
  if (doc.schedule !== undefined) {
    const s = doc.schedule;
    out.schedule = s === null ? null : { cron: s.cron, timezone: s.timezone };
    const problem = out.schedule === null ? null : scheduleProblem(out.schedule, scheduleMinIntervalMs);
    if (problem !== null) bad('schedule', problem);
  }
  if (doc.webhook !== undefined) {
    const w = doc.webhook;
    if (w !== null) {
      try {
        // the URL is never echoed: it may carry a password
        checkWebhookUrl(w.url, allowPrivateWebhooks);
      } catch (err) {
        if (err instanceof WebhookAddressError) bad('webhook', err.message);
        throw err;
      }
    }
    out.webhook = w === null ? null : { url: w.url, secret: w.secret };
  }
  if (doc.publish !== undefined) {
    try {
      out.publish = checkPublishBlock(doc.publish);
    } catch (err) {
      if (err instanceof PublishError) bad(err.field === '' ? 'publish' : `publish.${err.field}`, err.message);
      throw err;
    }
  }
  return out;
}

/** Every address the webhook's host resolves to now must be allowed (checked again at each delivery). */
async function checkWebhookHost(webhook: DatasetPatch['webhook'], allowPrivateWebhooks: boolean): Promise<void> {
  if (webhook === undefined || webhook === null) return;
  try {
    // a name that does not resolve yet is kept: every delivery checks again
    await checkWebhookAddress(webhook.url, allowPrivateWebhooks, undefined, 'accept');
  } catch (err) {
    if (err instanceof WebhookAddressError) bad('webhook', err.message);
    throw err;
  }
}

/** RFC 7396 merge of flat settings: members of `patch` replace, null removes. */
function mergeSettings(base: Record<string, unknown>, patch: Record<string, unknown>): Record<string, unknown> {
  const out = { ...base };
  for (const [k, v] of Object.entries(patch)) {
    if (v === null) delete out[k];
    else out[k] = v;
  }
  return out;
}

export default async function datasetRoutes(app: FastifyInstance, options: DatasetRouteOptions = {}): Promise<void> {
  const { store } = app;
  const allowPrivate = options.allowPrivateWebhooks === true;

  app.post('/v1/datasets', async (request, reply) => {
    const doc = request.body as DatasetInput;
    const fields = readFields(doc, allowPrivate, options.scheduleMinIntervalMs);
    if (fields.id === undefined) bad('id', 'is required: 1 to 128 characters from A-Z a-z 0-9 . _ ~ -, starting with a letter or digit');
    if (doc.settings === undefined) bad('settings', 'is required, for example {"eps": 250, "min_points": 5}');
    const d: NewDataset = {
      id: fields.id,
      name: fields.name ?? fields.id,
      settings: checkSettings(doc.settings),
      idProperty: fields.idProperty ?? null,
      window: fields.window ?? null,
      schedule: fields.schedule ?? null,
      webhook: fields.webhook ?? null,
      publish: fields.publish ?? null,
    };
    await checkWebhookHost(d.webhook, allowPrivate);
    try {
      const created = await store.createDataset(d);
      return reply.code(201).header('location', `/v1/datasets/${created.id}`).send(datasetJson(created, 0));
    } catch (err) {
      if (err instanceof StoreError && err.code === 'conflict') throw new HttpProblem('dataset-exists', err.message);
      if (err instanceof StoreError && err.code === 'invalid') bad(/dataset id/.test(err.message) ? 'id' : 'body', err.message);
      throw err;
    }
  });

  app.get('/v1/datasets', async (request) => {
    // a key limited to one dataset sees that one only (the access check let it through as a listing)
    const all = (await store.listDatasets()).filter((d) => mayRead(request.principal, d.id));
    return { datasets: all.map((d) => datasetJson(d)) };
  });

  app.get<{ Params: { id: string } }>('/v1/datasets/:id', async (request) => {
    const d = await requireDataset(store, request.params.id);
    return datasetJson(d, await store.countObservations(d.id));
  });

  app.patch<{ Params: { id: string } }>('/v1/datasets/:id', async (request) => {
    const current = await requireDataset(store, request.params.id);
    const doc = request.body as DatasetInput;
    const fields = readFields(doc, allowPrivate, options.scheduleMinIntervalMs);
    await checkWebhookHost(fields.webhook, allowPrivate);
    if (fields.id !== undefined && fields.id !== current.id) bad('id', 'cannot be changed; create a new dataset instead');
    delete fields.id;
    const patch: DatasetPatch = { ...fields };
    if (doc.settings !== undefined) patch.settings = checkSettings(mergeSettings(current.settings, doc.settings));
    try {
      const d = await store.updateDataset(current.id, patch);
      return datasetJson(d, await store.countObservations(d.id));
    } catch (err) {
      if (err instanceof StoreError && err.code === 'not-found') throw new HttpProblem('dataset-not-found', err.message);
      if (err instanceof StoreError && err.code === 'invalid') bad('body', err.message);
      throw err;
    }
  });

  app.delete<{ Params: { id: string } }>('/v1/datasets/:id', async (request, reply) => {
    if (!(await store.deleteDataset(request.params.id))) throw new HttpProblem('dataset-not-found', `there is no dataset ${JSON.stringify(request.params.id)}`);
    return reply.code(204).send();
  });
}
