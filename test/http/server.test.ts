import { spawn } from 'node:child_process';
import { existsSync } from 'node:fs';
import { connect } from 'node:net';
import { fileURLToPath } from 'node:url';
import { describe, expect, it } from 'vitest';
import { startServer } from '../../src/http/server.js';
import { isCi } from '../reference/postgres.js';
import { pointsCollection, testConfig } from './helper.js';

const ROOT = fileURLToPath(new URL('../../', import.meta.url));

/** Writes raw bytes on one connection, then `more` after `afterFirst` resolves; returns all bytes read until the server closes. */
function rawExchange(port: number, first: string, afterFirst?: () => Promise<void>, more?: string): Promise<string> {
  return new Promise((resolve, reject) => {
    const socket = connect(port, '127.0.0.1');
    let text = '';
    socket.setEncoding('utf8');
    socket.on('data', (d: string) => (text += d));
    socket.on('end', () => resolve(text));
    socket.on('error', reject);
    socket.write(first, () => {
      if (afterFirst) void afterFirst().then(() => socket.write(more ?? ''));
    });
  });
}

describe('the listener', { timeout: 60_000 }, () => {
  it('serves over HTTP on 127.0.0.1 and answers unparseable HTTP with a problem', async () => {
    const server = await startServer(testConfig({ port: 0 }), { handleSignals: false });
    try {
      expect(server.url).toMatch(/^http:\/\/127\.0\.0\.1:\d+$/);
      const res = await fetch(`${server.url}/healthz`);
      expect(res.status).toBe(200);
      expect(await res.json()).toMatchObject({ status: 'ok' });
      const port = Number(new URL(server.url).port);
      const reply = await rawExchange(port, 'POST /v1/cluster HTTP/1.1\r\nHost: 127.0.0.1\r\nContent-Length: twelve\r\n\r\n');
      expect(reply).toMatch(/^HTTP\/1\.1 400 /);
      expect(reply).toContain('application/problem+json');
      const body = JSON.parse(reply.slice(reply.indexOf('\r\n\r\n') + 4));
      expect(body).toMatchObject({ code: 'bad-request', status: 400 });
    } finally {
      await server.close();
    }
  });

  it('on close, finishes the request in flight and refuses one arriving on its connection with 503', async () => {
    const server = await startServer(testConfig({ port: 0, retryAfterS: 4 }), { handleSignals: false });
    const port = Number(new URL(server.url).port);
    const payload = pointsCollection(2000, 9);
    let closed: Promise<void> | undefined;
    const reply = await rawExchange(
      port,
      `POST /v1/cluster?eps=100&layer=centres HTTP/1.1\r\nHost: 127.0.0.1\r\nContent-Type: application/geo+json\r\nContent-Length: ${Buffer.byteLength(payload)}\r\n\r\n${payload}`,
      async () => {
        // close once the request is being worked on
        for (;;) {
          const health = (await (await fetch(`${server.url}/healthz`)).json()) as { in_progress: number };
          if (health.in_progress > 0) break;
          await new Promise((r) => setTimeout(r, 5));
        }
        closed = server.close();
        await new Promise((r) => setTimeout(r, 50));
      },
      'GET /healthz HTTP/1.1\r\nHost: 127.0.0.1\r\n\r\n',
    );
    await closed;
    const statuses = [...reply.matchAll(/HTTP\/1\.1 (\d{3})/g)].map((m) => Number(m[1]));
    expect(statuses).toEqual([200, 503]);
    const second = reply.slice(reply.lastIndexOf('HTTP/1.1 503'));
    expect(second).toMatch(/retry-after: 4/i);
    expect(second).toContain('"code":"overloaded"');
  });

  it('`roost serve` from source logs with request ids and exits 0 on SIGTERM', async () => {
    const child = spawn(
      process.execPath,
      ['--import', 'tsx', '-e', "const m = await import('./src/cli/serve.ts'); await m.serve(['--port', '0', '--workers', '1', '--db', ':memory:']);"],
      { cwd: ROOT, env: { ...process.env, ROOST_LOG_LEVEL: 'info' }, stdio: ['ignore', 'pipe', 'pipe'] },
    );
    let out = '';
    child.stdout.setEncoding('utf8').on('data', (d: string) => (out += d));
    child.stderr.setEncoding('utf8').on('data', (d: string) => (out += d));
    const url = await new Promise<string>((resolve, reject) => {
      const t = setInterval(() => {
        const m = /roost listening on (http:\/\/[\d.:]+)/.exec(out);
        if (m) {
          clearInterval(t);
          resolve(m[1]!);
        }
      }, 50);
      child.on('exit', (code) => reject(new Error(`exited ${code}: ${out}`)));
    });
    const res = await fetch(`${url}/v1/cluster?eps=0`, { method: 'POST', headers: { 'content-type': 'text/csv', 'x-request-id': 'trace-55' }, body: 'lon,lat\n1,2\n' });
    const answer = await res.text();
    expect(res.status, answer).toBe(400);
    const exit = new Promise<number | null>((resolve) => child.on('exit', (code) => resolve(code)));
    child.kill('SIGTERM');
    expect(await exit).toBe(0);
    const lines = out.split('\n').filter((l) => l.startsWith('{')).map((l) => JSON.parse(l) as Record<string, unknown>);
    expect(lines.some((l) => l.reqId === 'trace-55' && l.msg === 'request refused')).toBe(true);
    expect(lines.some((l) => l.msg === 'closed')).toBe(true);
  });

  // without a build it is skipped locally; under CI=true (where `npm test` builds first) it runs and a missing dist fails it
  it.skipIf(!existsSync(`${ROOT}dist/workers/entry.js`) && !isCi())('runs from the compiled files in dist (worker loaded as JavaScript)', async () => {
    const script = [
      "const { buildApp } = await import('./dist/http/app.js');",
      "const { resolveConfig } = await import('./dist/http/config.js');",
      'const app = await buildApp({ config: resolveConfig({ workers: 1, maxEventLoopDelayMs: 0, dbPath: ":memory:" }, {}), logger: false });',
      "const r = await app.inject({ method: 'POST', url: '/v1/cluster?eps=100&min_points=2&layer=centres', headers: { 'content-type': 'text/csv' }, payload: 'lon,lat\\n1,2\\n1.0001,2\\n' });",
      'console.log(r.statusCode, JSON.parse(r.body).features.length);',
      'await app.close();',
    ].join('\n');
    const child = spawn(process.execPath, ['--input-type=module', '-e', script], { cwd: ROOT, stdio: ['ignore', 'pipe', 'pipe'] });
    let out = '';
    child.stdout.setEncoding('utf8').on('data', (d: string) => (out += d));
    child.stderr.setEncoding('utf8').on('data', (d: string) => (out += d));
    const code = await new Promise<number | null>((resolve) => child.on('exit', resolve));
    expect(out.trim(), out).toBe('200 1');
    expect(code).toBe(0);
  });
});
