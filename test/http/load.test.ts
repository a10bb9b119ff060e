import type { FastifyInstance } from 'fastify';
import { afterEach, describe, expect, it } from 'vitest';
import { expectMatchesSpec, pointsCollection, testApp } from './helper.js';

const GEOJSON = { 'content-type': 'application/geo+json' };
const body = pointsCollection(400, 11);

describe('bounded work', { timeout: 60_000 }, () => {
  let app: FastifyInstance | undefined;
  afterEach(async () => {
    await app?.close();
    app = undefined;
  });

  it('beyond workers + queue size, requests get 503 with Retry-After before their body is read', async () => {
    app = await testApp({ workers: 1, queueSize: 1, retryAfterS: 7 });
    const results = await Promise.all(
      [0, 1, 2, 3].map(() => app!.inject({ method: 'POST', url: '/v1/cluster?eps=100&layer=centres', headers: GEOJSON, payload: body })),
    );
    const statuses = results.map((r) => r.statusCode).sort();
    expect(statuses).toEqual([200, 200, 503, 503]);
    for (const res of results.filter((r) => r.statusCode === 503)) {
      expect(res.headers['retry-after']).toBe('7');
      expect(res.json().code).toBe('overloaded');
      expectMatchesSpec(res, '/v1/cluster', 'POST');
    }
    // the slots are given back: the next request is served
    const after = await app.inject({ method: 'POST', url: '/v1/cluster?eps=100&layer=centres', headers: GEOJSON, payload: body });
    expect(after.statusCode).toBe(200);
    expect((await app.inject({ method: 'GET', url: '/healthz' })).json().in_progress).toBe(0);
  });

  it('work over the time limit is stopped with 504, and the pool serves the next request', async () => {
    app = await testApp({ timeLimitMs: 1 });
    const res = await app.inject({ method: 'POST', url: '/v1/cluster?eps=100', headers: GEOJSON, payload: pointsCollection(3000, 5) });
    expect(res.statusCode).toBe(504);
    expect(res.json()).toMatchObject({ code: 'time-limit', time_limit_ms: 1 });
    expectMatchesSpec(res, '/v1/cluster', 'POST');
    await app.close();
    app = await testApp({ timeLimitMs: 60_000 });
    const next = await app.inject({ method: 'POST', url: '/v1/cluster?eps=100&layer=centres', headers: GEOJSON, payload: body });
    expect(next.statusCode).toBe(200);
  });

  it('under event-loop pressure requests are shed with 503, but /healthz still answers', async () => {
    app = await testApp({ maxEventLoopDelayMs: 1, retryAfterS: 3 });
    // hold the event loop for well over the sampling interval (1 s), as a stuck main thread would
    const until = Date.now() + 1500;
    while (Date.now() < until) {
      /* busy */
    }
    // the sampler, due during the block, runs before this timer
    await new Promise((r) => setTimeout(r, 20));
    const shed = await app.inject({ method: 'POST', url: '/v1/cluster?eps=100', headers: GEOJSON, payload: body });
    expect(shed.statusCode).toBe(503);
    expect(shed.headers['retry-after']).toBe('3');
    expect(shed.json().code).toBe('overloaded');
    expectMatchesSpec(shed, '/v1/cluster', 'POST');
    const health = await app.inject({ method: 'GET', url: '/healthz' });
    expect(health.statusCode).toBe(200);
  });
});
