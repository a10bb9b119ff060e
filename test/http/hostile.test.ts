/**
 * Hostile but acceptable observations are stored so that every later query of them works, on
 * both stores; poison ones are refused with 422 naming the feature, and nothing of their batch is
 * stored. "Works" is checked against the rules as documented, not against the code's output:
 * listings give back every stored feature byte for byte in insertion order, and a `where`
 * condition selects exactly the observations whose property, written as text, equals the given
 * text (the rule in the header of src/storage/store.ts, applied here by `matches`).
 *
 * The hostile values: member names with dots, quotes, backslashes, a leading $, brackets, "=",
 * "__proto__", "constructor", the empty name, Cyrillic and emoji; values with line and paragraph
 * separators, a right-to-left override, control characters other than NUL, emoji with skin-tone
 * modifiers, a combining accent, numbers at the edges of a double (1e308, −0, a 20-digit
 * integer), the texts "true", "null" and "3" beside the values true, null and 3; ids that are
 * numbers, ids with "/", "%", "?", "#" and spaces, the longest allowed id (256 characters) and
 * text (65 536), and properties nested to the deepest allowed level (32).
 */
import { mkdtempSync, rmSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import type { FastifyInstance } from 'fastify';
import pg from 'pg';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { buildApp } from '../../src/http/app.js';
import { MAX_DEPTH, MAX_ID_CHARS, MAX_KEY_CHARS, MAX_STRING_CHARS } from '../../src/ingest/limits.js';
import { openStore, type StoreConfig } from '../../src/storage/index.js';
import { postgresSkipReason, TEST_DATABASE_URL } from '../reference/postgres.js';
import { expectMatchesSpec, testConfig } from './helper.js';

type Json = Record<string, unknown>;

/** `levels` objects, each inside the one before (as a feature's properties, the innermost is at level levels + 1 of the feature). */
function nested(levels: number): Json {
  let v: Json = { leaf: 'bottom' };
  for (let k = 1; k < levels; k++) v = { down: v };
  return v;
}

const deepest = { deep: nested(MAX_DEPTH - 2), plant: 'balsam', arr: [1, 'x', [2, ['y']]] };
const LONG = 'z'.repeat(MAX_STRING_CHARS);

/** [id, properties, extra members of the feature]; all within a few metres, so a run makes one hotspot of them. */
const HOSTILE: [string | number, Json | null, Json?][] = [
  [
    'a/b c%2F?#é',
    {
      plant: 'knotweed',
      'a.b': 'dot',
      'q"uote': 'it\'s "quoted"',
      'back\\slash': 'C:\\path\\',
      $dollar: '$1',
      '[0]': 'bracket',
      ключ: 'значение',
      '🔑': '🙂👍🏽',
      ['__proto__']: 'proto',
      constructor: 'ctor',
      '': 'empty name',
      line: 'a\u2028b\u2029c\n\t',
      rtl: '\u202eevil',
      n: 3,
    },
  ],
  [12345, { plant: '3', n: '3', big: 1e308, neg: -0, huge: 12345678901234567890, bool: true, nul: null, s_true: 'true', s_null: 'null' }],
  ['🙂', deepest],
  ['x'.repeat(MAX_ID_CHARS), { long: LONG, plant: 'knotweed', '🔑': 'other' }],
  [' leading space', { 'k=v': 'eq', plant: '', observed_at: '2026-05-01T00:00:00Z' }],
  ['null-props', null],
  ['ctrl\u0001\u001f', { ctrl: '\u0001\u007f', plant: 'hogweed', ['k'.repeat(MAX_KEY_CHARS)]: 'long name' }],
  ['0', { n: 3.0, plant: 'knotweed', bool: 'true', nul: 'null' }],
  ['e\u0301', { plant: 'é', s_true: true }],
  ['é', { plant: 'e\u0301', big: '1e+308' }],
  ['foreign', { plant: 'knotweed' }, { extra: { nested: '\u2028', list: [[[]]] }, bbox: [8.54, 47.37, 8.5401, 47.3701] }],
];

function hostileFeatures(): Json[] {
  return HOSTILE.map(([id, properties, extra], k) => ({
    type: 'Feature',
    id,
    geometry: { type: 'Point', coordinates: [8.54 + k * 0.00001, 47.37 + (k % 3) * 0.00001] },
    properties,
    ...(extra ?? {}),
  }));
}

/** The documented `where` rule: the property's value written as text equals the text; objects, arrays and missing properties never match. */
function matches(properties: Json | null, property: string, value: string): boolean {
  if (properties === null || !Object.hasOwn(properties, property)) return false;
  const v = properties[property];
  if (v === null) return value === 'null';
  if (typeof v === 'string') return v === value;
  if (typeof v === 'number' || typeof v === 'boolean') return JSON.stringify(v) === value || String(v) === value;
  return false;
}

/** Conditions to try: every member name with every value any feature has for it, and a few that match nothing. */
function conditions(features: Json[]): [string, string][] {
  const out: [string, string][] = [];
  const seen = new Set<string>();
  for (const f of features) {
    const p = f.properties as Json | null;
    if (p === null) continue;
    for (const key of Object.keys(p)) {
      // a condition is written property=value: names with "=" or empty cannot be asked for
      if (key === '' || key.includes('=')) continue;
      const v = p[key];
      const texts = v === null ? ['null'] : typeof v === 'object' ? ['[object Object]', '{}'] : [typeof v === 'string' ? v : JSON.stringify(v)];
      for (const t of texts) {
        const k = JSON.stringify([key, t]);
        if (!seen.has(k)) {
          seen.add(k);
          out.push([key, t]);
        }
      }
    }
  }
  out.push(['plant', 'nothing'], ['n', '3.0'], ['huge', '12345678901234567890'], ['missing', '']);
  return out;
}

interface Case {
  name: string;
  skip: string | null;
  open(): Promise<{ app: FastifyInstance; done(): Promise<void> }>;
}

const pgSkip = await postgresSkipReason();
const dir = mkdtempSync(join(tmpdir(), 'roost-hostile-'));
afterAll(() => rmSync(dir, { recursive: true, force: true }));

const CASES: Case[] = [
  {
    name: 'SQLite',
    skip: null,
    async open() {
      const config: StoreConfig = { sqlitePath: join(dir, 'hostile.db') };
      const store = await openStore(config);
      const app = await buildApp({ config: testConfig(), logger: false, store, storeConfig: config });
      await app.ready();
      return { app, done: () => app.close() };
    },
  },
  {
    name: 'PostgreSQL',
    skip: pgSkip,
    async open() {
      const schema = `roost_hostile_${process.pid}`;
      const config: StoreConfig = { databaseUrl: TEST_DATABASE_URL, pgSchema: schema };
      const store = await openStore(config);
      const app = await buildApp({ config: testConfig(), logger: false, store, storeConfig: config });
      await app.ready();
      return {
        app,
        async done() {
          await app.close();
          const c = new pg.Client({ connectionString: TEST_DATABASE_URL });
          await c.connect();
          await c.query(`DROP SCHEMA IF EXISTS ${schema} CASCADE`);
          await c.end();
        },
      };
    },
  },
];

const GEO = { 'content-type': 'application/geo+json' };

for (const c of CASES) {
  describe.skipIf(c.skip !== null)(`hostile and poison observations (${c.name})${c.skip ? ` (skipped: ${c.skip})` : ''}`, () => {
    let app: FastifyInstance;
    let done: () => Promise<void>;
    const features = hostileFeatures();
    // what the store keeps: the feature as parsed, written out again (README: stored feature text)
    const stored = features.map((f) => JSON.stringify(JSON.parse(JSON.stringify(f))));

    beforeAll(async () => {
      ({ app, done } = await c.open());
      const made = await app.inject({ method: 'POST', url: '/v1/datasets', payload: { id: 'hostile', settings: { eps: 100, min_points: 3 } } });
      expect(made.statusCode, made.body).toBe(201);
      const posted = await app.inject({ method: 'POST', url: '/v1/datasets/hostile/observations', headers: GEO, payload: JSON.stringify({ type: 'FeatureCollection', features }) });
      expect(posted.statusCode, posted.body).toBe(200);
      expect(posted.json()).toMatchObject({ stored: true, accepted: features.length, rejected: 0 });
    });
    afterAll(async () => {
      await done?.();
    });

    const list = async (query: string): Promise<string[]> => {
      const out: string[] = [];
      let url = `/v1/datasets/hostile/observations?limit=3${query}`;
      for (let guard = 0; guard < 100; guard++) {
        const res = await app.inject({ method: 'GET', url });
        expect(res.statusCode, `${url}: ${res.body}`).toBe(200);
        const doc = JSON.parse(res.body) as { features: unknown[]; links: { rel: string; href: string }[] };
        out.push(...doc.features.map((f) => JSON.stringify(f)));
        const next = doc.links.find((l) => l.rel === 'next');
        if (next === undefined) return out;
        url = next.href;
      }
      throw new Error('paging did not end');
    };

    it('lists every stored feature byte for byte, in order, page by page, by bbox and by time', async () => {
      expect(await list('')).toEqual(stored);
      expect(await list('&bbox=8.5399,47.3699,8.55,47.38')).toEqual(stored);
      expect(await list('&bbox=8.54005,47.3699,8.55,47.38')).toEqual(stored.filter((_, k) => 8.54 + k * 0.00001 >= 8.54005));
      expect(await list('&datetime=2026-04-30T00:00:00Z/2026-05-02T00:00:00Z')).toEqual([stored[4]]);
      const one = await app.inject({ method: 'GET', url: '/v1/datasets/hostile/observations?limit=1' });
      expectMatchesSpec(one, '/v1/datasets/{id}/observations', 'GET');
    });

    it('answers every where condition on every member name with exactly the observations the rule selects', { timeout: 60_000 }, async () => {
      const asked = conditions(features);
      expect(asked.length).toBeGreaterThan(30);
      for (const [property, value] of asked) {
        const expected = stored.filter((_, k) => matches(features[k]!.properties as Json | null, property, value));
        const got = await list(`&where=${encodeURIComponent(`${property}=${value.length > 200 ? value.slice(0, 200) : value}`)}`);
        if (value.length > 200) expect(got, `${property}=<long>`).toEqual([]);
        else expect(got, `${property}=${JSON.stringify(value)}`).toEqual(expected);
      }
      // two conditions together must both hold
      expect(await list(`&where=${encodeURIComponent('plant=knotweed')}&where=${encodeURIComponent('n=3')}`)).toEqual([stored[0], stored[7]]);
    });

    it('runs with where conditions on hostile names and values, and serves their layers', { timeout: 120_000 }, async () => {
      const runs: [Json, number][] = [
        [{}, features.length],
        [{ where: [{ property: 'long', value: LONG }] }, 1],
        [{ where: ['🔑=🙂👍🏽'], count_by: '🔑' }, 1],
        [{ where: ['plant=knotweed'], count_by: 'q"uote' }, 4],
        [{ where: ['back\\slash=C:\\path\\'] }, 1],
        [{ where: ['huge=12345678901234567000'] }, 1],
        [{ where: [{ property: 'line', value: 'a\u2028b\u2029c\n\t' }] }, 1],
      ];
      for (const [settings, count] of runs) {
        const asked = await app.inject({ method: 'POST', url: '/v1/datasets/hostile/runs', payload: { settings: { min_points: 1, ...settings } } });
        expect(asked.statusCode, asked.body).toBe(202);
        const id = (asked.json() as { id: string }).id;
        await app.datasets.runner.idle();
        const run = (await app.inject({ method: 'GET', url: `/v1/datasets/hostile/runs/${id}` })).json() as { status: string; error: string | null; summary: { input: { observations: number } } };
        expect(run.status, `${JSON.stringify(settings).slice(0, 100)}: ${run.error}`).toBe('succeeded');
        expect(run.summary.input.observations).toBe(count);
        for (const layer of ['hotspots', 'centres', 'noise', 'points']) {
          const res = await app.inject({ method: 'GET', url: `/v1/datasets/hostile/runs/${id}/${layer}` });
          expect(res.statusCode, `${layer}: ${res.body.slice(0, 200)}`).toBe(200);
          const doc = JSON.parse(res.body) as { features: { id?: unknown }[] };
          if (layer === 'points') expect(doc.features).toHaveLength(count);
        }
      }
      const points = JSON.parse((await app.inject({ method: 'GET', url: '/v1/datasets/hostile/runs/latest/points' })).body) as { features: { properties: Json }[] };
      expect(points.features[0]!.properties.line).toBe('a\u2028b\u2029c\n\t');
    });

    it('refuses poison observations with 422 naming the feature and the fault, storing nothing of the batch', { timeout: 60_000 }, async () => {
      const good = (id: string, properties: Json | null = {}): Json => ({ type: 'Feature', id, geometry: { type: 'Point', coordinates: [8.6, 47.4] }, properties });
      const poison: [string, Json, string][] = [
        ['nesting one level too deep', good('p1', nested(MAX_DEPTH)), 'too-deep'],

        ['a NUL in a value', good('p3', { plant: 'knot\u0000weed' }), 'bad-text'],
        ['a lone surrogate in a value', good('p4', { plant: '\udc00' }), 'bad-text'],
        ['a NUL in a nested value', good('p5', { a: [{ b: 'x\u0000' }] }), 'bad-text'],
        ['a NUL in a foreign member', { ...good('p6'), extra: 'x\u0000' }, 'bad-text'],
        ['a NUL in a member name', good('p7', { 'pla\u0000nt': 'x' }), 'bad-property-name'],
        ['a lone surrogate in a member name', good('p8', { '\ud800': 'x' }), 'bad-property-name'],
        ['a member name too long', good('p9', { ['k'.repeat(MAX_KEY_CHARS + 1)]: 'x' }), 'bad-property-name'],
        ['a NUL in the id', good('p\u0000'), 'bad-id'],
        ['a lone surrogate in the id', good('p\udfff'), 'bad-id'],
        ['an id too long', good('x'.repeat(MAX_ID_CHARS + 1)), 'bad-id'],
        ['a text too long', good('p10', { long: LONG + 'z' }), 'text-too-long'],
      ];
      const before = (await app.inject({ method: 'GET', url: '/v1/datasets/hostile' })).json() as { observations: number };
      // (written as text: a value this deep cannot be written out by JSON.stringify at all)
      const veryDeep = JSON.stringify(good('p2')).replace('"properties":{}', `"properties":${'{"a":'.repeat(5000)}1${'}'.repeat(5000)}`);
      const texts: [string, string, string][] = [...poison.map(([what, f, code]): [string, string, string] => [what, JSON.stringify(f), code]), ['nesting 5 000 levels deep', veryDeep, 'too-deep']];
      for (const [what, f, code] of texts) {
        const batch = `{"type":"FeatureCollection","features":[${JSON.stringify(good('fine-1'))},${f},${JSON.stringify(good('fine-2'))}]}`;
        const res = await app.inject({ method: 'POST', url: '/v1/datasets/hostile/observations', headers: GEO, payload: batch });
        expect(res.statusCode, `${what}: ${res.body.slice(0, 300)}`).toBe(422);
        expectMatchesSpec(res, '/v1/datasets/{id}/observations', 'POST');
        const body = res.json() as { problems: { index: number; code: string; message: string }[] };
        expect(body.problems, what).toHaveLength(1);
        expect(body.problems[0], what).toMatchObject({ index: 1, code });
        expect(body.problems[0]!.message, what).toMatch(/^feature 1\b/);
      }
      // a CSV cell with a NUL, in a text sequence record
      const csv = await app.inject({ method: 'POST', url: '/v1/datasets/hostile/observations', headers: { 'content-type': 'text/csv' }, payload: 'id,lon,lat,plant\nc1,8.6,47.4,ok\nc2,8.6,47.4,bad\u0000\n' });
      expect(csv.statusCode, csv.body).toBe(422);
      expect((csv.json() as { problems: { index: number; code: string }[] }).problems[0]).toMatchObject({ index: 1, code: 'bad-text' });
      const seq = await app.inject({ method: 'POST', url: '/v1/datasets/hostile/observations', headers: { 'content-type': 'application/geo+json-seq' }, payload: `${JSON.stringify(good('s1'))}\n${JSON.stringify(good('s2', { ['a\u0000']: 1 }))}\n` });
      expect(seq.statusCode, seq.body).toBe(422);
      expect((seq.json() as { problems: { index: number; code: string }[] }).problems[0]).toMatchObject({ index: 1, code: 'bad-property-name' });
      // with partial=true the good ones are stored and the poison one reported
      const partial = await app.inject({ method: 'POST', url: '/v1/datasets/hostile/observations?partial=true', headers: GEO, payload: JSON.stringify({ type: 'FeatureCollection', features: [good('part-1'), good('part-2', { a: 'x\u0000' })] }) });
      expect(partial.statusCode, partial.body).toBe(200);
      expect(partial.json()).toMatchObject({ accepted: 1, rejected: 1, rejections: [{ index: 1, id: 'part-2', code: 'bad-text' }] });
      const after = (await app.inject({ method: 'GET', url: '/v1/datasets/hostile' })).json() as { observations: number };
      expect(after.observations).toBe(before.observations + 1);
      expect((await list('')).slice(0, stored.length)).toEqual(stored);
    });

    it('answers ids and conditions no store can hold with a problem, not a failure', async () => {
      const asks: [string, string, number][] = [
        ['GET', '/v1/datasets/%00', 404],
        ['GET', '/v1/datasets/%00/observations', 404],
        ['DELETE', '/v1/datasets/%00', 404],
        ['GET', '/v1/datasets/.', 404],
        ['DELETE', '/v1/datasets/hostile/observations/p%00', 404],
        ['GET', '/v1/datasets/hostile/tracks/t%00', 404],
        ['GET', `/v1/datasets/hostile/observations?where=${encodeURIComponent('plant=a\u0000')}`, 400],
        ['GET', `/v1/datasets/hostile/observations?where=${encodeURIComponent('a\u0000=b')}`, 400],
      ];
      for (const [method, url, status] of asks) {
        const res = await app.inject({ method: method as 'GET', url });
        expect(res.statusCode, `${method} ${url}: ${res.body}`).toBe(status);
        expect(res.headers['content-type']).toMatch(/^application\/problem\+json/);
      }
      for (const id of ['.', '..', '_hidden', '-x', '~x']) {
        const res = await app.inject({ method: 'POST', url: '/v1/datasets', payload: { id, settings: { eps: 50 } } });
        expect(res.statusCode, `${id}: ${res.body}`).toBe(400);
        expect(res.body).toMatch(/starting with a letter or digit/);
      }
      const named = await app.inject({ method: 'POST', url: '/v1/datasets', payload: { id: 'nul-name', name: 'a\u0000b', settings: { eps: 50 } } });
      expect(named.statusCode, named.body).toBe(400);
      const setting = await app.inject({ method: 'POST', url: '/v1/datasets', payload: { id: 'nul-setting', settings: { eps: 50, count_by: 'a\u0000' } } });
      expect(setting.statusCode, setting.body).toBe(400);
      const run = await app.inject({ method: 'POST', url: '/v1/datasets/hostile/runs', payload: { settings: { where: ['plant=\u0000'] } } });
      expect(run.statusCode, run.body).toBe(400);
    });
  });
}
