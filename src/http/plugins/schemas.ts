/**
 * Route schemas from openapi.yaml (see ../schemas.ts), read once at start-up: every route added
 * after this plugin gets its operation's `querystring`, `params` and JSON `body` schemas and a
 * formatter that answers refusals as problems. Routes the document does not list, and those that
 * keep their own rules (the OGC API at /features, the map pages, the documentation), get none.
 */
import type { FastifyInstance, FastifyRequest, RouteOptions } from 'fastify';
import fp from 'fastify-plugin';
import { Ajv2020, type ValidateFunction } from 'ajv/dist/2020.js';
import addFormatsModule from 'ajv-formats';
import { loadContract } from '../contract.js';
import { jsonDocument, operationSchemas, validationProblem, type OperationSchemas } from '../schemas.js';

const addFormats = addFormatsModule as unknown as (ajv: Ajv2020) => Ajv2020;

/**
 * The validators: OpenAPI 3.1 schemas are JSON Schema 2020-12. Query strings and paths arrive as
 * text and are coerced to the types the document names (a lone value to a one-item array);
 * JSON bodies are taken as they are. A value the schema refuses is an answer, never dropped
 * (removeAdditional), and defaults stay the handlers' (useDefaults), so a handler sees what was
 * sent. `verbose` keeps the refused value for the message.
 */
function validators(): (part: string, schema: object) => ValidateFunction {
  const options = { removeAdditional: false, useDefaults: false, allErrors: false, verbose: true, strict: false } as const;
  const text = addFormats(new Ajv2020({ ...options, coerceTypes: 'array' }));
  const json = addFormats(new Ajv2020({ ...options, coerceTypes: false }));
  // many routes share a schema (the dataset id, limit and cursor): each is compiled once
  const compiled = new Map<string, ValidateFunction>();
  return (part, schema) => {
    const key = `${part === 'body' ? 'json' : 'text'} ${JSON.stringify(schema)}`;
    let fn = compiled.get(key);
    if (fn === undefined) {
      fn = (part === 'body' ? json : text).compile(schema);
      compiled.set(key, fn);
    }
    return fn;
  };
}

/** Route prefixes whose query strings follow rules of their own (OGC API – Features, pages, documentation). */
const OWN_RULES = ['/features', '/docs', '/assets', '/datasets/'];

function ownRules(url: string): boolean {
  return url === '/' || OWN_RULES.some((p) => url.startsWith(p));
}

/** `/v1/datasets/:id` → `/v1/datasets/{id}` (the document's form). */
function openapiPath(url: string): string {
  return url.replace(/:([A-Za-z0-9_]+)/g, '{$1}');
}

/**
 * Checks the path and the query string as soon as the request arrives, before its body is read
 * (a typo costs no upload, and a path id that names nothing answers before the body is looked
 * at), with the route's own compiled schemas; Fastify's validation step checks them again at no
 * cost, as they are then already coerced.
 */
function checkEarly(op: OperationSchemas) {
  return async (request: FastifyRequest): Promise<void> => {
    for (const part of ['params', 'querystring'] as const) {
      const check = request.getValidationFunction(part);
      const value = part === 'params' ? request.params : request.query;
      if (check !== undefined && !check(value)) throw validationProblem(op, (check.errors ?? []) as Parameters<typeof validationProblem>[1], part);
    }
  };
}

/** Reads the JSON document a route takes into `request.body` before it is validated. */
async function parseJsonBody(request: FastifyRequest): Promise<void> {
  request.body = jsonDocument(request.body as Uint8Array | undefined);
}

function applySchemas(route: RouteOptions, op: OperationSchemas, compile: (part: string, schema: object) => ValidateFunction): void {
  const schema = { ...(route.schema ?? {}) } as Record<string, unknown>;
  schema.querystring ??= op.querystring;
  if (op.params !== undefined) schema.params ??= op.params;
  if (op.body !== undefined) schema.body ??= op.body;
  route.schema = schema;
  // compiled now, as the route is added: start-up work, done before the load shedding starts
  // measuring the event loop (it is registered last)
  const ready: Record<string, ValidateFunction> = {};
  for (const part of ['params', 'querystring', 'body'] as const) if (schema[part] !== undefined) ready[part] = compile(part, schema[part] as object);
  route.validatorCompiler = ({ schema: s, httpPart }) => ready[httpPart ?? ''] ?? compile(httpPart ?? '', s);
  route.schemaErrorFormatter = (errors, where) => validationProblem(op, errors as Parameters<typeof validationProblem>[1], where);
  route.onRequest = [checkEarly(op), ...[route.onRequest ?? []].flat()];
  if (op.jsonBody) route.preValidation = [parseJsonBody, ...[route.preValidation ?? []].flat()];
}

async function schemas(app: FastifyInstance): Promise<void> {
  const doc = loadContract();
  const compile = validators();
  app.addHook('onRoute', (route) => {
    const url = route.url ?? route.path;
    if (url === undefined || ownRules(url)) return;
    for (const m of [route.method].flat()) {
      const method = m === 'HEAD' ? 'GET' : m;
      const op = operationSchemas(doc, method, openapiPath(url));
      if (op !== null) {
        applySchemas(route, op, compile);
        return;
      }
    }
  });
}

export default fp(schemas, { name: 'roost-schemas', fastify: '5.x' });
