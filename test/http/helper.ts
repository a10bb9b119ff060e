/**
 * Shared test plumbing: an app with a small worker pool, and response checks against the
 * schemas of openapi.yaml (the contract), compiled with ajv for JSON Schema 2020-12, which
 * OpenAPI 3.1 schemas are.
 */
import { readFileSync } from 'node:fs';
import type { FastifyInstance, LightMyRequestResponse } from 'fastify';
import { Ajv2020 } from 'ajv/dist/2020.js';
import addFormatsModule from 'ajv-formats';
import { parse } from 'yaml';
import { expect } from 'vitest';
import { buildApp, OPENAPI_PATH } from '../../src/http/app.js';
import { resolveConfig, type ServerConfig } from '../../src/http/config.js';
import { rng } from '../reference/seeded.js';

/** A test configuration: one worker, no load shedding by event-loop delay (tests block the loop), no rate limit (tests poll; test/http/edge.test.ts sets one). */
export function testConfig(overrides: Partial<Record<keyof ServerConfig, unknown>> = {}): ServerConfig {
  return resolveConfig({ workers: 1, queueSize: 4, maxEventLoopDelayMs: 0, logLevel: 'silent', dbPath: ':memory:', rateLimitPerMinute: 0, ...overrides }, {});
}

export async function testApp(overrides: Partial<Record<keyof ServerConfig, unknown>> = {}): Promise<FastifyInstance> {
  const app = await buildApp({ config: testConfig(overrides), logger: false });
  await app.ready();
  return app;
}

type Json = Record<string, unknown>;

/** The parsed contract. */
export const spec = parse(readFileSync(OPENAPI_PATH, 'utf8')) as Json & {
  paths: Record<string, Record<string, Json>>;
  components: { schemas: Record<string, Json>; responses: Record<string, Json> };
};

const addFormats = addFormatsModule as unknown as (ajv: Ajv2020) => Ajv2020;
const ajv = new Ajv2020({ strict: false, allErrors: true });
addFormats(ajv);
ajv.addSchema(spec as object, 'openapi');

const pointer = (...parts: string[]): string => '#/' + parts.map((p) => p.replace(/~/g, '~0').replace(/\//g, '~1')).join('/');

function deref(obj: Json): Json {
  const ref = obj.$ref;
  if (typeof ref !== 'string') return obj;
  const parts = ref.replace(/^#\//, '').split('/');
  let node: unknown = spec;
  for (const p of parts) node = (node as Json)[p.replace(/~1/g, '/').replace(/~0/g, '~')];
  return node as Json;
}

/** The `$ref` (into openapi.yaml) of the schema for one response, or undefined when the spec has none. */
export function responseSchemaRef(path: string, method: string, status: number, mediaType: string): string | undefined {
  const op = spec.paths[path]?.[method.toLowerCase()];
  if (!op) return undefined;
  const responses = op.responses as Record<string, Json>;
  const entry = responses[String(status)];
  if (!entry) return undefined;
  const response = deref(entry);
  const content = response.content as Record<string, Json> | undefined;
  if (!content?.[mediaType]) return undefined;
  // point at the schema where it is written, so ajv resolves its own $refs within the document
  if (typeof entry.$ref === 'string') {
    return 'openapi' + entry.$ref + pointer('content', mediaType, 'schema').slice(1);
  }
  return 'openapi' + pointer('paths', path, method.toLowerCase(), 'responses', String(status), 'content', mediaType, 'schema');
}

/** Validates `value` against the schema at `ref` ("openapi#/…"); returns ajv's errors text or ''. */
export function schemaErrors(ref: string, value: unknown): string {
  const validate = ajv.getSchema(ref) ?? ajv.compile({ $ref: ref });
  return validate(value) ? '' : ajv.errorsText(validate.errors);
}

/** The media type of a response without parameters. */
export function mediaTypeOf(res: LightMyRequestResponse): string {
  return String(res.headers['content-type'] ?? '').split(';')[0]!.trim();
}

/**
 * Asserts that a response is documented in the spec for this path and method and that its
 * body validates against the documented schema. Errors must be problem+json.
 * Unknown paths are checked against the not-found problem schema.
 */
export function expectMatchesSpec(res: LightMyRequestResponse, path: string, method: string): void {
  const type = mediaTypeOf(res);
  if (res.statusCode >= 400) expect(type, res.body).toBe('application/problem+json');
  let ref = responseSchemaRef(path, method, res.statusCode, type);
  if (!ref && res.statusCode === 404) ref = 'openapi#/components/schemas/NotFoundProblem';
  expect(ref, `${method} ${path} ${res.statusCode} ${type} is not in openapi.yaml`).toBeDefined();
  if (type.endsWith('json')) {
    const body: unknown = JSON.parse(res.body);
    expect(schemaErrors(ref!, body), res.body.slice(0, 500)).toBe('');
    if (res.statusCode >= 400) {
      expect((body as Json).status).toBe(res.statusCode);
      expect((body as Json).request_id).toBe(res.headers['x-request-id']);
    }
  }
}

/** A seeded pseudo-random generator for reproducible test data (mulberry32, see test/reference/seeded.ts). */
export function seeded(seed: number): () => number {
  return rng(seed).next;
}

/**
 * A seeded FeatureCollection: `groups` tight groups of points (about 50 m across) plus scattered
 * points, near the given centre, with ids and observed_at times.
 */
export function pointsCollection(n: number, seed = 1, centre: [number, number] = [8.54, 47.37]): string {
  const rnd = seeded(seed);
  const features: string[] = [];
  for (let i = 0; i < n; i++) {
    const inGroup = i % 4 !== 3;
    const g = i % 5;
    const spread = inGroup ? 0.0005 : 0.05;
    const lon = centre[0] + (inGroup ? g * 0.01 : 0) + (rnd() - 0.5) * spread;
    const lat = centre[1] + (inGroup ? g * 0.01 : 0) + (rnd() - 0.5) * spread;
    const day = 1 + Math.floor(rnd() * 28);
    features.push(
      JSON.stringify({
        type: 'Feature',
        id: `p${i}`,
        geometry: { type: 'Point', coordinates: [Number(lon.toFixed(7)), Number(lat.toFixed(7))] },
        properties: { observed_at: `2026-04-${String(day).padStart(2, '0')}T12:00:00Z`, count: 1 + (i % 3), kind: i % 2 ? 'a' : 'b' },
      }),
    );
  }
  return `{"type":"FeatureCollection","features":[\n${features.join(',\n')}\n]}`;
}
