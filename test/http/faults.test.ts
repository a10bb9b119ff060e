/**
 * Fault injection on a listening service (not timed; every wait is on an event or a poll with a
 * bound): clients that go away free what they held, slow senders are cut with 408 and free theirs,
 * and the framework's own refusals are problems like every other error.
 */
import { request as httpRequest, type ClientRequest } from 'node:http';
import { mkdtempSync, rmSync } from 'node:fs';
import { connect, type Socket } from 'node:net';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import Database from 'better-sqlite3';
import type { FastifyInstance } from 'fastify';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { buildApp } from '../../src/http/app.js';
import { openSqliteStore } from '../../src/storage/sqlite.js';
import { pointsCollection, testApp, testConfig } from './helper.js';

interface Health {
  in_progress: number;
  uploading: number;
  queued: number;
}

/** Polls /healthz until `done` holds (every 20 ms, at most `withinMs`). */
async function healthUntil(base: string, done: (h: Health) => boolean, withinMs = 60_000): Promise<Health> {
  const end = Date.now() + withinMs;
  for (;;) {
    const h = (await (await fetch(`${base}/healthz`)).json()) as Health;
    if (done(h)) return h;
    if (Date.now() > end) throw new Error(`healthz still ${JSON.stringify(h)}`);
    await new Promise((r) => setTimeout(r, 20));
  }
}

/** Sends the whole body, then destroys the connection as soon as it is flushed (before any answer). */
function postAndVanish(base: string, path: string, body: Buffer): Promise<void> {
  return new Promise((resolve) => {
    const u = new URL(path, base);
    const req: ClientRequest = httpRequest({ host: u.hostname, port: u.port, path: u.pathname + u.search, method: 'POST', headers: { 'content-type': 'application/geo+json', 'content-length': body.length } });
    req.on('error', () => resolve());
    req.on('response', (res) => {
      res.resume();
      resolve();
    });
    req.on('close', () => resolve());
    req.end(body, () => req.destroy());
  });
}

/** Opens a connection, sends the head and `first` bytes of a body declared `declared` bytes long, then nothing. */
function slowSender(base: string, path: string, declared: number, first: string): Promise<{ socket: Socket; answer: Promise<string> }> {
  return new Promise((resolve, reject) => {
    const u = new URL(base);
    const socket = connect(Number(u.port), u.hostname, () => {
      socket.write(`POST ${path} HTTP/1.1\r\nHost: ${u.host}\r\nContent-Type: application/geo+json\r\nContent-Length: ${declared}\r\n\r\n${first}`);
      let text = '';
      const answer = new Promise<string>((res) => {
        socket.on('data', (d: Buffer) => (text += d.toString()));
        socket.on('close', () => res(text));
        socket.on('error', () => res(text));
      });
      resolve({ socket, answer });
    });
    socket.on('error', reject);
  });
}

describe('faults on a listening service', () => {
  let app: FastifyInstance;
  let base: string;
  beforeAll(async () => {
    app = await testApp({ workers: 1, queueSize: 2, uploadTimeoutMs: 1500, uploads: 4 });
    base = await app.listen({ port: 0, host: '127.0.0.1' });
  });
  afterAll(async () => {
    await app.close();
  });

  it('100 clustering requests whose clients vanish before the answer leave no slot taken; the next request is answered', { timeout: 240_000 }, async () => {
    const body = Buffer.from(pointsCollection(3000, 7));
    for (let i = 0; i < 100; i++) await postAndVanish(base, `/v1/cluster?eps=60&min_points=5${i % 2 ? '' : '&layer=centres'}`, body);
    const h = await healthUntil(base, (x) => x.in_progress === 0 && x.queued === 0 && x.uploading === 0);
    expect(h).toMatchObject({ in_progress: 0, queued: 0, uploading: 0 });
    const ok = await fetch(`${base}/v1/cluster?eps=60&min_points=5&layer=centres`, { method: 'POST', headers: { 'content-type': 'application/geo+json' }, body });
    expect(ok.status, await ok.clone().text()).toBe(200);
    expect(((await ok.json()) as { features: unknown[] }).features.length).toBeGreaterThan(0);
  });

  it('slow senders are cut with 408 problem+json at the upload time limit, free their upload slots, and others are served meanwhile', { timeout: 120_000 }, async () => {
    const senders = await Promise.all([
      slowSender(base, '/v1/cluster?eps=60', 1_000_000, '{"type":"FeatureCollection","features":['),
      slowSender(base, '/v1/k-distance', 1_000_000, '{"type":"Feat'),
      slowSender(base, '/v1/datasets/none/observations', 1_000_000, '{'),
    ]);
    // while they dawdle, they hold upload slots only: clustering is served
    const during = await healthUntil(base, (x) => x.uploading >= 3);
    expect(during.in_progress).toBe(0);
    const ok = await fetch(`${base}/v1/cluster?eps=60&min_points=5&layer=centres`, { method: 'POST', headers: { 'content-type': 'application/geo+json' }, body: pointsCollection(200, 3) });
    expect(ok.status).toBe(200);
    for (const s of senders) {
      const answer = await s.answer;
      expect(answer).toMatch(/^HTTP\/1\.1 408 /);
      expect(answer).toMatch(/content-type: application\/problem\+json/i);
      expect(answer).toMatch(/"code":"request-timeout"/);
    }
    expect(await healthUntil(base, (x) => x.uploading === 0 && x.in_progress === 0)).toMatchObject({ uploading: 0, in_progress: 0 });
  });

  it('more uploads at once than allowed are turned away with 503 and Retry-After before their body is read', { timeout: 120_000 }, async () => {
    const senders = await Promise.all(Array.from({ length: 4 }, () => slowSender(base, '/v1/cluster?eps=60', 1_000_000, '{')));
    await healthUntil(base, (x) => x.uploading === 4);
    const turned = await fetch(`${base}/v1/cluster?eps=60`, { method: 'POST', headers: { 'content-type': 'application/geo+json' }, body: pointsCollection(10, 3) });
    expect(turned.status).toBe(503);
    expect(turned.headers.get('retry-after')).not.toBeNull();
    expect(turned.headers.get('content-type')).toMatch(/^application\/problem\+json/);
    for (const s of senders) s.socket.destroy();
    await healthUntil(base, (x) => x.uploading === 0);
    const after = await fetch(`${base}/v1/cluster?eps=60&min_points=5&layer=centres`, { method: 'POST', headers: { 'content-type': 'application/geo+json' }, body: pointsCollection(10, 3) });
    expect(after.status).toBe(200);
  });

  it('answers bad percent-encoding and over-long path segments as problems', async () => {
    for (const [path, status, code] of [
      ['/v1/datasets/%zz', 400, 'bad-request'],
      ['/v1/datasets/%c0%ae', 400, 'bad-request'],
      [`/v1/datasets/${'a'.repeat(10_000)}`, 414, 'uri-too-long'],
    ] as const) {
      const res = await fetch(base + path);
      expect(res.status, path.slice(0, 40)).toBe(status);
      expect(res.headers.get('content-type')).toMatch(/^application\/problem\+json/);
      const body = (await res.json()) as { code: string; request_id: string };
      expect(body.code).toBe(code);
      expect(body.request_id).toBe(res.headers.get('x-request-id'));
    }
  });
});

describe('bounds on what one client can hold', () => {
  const GEO = { 'content-type': 'application/geo+json' };

  it('an observation post over the feature cap is a 413 saying the cap; at the cap it is stored', async () => {
    const app = await testApp({ maxPostFeatures: 3 });
    try {
      await app.inject({ method: 'POST', url: '/v1/datasets', payload: { id: 'capped', settings: { eps: 50 } } });
      const over = await app.inject({ method: 'POST', url: '/v1/datasets/capped/observations', headers: GEO, payload: pointsCollection(4, 2) });
      expect(over.statusCode, over.body).toBe(413);
      expect(over.json()).toMatchObject({ code: 'body-too-large' });
      expect(over.json().detail).toMatch(/at most 3/);
      const at = await app.inject({ method: 'POST', url: '/v1/datasets/capped/observations', headers: GEO, payload: pointsCollection(3, 2) });
      expect(at.json()).toMatchObject({ stored: true, accepted: 3 });
    } finally {
      await app.close();
    }
  });

  it('runs asked for beyond the queue bound are a 503 with Retry-After; nothing is queued for them', async () => {
    const app = await testApp({ maxQueuedRuns: 2 });
    try {
      // no run is taken from the queue: what is asked for stays queued
      await app.datasets.runner.close();
      await app.inject({ method: 'POST', url: '/v1/datasets', payload: { id: 'busy', settings: { eps: 50 } } });
      for (let i = 0; i < 2; i++) expect((await app.inject({ method: 'POST', url: '/v1/datasets/busy/runs' })).statusCode).toBe(202);
      const third = await app.inject({ method: 'POST', url: '/v1/datasets/busy/runs' });
      expect(third.statusCode, third.body).toBe(503);
      expect(third.headers['retry-after']).toBeDefined();
      expect(third.json()).toMatchObject({ code: 'overloaded' });
      expect(await app.datasets.store.countRuns('queued')).toBe(2);
    } finally {
      await app.close();
    }
  });

  it('layer GETs beyond the stream bound are a 503 while the others are sent, and free their place when done', async () => {
    const real = openSqliteStore({ path: ':memory:' });
    await real.migrate();
    await real.createDataset({ id: 'lay', name: 'lay', settings: { eps: 50 }, idProperty: null, window: null, schedule: null, webhook: null });
    const made = await real.createRun({ datasetId: 'lay', settings: { eps: 50 }, trigger: 'request' });
    const run = (await real.claimNextRun('w'))!;
    expect(run.id).toBe(made.id);
    const layer = '{"type":"FeatureCollection","features":[]}';
    await real.saveRunResult(run.id, { layers: { hotspots: layer, centres: layer, noise: layer, points: layer }, hotspots: [] });
    await real.updateRun(run.id, { status: 'succeeded', progress: 100 });
    let open!: () => void;
    const gate = new Promise<void>((r) => (open = r));
    let entered!: () => void;
    const inside = new Promise<void>((r) => (entered = r));
    let held = true;
    // the first layer read waits at the gate: its stream stays open until the test opens it
    const store = new Proxy(real, {
      get(target, key, receiver) {
        if (key === 'getRunLayerBytes') {
          return async (...args: Parameters<typeof real.getRunLayerBytes>) => {
            const pieces = await target.getRunLayerBytes(...args);
            const wait = held;
            held = false;
            entered();
            return (async function* () {
              if (wait) await gate;
              for await (const p of pieces!) yield p;
            })();
          };
        }
        const v = Reflect.get(target, key, receiver) as unknown;
        return typeof v === 'function' ? (v as (...a: unknown[]) => unknown).bind(target) : v;
      },
    });
    const app = await buildApp({ config: testConfig({ layerStreams: 1 }), logger: false, store });
    await app.ready();
    try {
      const first = app.inject({ method: 'GET', url: `/v1/datasets/lay/runs/${run.id}/hotspots` });
      await inside;
      const second = await app.inject({ method: 'GET', url: `/v1/datasets/lay/runs/${run.id}/centres` });
      expect(second.statusCode, second.body).toBe(503);
      expect(second.headers['retry-after']).toBeDefined();
      open();
      expect((await first).statusCode).toBe(200);
      const third = await app.inject({ method: 'GET', url: `/v1/datasets/lay/runs/${run.id}/centres` });
      expect(third.statusCode).toBe(200);
      expect(third.body).toBe(layer);
    } finally {
      await app.close();
    }
  });

  it('a database held by another process past the wait is a 503 overloaded with Retry-After, and the same request succeeds once it is free', async () => {
    const dir = mkdtempSync(join(tmpdir(), 'roost-busy-'));
    const path = join(dir, 'roost.db');
    const store = openSqliteStore({ path, busyTimeoutMs: 40 });
    await store.migrate();
    const other = new Database(path);
    const app = await buildApp({ config: testConfig(), logger: false, store });
    await app.ready();
    const create = () => app.inject({ method: 'POST', url: '/v1/datasets', headers: { 'content-type': 'application/json' }, payload: JSON.stringify({ id: 'held', name: 'held', settings: { eps: 50 } }) });
    try {
      // another connection to the same file takes the write lock and keeps it
      other.exec('BEGIN IMMEDIATE');
      const refused = await create();
      expect(refused.statusCode, refused.body).toBe(503);
      expect(refused.headers['content-type']).toContain('application/problem+json');
      expect(refused.headers['retry-after']).toBeDefined();
      expect(refused.json().code).toBe('overloaded');
      expect(refused.json().detail).toMatch(/database was held by other work/);
      other.exec('ROLLBACK');
      const created = await create();
      expect(created.statusCode, created.body).toBe(201);
    } finally {
      if (other.inTransaction) other.exec('ROLLBACK');
      other.close();
      await app.close();
      rmSync(dir, { recursive: true, force: true });
    }
  });
});
