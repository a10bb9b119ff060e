/**
 * Every error answer the HTTP routes give for bad parameters, ids and bodies, recorded in
 * `fixtures/error-answers.json`: status, content type, problem `type`, `code`, `detail` and
 * `parameter`. The routes' checks may move (hand-written in a handler, or a schema read from
 * openapi.yaml) but each case must keep its answer; a change of answer is a change of this file,
 * made on purpose with REGEN=1 and explained in its commit.
 */
import { readFileSync, writeFileSync } from 'node:fs';
import type { FastifyInstance } from 'fastify';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { pointsCollection, testApp } from './helper.js';

const FIXTURE = new URL('./fixtures/error-answers.json', import.meta.url);
const GEO = { 'content-type': 'application/geo+json' };
const JSON_TYPE = { 'content-type': 'application/json' };

interface Case {
  name: string;
  method: 'GET' | 'POST' | 'PATCH' | 'DELETE';
  url: string;
  headers?: Record<string, string>;
  payload?: string;
}

interface Answer {
  status: number;
  contentType: string;
  type?: string;
  code?: string;
  detail?: string;
  parameter?: string;
}

const json = (v: unknown): string => JSON.stringify(v);
const feature = (id: string, lon: number, lat: number): Record<string, unknown> => ({ type: 'Feature', id, geometry: { type: 'Point', coordinates: [lon, lat] }, properties: {} });

const CASES: Case[] = [
  // datasets
  { name: 'create: body not JSON', method: 'POST', url: '/v1/datasets', headers: JSON_TYPE, payload: '{"id":' },
  { name: 'create: body an array', method: 'POST', url: '/v1/datasets', headers: JSON_TYPE, payload: '[]' },
  { name: 'create: no id', method: 'POST', url: '/v1/datasets', headers: JSON_TYPE, payload: json({ settings: { eps: 50 } }) },
  { name: 'create: no settings', method: 'POST', url: '/v1/datasets', headers: JSON_TYPE, payload: json({ id: 'x1' }) },
  { name: 'create: unknown member', method: 'POST', url: '/v1/datasets', headers: JSON_TYPE, payload: json({ id: 'x1', settings: { eps: 50 }, colour: 'red' }) },
  { name: 'create: id a number', method: 'POST', url: '/v1/datasets', headers: JSON_TYPE, payload: json({ id: 7, settings: { eps: 50 } }) },
  { name: 'create: id with a space', method: 'POST', url: '/v1/datasets', headers: JSON_TYPE, payload: json({ id: 'a b', settings: { eps: 50 } }) },
  { name: 'create: id starting with a dot', method: 'POST', url: '/v1/datasets', headers: JSON_TYPE, payload: json({ id: '.x', settings: { eps: 50 } }) },
  { name: 'create: empty name', method: 'POST', url: '/v1/datasets', headers: JSON_TYPE, payload: json({ id: 'x1', name: ' ', settings: { eps: 50 } }) },
  { name: 'create: settings a string', method: 'POST', url: '/v1/datasets', headers: JSON_TYPE, payload: json({ id: 'x1', settings: 'eps=50' }) },
  { name: 'create: negative eps', method: 'POST', url: '/v1/datasets', headers: JSON_TYPE, payload: json({ id: 'x1', settings: { eps: -5 } }) },
  { name: 'create: unknown setting', method: 'POST', url: '/v1/datasets', headers: JSON_TYPE, payload: json({ id: 'x1', settings: { epz: 50 } }) },
  { name: 'create: min_points a fraction', method: 'POST', url: '/v1/datasets', headers: JSON_TYPE, payload: json({ id: 'x1', settings: { eps: 50, min_points: 2.5 } }) },
  { name: 'create: window not a duration', method: 'POST', url: '/v1/datasets', headers: JSON_TYPE, payload: json({ id: 'x1', settings: { eps: 50 }, window: '30 days' }) },
  { name: 'create: window a number', method: 'POST', url: '/v1/datasets', headers: JSON_TYPE, payload: json({ id: 'x1', settings: { eps: 50 }, window: 30 }) },
  { name: 'create: schedule without time zone', method: 'POST', url: '/v1/datasets', headers: JSON_TYPE, payload: json({ id: 'x1', settings: { eps: 50 }, schedule: { cron: '0 2 * * *' } }) },
  { name: 'create: schedule without cron', method: 'POST', url: '/v1/datasets', headers: JSON_TYPE, payload: json({ id: 'x1', settings: { eps: 50 }, schedule: { timezone: 'UTC' } }) },
  { name: 'create: schedule a string', method: 'POST', url: '/v1/datasets', headers: JSON_TYPE, payload: json({ id: 'x1', settings: { eps: 50 }, schedule: '0 2 * * *' }) },
  { name: 'create: schedule bad cron', method: 'POST', url: '/v1/datasets', headers: JSON_TYPE, payload: json({ id: 'x1', settings: { eps: 50 }, schedule: { cron: '61 * * * *', timezone: 'UTC' } }) },
  { name: 'create: schedule unknown zone', method: 'POST', url: '/v1/datasets', headers: JSON_TYPE, payload: json({ id: 'x1', settings: { eps: 50 }, schedule: { cron: '0 2 * * *', timezone: 'Mars/Olympus' } }) },
  { name: 'create: webhook a string', method: 'POST', url: '/v1/datasets', headers: JSON_TYPE, payload: json({ id: 'x1', settings: { eps: 50 }, webhook: 'https://example.org' }) },
  { name: 'create: webhook without secret', method: 'POST', url: '/v1/datasets', headers: JSON_TYPE, payload: json({ id: 'x1', settings: { eps: 50 }, webhook: { url: 'https://example.org/h' } }) },
  { name: 'create: webhook to loopback', method: 'POST', url: '/v1/datasets', headers: JSON_TYPE, payload: json({ id: 'x1', settings: { eps: 50 }, webhook: { url: 'http://127.0.0.1/h', secret: 's' } }) },
  { name: 'create: publish unknown member', method: 'POST', url: '/v1/datasets', headers: JSON_TYPE, payload: json({ id: 'x1', settings: { eps: 50 }, publish: { colour: 'red' } }) },
  { name: 'create: publish a string', method: 'POST', url: '/v1/datasets', headers: JSON_TYPE, payload: json({ id: 'x1', settings: { eps: 50 }, publish: 'yes' }) },
  { name: 'create: id_property empty', method: 'POST', url: '/v1/datasets', headers: JSON_TYPE, payload: json({ id: 'x1', settings: { eps: 50 }, id_property: '' }) },
  { name: 'create: id exists', method: 'POST', url: '/v1/datasets', headers: JSON_TYPE, payload: json({ id: 'd', settings: { eps: 50 } }) },
  { name: 'create: text/plain body', method: 'POST', url: '/v1/datasets', headers: { 'content-type': 'text/plain' }, payload: 'id=x1' },
  { name: 'list datasets: unknown parameter', method: 'GET', url: '/v1/datasets?colour=red' },
  { name: 'get dataset: no such dataset', method: 'GET', url: '/v1/datasets/nope' },
  { name: 'get dataset: id with a space', method: 'GET', url: '/v1/datasets/a%20b' },
  { name: 'get dataset: unknown parameter', method: 'GET', url: '/v1/datasets/d?colour=red' },
  { name: 'patch: no such dataset', method: 'PATCH', url: '/v1/datasets/nope', headers: JSON_TYPE, payload: json({ name: 'n' }) },
  { name: 'patch: change of id', method: 'PATCH', url: '/v1/datasets/d', headers: JSON_TYPE, payload: json({ id: 'other' }) },
  { name: 'patch: settings a string', method: 'PATCH', url: '/v1/datasets/d', headers: JSON_TYPE, payload: json({ settings: 'eps=5' }) },
  { name: 'patch: settings eps zero', method: 'PATCH', url: '/v1/datasets/d', headers: JSON_TYPE, payload: json({ settings: { eps: 0 } }) },
  { name: 'patch: unknown member', method: 'PATCH', url: '/v1/datasets/d', headers: JSON_TYPE, payload: json({ colour: 'red' }) },
  { name: 'patch: body not JSON', method: 'PATCH', url: '/v1/datasets/d', headers: JSON_TYPE, payload: 'nope' },
  { name: 'delete: no such dataset', method: 'DELETE', url: '/v1/datasets/nope' },
  // observations
  { name: 'post observations: unknown parameter', method: 'POST', url: '/v1/datasets/d/observations?colour=red', headers: GEO, payload: json(feature('o1', 8.5, 47.3)) },
  { name: 'post observations: replace not a flag', method: 'POST', url: '/v1/datasets/d/observations?replace=maybe', headers: GEO, payload: json(feature('o1', 8.5, 47.3)) },
  { name: 'post observations: partial not a flag', method: 'POST', url: '/v1/datasets/d/observations?partial=2', headers: GEO, payload: json(feature('o1', 8.5, 47.3)) },
  { name: 'post observations: empty lon_column', method: 'POST', url: '/v1/datasets/d/observations?lon_column=', headers: GEO, payload: json(feature('o1', 8.5, 47.3)) },
  { name: 'post observations: two lat_column', method: 'POST', url: '/v1/datasets/d/observations?lat_column=a&lat_column=b', headers: GEO, payload: json(feature('o1', 8.5, 47.3)) },
  { name: 'post observations: bad time_format', method: 'POST', url: '/v1/datasets/d/observations?time_format=QQ', headers: GEO, payload: json(feature('o1', 8.5, 47.3)) },
  { name: 'post observations: no such dataset', method: 'POST', url: '/v1/datasets/nope/observations', headers: GEO, payload: json(feature('o1', 8.5, 47.3)) },
  { name: 'post observations: empty body', method: 'POST', url: '/v1/datasets/d/observations', headers: GEO, payload: '' },
  { name: 'post observations: not JSON', method: 'POST', url: '/v1/datasets/d/observations', headers: GEO, payload: '{"type":' },
  { name: 'post observations: latitude out of range', method: 'POST', url: '/v1/datasets/d/observations', headers: GEO, payload: json(feature('o1', 8.5, 147.3)) },
  { name: 'post observations: text/plain', method: 'POST', url: '/v1/datasets/d/observations', headers: { 'content-type': 'text/plain' }, payload: 'x' },
  { name: 'post observations: conflict', method: 'POST', url: '/v1/datasets/d/observations', headers: GEO, payload: json(feature('p0', 0, 0)) },
  { name: 'list observations: unknown parameter', method: 'GET', url: '/v1/datasets/d/observations?colour=red' },
  { name: 'list observations: limit 0', method: 'GET', url: '/v1/datasets/d/observations?limit=0' },
  { name: 'list observations: limit not a number', method: 'GET', url: '/v1/datasets/d/observations?limit=ten' },
  { name: 'list observations: limit too large', method: 'GET', url: '/v1/datasets/d/observations?limit=10001' },
  { name: 'list observations: limit a fraction', method: 'GET', url: '/v1/datasets/d/observations?limit=2.5' },
  { name: 'list observations: bbox of three', method: 'GET', url: '/v1/datasets/d/observations?bbox=1,2,3' },
  { name: 'list observations: bbox south above north', method: 'GET', url: '/v1/datasets/d/observations?bbox=0,10,1,5' },
  { name: 'list observations: datetime a word', method: 'GET', url: '/v1/datasets/d/observations?datetime=yesterday' },
  { name: 'list observations: datetime open both ends', method: 'GET', url: '/v1/datasets/d/observations?datetime=../..' },
  { name: 'list observations: datetime backwards', method: 'GET', url: '/v1/datasets/d/observations?datetime=2026-02-01T00:00:00Z/2026-01-01T00:00:00Z' },
  { name: 'list observations: where without =', method: 'GET', url: '/v1/datasets/d/observations?where=kind' },
  { name: 'list observations: bad cursor', method: 'GET', url: '/v1/datasets/d/observations?cursor=zzz' },
  { name: 'list observations: no such dataset', method: 'GET', url: '/v1/datasets/nope/observations' },
  { name: 'delete observation: no such observation', method: 'DELETE', url: '/v1/datasets/d/observations/nope' },
  { name: 'delete observation: no such dataset', method: 'DELETE', url: '/v1/datasets/nope/observations/p0' },
  // runs
  { name: 'start run: body not JSON', method: 'POST', url: '/v1/datasets/d/runs', headers: JSON_TYPE, payload: '{' },
  { name: 'start run: unknown member', method: 'POST', url: '/v1/datasets/d/runs', headers: JSON_TYPE, payload: json({ eps: 5 }) },
  { name: 'start run: settings a number', method: 'POST', url: '/v1/datasets/d/runs', headers: JSON_TYPE, payload: json({ settings: 5 }) },
  { name: 'start run: negative eps', method: 'POST', url: '/v1/datasets/d/runs', headers: JSON_TYPE, payload: json({ settings: { eps: -1 } }) },
  { name: 'start run: eps in the query not a number', method: 'POST', url: '/v1/datasets/d/runs?eps=far' },
  { name: 'start run: significance_level 0', method: 'POST', url: '/v1/datasets/d/runs?significance_level=0' },
  { name: 'start run: resamples too many', method: 'POST', url: '/v1/datasets/d/runs?resamples=10000' },
  { name: 'start run: unknown query parameter', method: 'POST', url: '/v1/datasets/d/runs?colour=red' },
  { name: 'start run: no such dataset', method: 'POST', url: '/v1/datasets/nope/runs' },
  { name: 'list runs: limit 0', method: 'GET', url: '/v1/datasets/d/runs?limit=0' },
  { name: 'list runs: limit a word', method: 'GET', url: '/v1/datasets/d/runs?limit=all' },
  { name: 'list runs: bad cursor', method: 'GET', url: '/v1/datasets/d/runs?cursor=zzz' },
  { name: 'list runs: unknown parameter', method: 'GET', url: '/v1/datasets/d/runs?colour=red' },
  { name: 'list runs: no such dataset', method: 'GET', url: '/v1/datasets/nope/runs' },
  { name: 'latest run: none yet', method: 'GET', url: '/v1/datasets/empty/runs/latest' },
  { name: 'latest run: unknown parameter', method: 'GET', url: '/v1/datasets/d/runs/latest?colour=red' },
  { name: 'get run: no such run', method: 'GET', url: '/v1/datasets/d/runs/r999999' },
  { name: 'get run: not a run id', method: 'GET', url: '/v1/datasets/d/runs/xyz' },
  { name: 'get run: unknown parameter', method: 'GET', url: '/v1/datasets/d/runs/r000001?colour=red' },
  { name: 'layer: no such layer', method: 'GET', url: '/v1/datasets/d/runs/r000001/bogus' },
  { name: 'latest layer: no such layer', method: 'GET', url: '/v1/datasets/d/runs/latest/bogus' },
  { name: 'latest layer: none yet', method: 'GET', url: '/v1/datasets/empty/runs/latest/hotspots' },
  { name: 'layer: unknown parameter', method: 'GET', url: '/v1/datasets/d/runs/r000001/points?colour=red' },
  { name: 'layer: limit 0', method: 'GET', url: '/v1/datasets/d/runs/r000001/points?limit=0' },
  { name: 'layer: limit a word', method: 'GET', url: '/v1/datasets/d/runs/r000001/points?limit=all' },
  { name: 'layer: bbox of letters', method: 'GET', url: '/v1/datasets/d/runs/r000001/points?bbox=a,b,c,d' },
  { name: 'layer: datetime a word', method: 'GET', url: '/v1/datasets/d/runs/latest/points?datetime=yesterday' },
  { name: 'layer: bad cursor', method: 'GET', url: '/v1/datasets/d/runs/r000001/points?cursor=zzz' },
  { name: 'layer: no such run', method: 'GET', url: '/v1/datasets/d/runs/r999999/points' },
  { name: 'cancel: run over', method: 'POST', url: '/v1/datasets/d/runs/r000001/cancel' },
  { name: 'cancel: no such run', method: 'POST', url: '/v1/datasets/d/runs/r999999/cancel' },
  { name: 'report: unknown parameter', method: 'GET', url: '/v1/datasets/d/runs/r000001/report?colour=red' },
  { name: 'report: no such run', method: 'GET', url: '/v1/datasets/d/runs/r999999/report' },
  { name: 'dataset k-distance: unknown parameter', method: 'GET', url: '/v1/datasets/d/k-distance?colour=red' },
  { name: 'dataset k-distance: min_points 0', method: 'GET', url: '/v1/datasets/d/k-distance?min_points=0' },
  { name: 'dataset k-distance: no such dataset', method: 'GET', url: '/v1/datasets/nope/k-distance' },
  // changes and tracks
  { name: 'changes: unknown parameter', method: 'GET', url: '/v1/datasets/d/changes?colour=red' },
  { name: 'changes: format xml', method: 'GET', url: '/v1/datasets/d/changes?format=xml' },
  { name: 'changes: no such run', method: 'GET', url: '/v1/datasets/d/changes?to=r999999' },
  { name: 'changes: two from', method: 'GET', url: '/v1/datasets/d/changes?from=r000001&from=r000002' },
  { name: 'changes: first run', method: 'GET', url: '/v1/datasets/d/changes' },
  { name: 'changes: none yet', method: 'GET', url: '/v1/datasets/empty/changes' },
  { name: 'tracks: active maybe', method: 'GET', url: '/v1/datasets/d/tracks?active=maybe' },
  { name: 'tracks: two cursors', method: 'GET', url: '/v1/datasets/d/tracks?cursor=a&cursor=b' },
  { name: 'tracks: bad cursor', method: 'GET', url: '/v1/datasets/d/tracks?cursor=zzz' },
  { name: 'track: unknown parameter', method: 'GET', url: '/v1/datasets/d/tracks/t1?colour=red' },
  { name: 'track: no such track', method: 'GET', url: '/v1/datasets/d/tracks/nope' },
  // published layers
  { name: 'published: not published', method: 'GET', url: '/v1/datasets/d/runs/latest/published/hotspots' },
  { name: 'published: no such layer', method: 'GET', url: '/v1/datasets/d/runs/r000001/published/bogus' },
  { name: 'published: unknown parameter', method: 'GET', url: '/v1/datasets/d/runs/r000001/published/hotspots?colour=red' },
  // keys and audit
  { name: 'create key: unknown member', method: 'POST', url: '/v1/keys', headers: JSON_TYPE, payload: json({ role: 'reader', colour: 'red' }) },
  { name: 'create key: unknown role', method: 'POST', url: '/v1/keys', headers: JSON_TYPE, payload: json({ role: 'king' }) },
  { name: 'create key: body not JSON', method: 'POST', url: '/v1/keys', headers: JSON_TYPE, payload: 'x' },
  { name: 'revoke key: no such key', method: 'DELETE', url: '/v1/keys/k_000000000000' },
  { name: 'list keys: unknown parameter', method: 'GET', url: '/v1/keys?colour=red' },
  { name: 'audit: limit 0', method: 'GET', url: '/v1/audit?limit=0' },
  { name: 'audit: bad cursor', method: 'GET', url: '/v1/audit?cursor=zzz' },
  { name: 'audit: unknown parameter', method: 'GET', url: '/v1/audit?colour=red' },
  // clustering posted points
  { name: 'cluster: no such layer', method: 'POST', url: '/v1/cluster?eps=50&layer=bogus', headers: GEO, payload: json({ type: 'FeatureCollection', features: [] }) },
  { name: 'cluster: negative eps', method: 'POST', url: '/v1/cluster?eps=-1', headers: GEO, payload: json({ type: 'FeatureCollection', features: [] }) },
  { name: 'cluster: unknown parameter', method: 'POST', url: '/v1/cluster?eps=50&colour=red', headers: GEO, payload: json({ type: 'FeatureCollection', features: [] }) },
  { name: 'cluster: method unknown', method: 'POST', url: '/v1/cluster?eps=50&method=kmeans', headers: GEO, payload: json({ type: 'FeatureCollection', features: [] }) },
  { name: 'cluster: min_points a word', method: 'POST', url: '/v1/cluster?eps=50&min_points=few', headers: GEO, payload: json({ type: 'FeatureCollection', features: [] }) },
  // how far a result can be trusted: the Monte Carlo test, resampling and validation figures
  { name: 'cluster: significance_level 0', method: 'POST', url: '/v1/cluster?eps=50&significance_level=0', headers: GEO, payload: json({ type: 'FeatureCollection', features: [] }) },
  { name: 'cluster: significance_level 1', method: 'POST', url: '/v1/cluster?eps=50&significance_level=1', headers: GEO, payload: json({ type: 'FeatureCollection', features: [] }) },
  { name: 'cluster: significance_level a word', method: 'POST', url: '/v1/cluster?eps=50&significance_level=low', headers: GEO, payload: json({ type: 'FeatureCollection', features: [] }) },
  { name: 'cluster: resample_share 0', method: 'POST', url: '/v1/cluster?eps=50&resample_share=0', headers: GEO, payload: json({ type: 'FeatureCollection', features: [] }) },
  { name: 'cluster: resample_share above 1', method: 'POST', url: '/v1/cluster?eps=50&resample_share=1.5', headers: GEO, payload: json({ type: 'FeatureCollection', features: [] }) },
  { name: 'cluster: simulations negative', method: 'POST', url: '/v1/cluster?eps=50&simulations=-1', headers: GEO, payload: json({ type: 'FeatureCollection', features: [] }) },
  { name: 'cluster: simulations too many', method: 'POST', url: '/v1/cluster?eps=50&simulations=10000', headers: GEO, payload: json({ type: 'FeatureCollection', features: [] }) },
  { name: 'cluster: resamples a fraction', method: 'POST', url: '/v1/cluster?eps=50&resamples=2.5', headers: GEO, payload: json({ type: 'FeatureCollection', features: [] }) },
  { name: 'cluster: seed negative', method: 'POST', url: '/v1/cluster?eps=50&seed=-1', headers: GEO, payload: json({ type: 'FeatureCollection', features: [] }) },
  { name: 'cluster: null_model unknown', method: 'POST', url: '/v1/cluster?eps=50&null_model=poisson', headers: GEO, payload: json({ type: 'FeatureCollection', features: [] }) },
  { name: 'cluster: two effort_where', method: 'POST', url: '/v1/cluster?eps=50&effort_where=a%3D1&effort_where=b%3D2', headers: GEO, payload: json({ type: 'FeatureCollection', features: [] }) },
  { name: 'cluster: validation a word', method: 'POST', url: '/v1/cluster?eps=50&validation=maybe', headers: GEO, payload: json({ type: 'FeatureCollection', features: [] }) },
  { name: 'cluster: two reference', method: 'POST', url: '/v1/cluster?eps=50&reference=a&reference=b', headers: GEO, payload: json({ type: 'FeatureCollection', features: [] }) },
  { name: 'sweep: validation given', method: 'POST', url: '/v1/sweep?eps=50,100&validation=true', headers: GEO, payload: json({ type: 'FeatureCollection', features: [] }) },
  { name: 'cluster: empty body', method: 'POST', url: '/v1/cluster?eps=50', headers: GEO, payload: '' },
  { name: 'cluster: not JSON', method: 'POST', url: '/v1/cluster?eps=50', headers: GEO, payload: '{' },
  { name: 'k-distance: layer given', method: 'POST', url: '/v1/k-distance?layer=hotspots', headers: GEO, payload: json({ type: 'FeatureCollection', features: [] }) },
  // service
  { name: 'health: unknown parameter', method: 'GET', url: '/healthz?colour=red' },
  { name: 'no such path', method: 'GET', url: '/v2/nothing' },
  { name: 'no such method', method: 'DELETE', url: '/v1/datasets' },
  // OGC API – Features
  { name: 'features: unknown parameter', method: 'GET', url: '/features?colour=red' },
  { name: 'features: f xml', method: 'GET', url: '/features/collections?f=xml' },
  { name: 'features: no such collection', method: 'GET', url: '/features/collections/nope' },
  { name: 'features: no such kind', method: 'GET', url: '/features/collections/d.bogus' },
  { name: 'features items: limit 0', method: 'GET', url: '/features/collections/d.points/items?limit=0' },
  { name: 'features items: bbox of two', method: 'GET', url: '/features/collections/d.points/items?bbox=1,2' },
  { name: 'features items: other crs', method: 'GET', url: '/features/collections/d.points/items?crs=EPSG:4326' },
  { name: 'features items: unknown parameter', method: 'GET', url: '/features/collections/d.points/items?colour=red' },
  { name: 'features item: no such feature', method: 'GET', url: '/features/collections/d.observations/items/nope' },
  { name: 'features conformance: unknown parameter', method: 'GET', url: '/features/conformance?colour=red' },
  // map pages
  { name: 'map page: unknown parameter', method: 'GET', url: '/?colour=red' },
  { name: 'dataset page: unknown parameter', method: 'GET', url: '/datasets/d?colour=red' },
  { name: 'dataset page: no such dataset', method: 'GET', url: '/datasets/nope' },
];

async function answer(app: FastifyInstance, c: Case): Promise<Answer> {
  const res = await app.inject({ method: c.method, url: c.url, headers: c.headers, payload: c.payload });
  const contentType = String(res.headers['content-type'] ?? '').split(';')[0]!.trim();
  const out: Answer = { status: res.statusCode, contentType };
  if (contentType === 'application/problem+json') {
    const p = res.json() as Record<string, unknown>;
    out.type = p.type as string;
    out.code = p.code as string;
    out.detail = p.detail as string;
    if (p.parameter !== undefined) out.parameter = p.parameter as string;
  }
  return out;
}

async function untilOver(app: FastifyInstance, location: string): Promise<void> {
  for (let i = 0; i < 1500; i++) {
    const r = (await app.inject({ method: 'GET', url: location })).json() as { status: string };
    if (r.status === 'succeeded') return;
    if (r.status !== 'queued' && r.status !== 'running') throw new Error(`run ${r.status}`);
    await new Promise((resolve) => setTimeout(resolve, 20));
  }
  throw new Error('run did not finish');
}

describe('error answers', () => {
  let app: FastifyInstance;
  const got = new Map<string, Answer>();

  beforeAll(async () => {
    app = await testApp();
    const create = (id: string): Promise<unknown> =>
      app.inject({ method: 'POST', url: '/v1/datasets', headers: JSON_TYPE, payload: json({ id, settings: { eps: 60, min_points: 5 } }) });
    await create('d');
    await create('empty');
    const posted = await app.inject({ method: 'POST', url: '/v1/datasets/d/observations', headers: GEO, payload: pointsCollection(120, 5) });
    expect(posted.statusCode).toBe(200);
    const run = await app.inject({ method: 'POST', url: '/v1/datasets/d/runs' });
    expect(run.statusCode).toBe(202);
    await untilOver(app, run.headers.location as string);
    for (const c of CASES) got.set(c.name, await answer(app, c));
  }, 120_000);
  afterAll(async () => {
    await app.close();
  });

  it('has no two cases of one name', () => {
    expect(new Set(CASES.map((c) => c.name)).size).toBe(CASES.length);
  });

  it('answers every case as recorded', () => {
    const now = Object.fromEntries(CASES.map((c) => [c.name, got.get(c.name)]));
    if (process.env.REGEN === '1') {
      const lines = Object.entries(now).map(([k, v]) => `  ${JSON.stringify(k)}: ${JSON.stringify(v)}`);
      writeFileSync(FIXTURE, `{\n${lines.join(',\n')}\n}\n`);
    }
    const recorded = JSON.parse(readFileSync(FIXTURE, 'utf8')) as Record<string, Answer>;
    expect(now).toEqual(recorded);
  });

  it('answers errors as problems', () => {
    for (const c of CASES) {
      const a = got.get(c.name)!;
      if (a.status >= 400 && !(c.url.startsWith('/features') || c.url.startsWith('/datasets/'))) expect(a.contentType, c.name).toBe('application/problem+json');
    }
  });
});
