/**
 * /v1/datasets and /v1/datasets/{id}: creating, listing, reading, changing and deleting datasets.
 * Settings use the API's names and are checked with the same validator as /v1/cluster; PATCH
 * merges `settings` member by member (RFC 7396: null removes a member) and replaces the rest.
 */
import type { FastifyInstance } from 'fastify';
import { windowProblem } from '../../jobs/execute.js';
import { scheduleProblem } from '../../jobs/schedule.js';
import { resolveSettings } from '../../run/settings.js';
import { StoreError, type DatasetPatch, type NewDataset } from '../../storage/store.js';
import { checkPublishBlock, PublishError } from '../../publish/publish.js';
import { checkWebhookAddress, checkWebhookUrl, WebhookAddressError } from '../../jobs/webhook-address.js';
import { HttpProblem } from '../errors.js';
import { datasetJson, jsonObject, requireDataset, settingsProblem } from './common.js';

const FIELDS = ['id', 'name', 'settings', 'id_property', 'window', 'schedule', 'webhook', 'publish'] as const;

export interface DatasetRouteOptions {
  /** let webhooks reach private-network and loopback addresses (see src/jobs/webhook-address.ts) */
  allowPrivateWebhooks?: boolean;
  /** shortest time allowed between two slots of a schedule, milliseconds (0: no floor); default 5 minutes */
  scheduleMinIntervalMs?: number;
}

function bad(parameter: string, detail: string): never {
  throw new HttpProblem('invalid-parameter', `${parameter}: ${detail}`, { parameter });
}

function checkSettings(settings: unknown): Record<string, unknown> {
  if (settings === null || typeof settings !== 'object' || Array.isArray(settings)) bad('settings', 'must be an object such as {"eps": 250, "min_points": 5}');
  try {
    resolveSettings(settings as Record<string, unknown>);
  } catch (err) {
    settingsProblem(err, 'settings.');
  }
  return settings as Record<string, unknown>;
}

function optionalText(doc: Record<string, unknown>, name: string): string | null | undefined {
  const v = doc[name];
  if (v === undefined || v === null) return v;
  if (typeof v !== 'string' || v.trim() === '') bad(name, 'must be a non-empty string or null');
  return v;
}

/** The fields of a create or patch body, checked; absent fields stay undefined. */
function readFields(doc: Record<string, unknown>, allowPrivateWebhooks: boolean, scheduleMinIntervalMs?: number): DatasetPatch & { id?: string } {
  for (const k of Object.keys(doc)) if (!(FIELDS as readonly string[]).includes(k)) bad(k, `unknown member; a dataset has ${FIELDS.join(', ')}`);
  const out: DatasetPatch & { id?: string } = {};
  if (doc.id !== undefined) {
    if (typeof doc.id !== 'string') bad('id', 'must be a string');
    out.id = doc.id;
  }
  if (doc.name !== undefined) {
    if (typeof doc.name !== 'string' || doc.name.trim() === '') bad('name', 'must be a non-empty string');
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
    const s = doc.schedule as Record<string, unknown> | null;
    if (s !== null && (typeof s !== 'object' || Array.isArray(s))) bad('schedule', 'must be {"cron": "0 2 * * *", "timezone": "Europe/Zurich"} or null');
    if (s !== null && typeof s.cron !== 'string') bad('schedule', 'has no cron expression: give "cron", for example "0 2 * * *" (every night at 02:00)');
    if (s !== null && typeof s.timezone !== 'string') {
      bad('schedule', 'has no time zone: give "timezone", an IANA time zone name such as "Europe/Berlin" or "UTC", in which the cron expression is read');
    }
    out.schedule = s === null ? null : { cron: s.cron as string, timezone: s.timezone as string };
    const problem = out.schedule === null ? null : scheduleProblem(out.schedule, scheduleMinIntervalMs);
    if (problem !== null) bad('schedule', problem);
  }
  if (doc.webhook !== undefined) {
    const w = doc.webhook as Record<string, unknown> | null;
    if (w !== null) {
      if (typeof w !== 'object' || typeof w.url !== 'string' || typeof w.secret !== 'string' || w.secret === '') {
        bad('webhook', 'must be {"url": "https://…", "secret": "…"} or null');
      }
      try {
        // the URL is never echoed: it may carry a password
        checkWebhookUrl(w.url as string, allowPrivateWebhooks);
      } catch (err) {
        if (err instanceof WebhookAddressError) bad('webhook', err.message);
        throw err;
      }
    }
    out.webhook = w === null ? null : { url: w.url as string, secret: w.secret as string };
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
function mergeSettings(base: Record<string, unknown>, patch: unknown): Record<string, unknown> {
  if (patch === null || typeof patch !== 'object' || Array.isArray(patch)) bad('settings', 'must be an object of the members to change (null removes one)');
  const out = { ...base };
  for (const [k, v] of Object.entries(patch as Record<string, unknown>)) {
    if (v === null) delete out[k];
    else out[k] = v;
  }
  return out;
}

export default async function datasetRoutes(app: FastifyInstance, options: DatasetRouteOptions = {}): Promise<void> {
  const { store } = app;
  const allowPrivate = options.allowPrivateWebhooks === true;

  app.post('/v1/datasets', async (request, reply) => {
    const doc = jsonObject(request);
    const fields = readFields({ ...doc, settings: undefined }, allowPrivate, options.scheduleMinIntervalMs);
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

  app.get('/v1/datasets', async () => {
    const all = await store.listDatasets();
    return { datasets: all.map((d) => datasetJson(d)) };
  });

  app.get<{ Params: { id: string } }>('/v1/datasets/:id', async (request) => {
    const d = await requireDataset(store, request.params.id);
    return datasetJson(d, await store.countObservations(d.id));
  });

  app.patch<{ Params: { id: string } }>('/v1/datasets/:id', async (request) => {
    const current = await requireDataset(store, request.params.id);
    const doc = jsonObject(request);
    const fields = readFields({ ...doc, settings: undefined }, allowPrivate, options.scheduleMinIntervalMs);
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
