/**
 * Route schemas from openapi.yaml, the one source of the HTTP contract: each operation's query,
 * path and JSON body parameters become the Fastify `querystring`, `params` and `body` schemas of
 * its route, checked before the handler runs. A query string takes only the parameters the
 * operation lists (`additionalProperties: false`). What a schema cannot say stays in the readers
 * and the settings validator: ranges on the sphere, swapped coordinates, cron meaning, a window's
 * duration.
 *
 * Refusals are RFC 9457 problems of the catalogue (errors.ts): `invalid-parameter` naming the
 * parameter, or, for a path id that cannot name a dataset, `dataset-not-found` as a lookup would
 * answer. A refused clustering or trust setting (the Monte Carlo test, resampling) is worded by
 * its own validator, as it is when the setting comes from a body, a dataset or the command line
 * (`ownerDetail`, the one place that maps a parameter to its validator).
 */
import type { ErrorObject } from 'ajv';
import { resolveSettings, SettingsError, SETTING_NAMES } from '../run/settings.js';
import { isTrustSetting, resolveTrustSettings, TRUST_SETTING_NAMES } from '../trust/options.js';
import { HttpProblem } from './errors.js';

type Json = Record<string, unknown>;

/** What a route's schemas and refusals need to know about its operation. */
export interface OperationSchemas {
  /** `GET /v1/datasets/{id}` */
  operation: string;
  params?: Json;
  querystring?: Json;
  body?: Json;
  /** the operation reads a JSON document (parsed before validation) */
  jsonBody: boolean;
  /** the query parameters it takes, in the document's order */
  queryNames: string[];
}

/** Keywords that neither validate nor help a refusal's message (`description` and `example` do). */
const NOT_VALIDATION = new Set(['examples', 'deprecated', 'externalDocs', 'xml', 'discriminator', 'title', 'default', 'readOnly', 'writeOnly']);

/** `#/components/...` resolved in `doc`. */
function resolve(doc: Json, ref: string): Json {
  let node: unknown = doc;
  for (const part of ref.replace(/^#\//, '').split('/')) node = (node as Json)[part.replace(/~1/g, '/').replace(/~0/g, '~')];
  if (node === undefined) throw new Error(`openapi.yaml: ${ref} names nothing`);
  return node as Json;
}

/** A schema with its `$ref`s inlined and its documentation keywords dropped. */
export function inline(doc: Json, schema: unknown, depth = 0): unknown {
  if (depth > 32) throw new Error('openapi.yaml: schemas nest too deep (a $ref cycle?)');
  if (Array.isArray(schema)) return schema.map((s) => inline(doc, s, depth + 1));
  if (schema === null || typeof schema !== 'object') return schema;
  const s = schema as Json;
  if (typeof s.$ref === 'string') return inline(doc, resolve(doc, s.$ref), depth + 1);
  const out: Json = {};
  for (const [k, v] of Object.entries(s)) {
    if (NOT_VALIDATION.has(k) || k.startsWith('x-')) continue;
    // under `properties` every key is a member name, not a keyword
    out[k] = k === 'properties' ? Object.fromEntries(Object.entries(v as Json).map(([name, p]) => [name, inline(doc, p, depth + 1)])) : inline(doc, v, depth + 1);
  }
  return out;
}

/**
 * A query parameter's schema as the query string carries it: an array written as one
 * comma-separated value (`style: form, explode: false`, as bbox) arrives as one text, which its
 * reader splits and checks on the sphere.
 */
function queryValueSchema(param: Json, schema: Json): Json {
  if (schema.type === 'array' && param.explode === false) return { type: 'string' };
  return schema;
}

/** The schemas of one operation of `doc` (OpenAPI 3.1), or null when the document has no such operation. */
export function operationSchemas(doc: Json, method: string, path: string): OperationSchemas | null {
  const item = (doc.paths as Record<string, Json> | undefined)?.[path];
  const op = item?.[method.toLowerCase()] as Json | undefined;
  if (item === undefined || op === undefined) return null;
  const params = [...((item.parameters as Json[] | undefined) ?? []), ...((op.parameters as Json[] | undefined) ?? [])].map((p) => (typeof p.$ref === 'string' ? resolve(doc, p.$ref) : p));
  const query: Json = {};
  const path_: Json = {};
  const required: string[] = [];
  for (const p of params) {
    const schema = inline(doc, p.schema ?? {}) as Json;
    if (p.in === 'query') query[p.name as string] = queryValueSchema(p, schema);
    if (p.in === 'path') {
      path_[p.name as string] = schema;
      required.push(p.name as string);
    }
  }
  const out: OperationSchemas = {
    operation: `${method.toUpperCase()} ${path}`,
    querystring: { type: 'object', properties: query, additionalProperties: false },
    jsonBody: false,
    queryNames: Object.keys(query),
  };
  if (required.length > 0) out.params = { type: 'object', properties: path_, required };
  const body = op.requestBody === undefined ? undefined : (typeof (op.requestBody as Json).$ref === 'string' ? resolve(doc, (op.requestBody as Json).$ref as string) : (op.requestBody as Json));
  const content = body?.content as Record<string, Json> | undefined;
  // only operations that read nothing but a JSON document; observation bodies go to the readers
  if (content !== undefined && Object.keys(content).length === 1 && content['application/json'] !== undefined) {
    out.jsonBody = true;
    out.body = inline(doc, content['application/json'].schema ?? {}) as Json;
  }
  return out;
}

/** Largest JSON document read on the main thread (dataset definitions, run overrides, keys), bytes. */
export const MAX_JSON_BODY_BYTES = 1024 * 1024;

/** A request body (raw bytes) as the JSON object it must hold; an absent or empty body is `{}`. */
export function jsonDocument(body: Uint8Array | undefined | null): Json {
  if (body === undefined || body === null || body.byteLength === 0) return {};
  if (body.byteLength > MAX_JSON_BODY_BYTES) throw new HttpProblem('body-too-large', `this endpoint reads JSON documents of at most ${MAX_JSON_BODY_BYTES} bytes`, { limit_bytes: MAX_JSON_BODY_BYTES });
  let doc: unknown;
  try {
    doc = JSON.parse(Buffer.from(body.buffer, body.byteOffset, body.byteLength).toString('utf8'));
  } catch (err) {
    throw new HttpProblem('malformed-body', `the body is not JSON: ${(err as Error).message}`);
  }
  if (doc === null || typeof doc !== 'object' || Array.isArray(doc)) throw new HttpProblem('malformed-body', 'the body must be a JSON object');
  return doc as Json;
}

const SETTINGS = new Set<string>(SETTING_NAMES);

/** Query parameters saying how far a result can be trusted: the Monte Carlo test and resampling, and the validation figures. */
const TRUST_PARAMETERS = new Set<string>([...TRUST_SETTING_NAMES, 'reference', 'validation']);

/**
 * The words of the validator that owns a query parameter, for a value its schema refused, or
 * null to word the refusal from the schema. Clustering settings are worded by the settings
 * validator and trust settings by theirs, as they are when they come from a body, a dataset or
 * the command line; a trust parameter given twice is worded from the schema ("given once").
 */
function ownerDetail(name: string, value: unknown): string | null {
  if (TRUST_PARAMETERS.has(name) && Array.isArray(value)) return null;
  try {
    if (isTrustSetting(name)) resolveTrustSettings({ [name]: value });
    else if (SETTINGS.has(name)) resolveSettings({ eps: 1, [name]: value });
    else return null;
  } catch (err) {
    if (err instanceof SettingsError && err.parameter === name) return err.message;
  }
  return null;
}

/** `/schedule/cron` → `schedule.cron`. */
function dotted(instancePath: string): string {
  return instancePath
    .split('/')
    .slice(1)
    .map((p) => p.replace(/~1/g, '/').replace(/~0/g, '~'))
    .join('.');
}

/** A refused value as sent: query values are text (a number here was coerced from it). */
const sentAs = (where: string) => (v: unknown): string => JSON.stringify(where === 'querystring' && typeof v === 'number' ? String(v) : v);

const TYPE_WORDS: Record<string, string> = { string: 'a string', object: 'an object', array: 'a list', integer: 'a whole number', number: 'a number', boolean: 'true or false', null: 'null' };

/** The words for one refused value (`name` is the parameter or member, `e` Ajv's verbose error). */
function valueDetail(name: string, e: ErrorObject, where: string): string {
  const parent = (e.parentSchema ?? {}) as Json;
  const shown = sentAs(where);
  const types = [parent.type].flat();
  if (Array.isArray(e.data) && types.includes('string') && where === 'querystring') return `${name} must be given once, got ${e.data.length} values`;
  if (types.includes('integer') && typeof parent.minimum === 'number' && typeof parent.maximum === 'number') {
    return `${name} must be a whole number from ${parent.minimum} to ${parent.maximum}, got ${shown(e.data)}`;
  }
  if (types.includes('boolean')) return `${name} must be true or false, got ${shown(e.data)}`;
  if (e.keyword === 'enum') return `${name} must be one of ${(e.schema as unknown[]).join(', ')}, got ${shown(e.data)}`;
  if (e.keyword === 'required') {
    const member = ((parent.properties ?? {}) as Record<string, Json>)[String((e.params as { missingProperty?: string }).missingProperty)];
    return `${name} is required${member?.example !== undefined ? `, for example ${JSON.stringify(member.example)}` : ''}`;
  }
  if (e.keyword === 'type') return `${name} must be ${types.map((t) => TYPE_WORDS[String(t)] ?? String(t)).join(' or ')}, got ${shown(e.data)}`;
  if (e.keyword === 'pattern') {
    const what = typeof parent.description === 'string' ? `: ${parent.description}` : '';
    return `${name} ${shown(e.data)} does not match ${String(parent.pattern)}${what}`;
  }
  if (e.keyword === 'minLength' && parent.minLength === 1) return `${name} must not be empty`;
  return `${name} ${e.message ?? 'is not valid'}, got ${shown(e.data)}`;
}

/**
 * The problem for a refusal by a route schema (Fastify's `schemaErrorFormatter`): the first of
 * Ajv's errors, in the words of the hand-written checks these schemas replaced.
 */
export function validationProblem(op: OperationSchemas, errors: ErrorObject[], where: string): HttpProblem {
  // oneOf/anyOf summaries say less than the branch errors before them
  const e = errors.find((x) => x.keyword !== 'oneOf' && x.keyword !== 'anyOf') ?? errors[0]!;
  const at = dotted(e.instancePath);
  const missing = e.keyword === 'required' ? (e.params as { missingProperty: string }).missingProperty : null;
  const name = missing !== null ? (at === '' ? missing : `${at}.${missing}`) : at;
  if (where === 'params') {
    // an id that cannot name anything is answered as the lookup would answer it
    if (name === 'id') return new HttpProblem('dataset-not-found', `there is no dataset ${JSON.stringify(e.data)}; GET /v1/datasets lists them`);
    if (name === 'keyId') return new HttpProblem('key-not-found', `there is no key ${JSON.stringify(e.data)}; GET /v1/keys lists them`);
    return new HttpProblem('invalid-parameter', valueDetail(name, e, where), { parameter: name });
  }
  if (e.keyword === 'additionalProperties') {
    const extra = (e.params as { additionalProperty: string }).additionalProperty;
    const full = at === '' ? extra : `${at}.${extra}`;
    if (where === 'querystring') {
      return new HttpProblem('invalid-parameter', `${extra}: unknown parameter; this endpoint takes ${op.queryNames.length > 0 ? op.queryNames.join(', ') : 'none'}`, { parameter: extra });
    }
    const known = Object.keys(((e.parentSchema ?? {}) as Json).properties ?? {});
    return new HttpProblem('invalid-parameter', `${full}: unknown member; ${at === '' ? 'the body' : at} has ${known.join(', ')}`, { parameter: full });
  }
  if (where === 'querystring') {
    const detail = ownerDetail(name, e.data);
    if (detail !== null) return new HttpProblem('invalid-parameter', detail, { parameter: name });
  }
  return new HttpProblem('invalid-parameter', valueDetail(name, e, where), { parameter: name === '' ? 'body' : name });
}
