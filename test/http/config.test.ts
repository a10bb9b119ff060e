import { PassThrough } from 'node:stream';
import type { FastifyRequest } from 'fastify';
import { describe, expect, it } from 'vitest';
import { rawBodyParser } from '../../src/http/body.js';
import { ConfigError, DEFAULT_CONFIG, OPTIONS, parseSize, resolveConfig } from '../../src/http/config.js';
import { HttpProblem } from '../../src/http/errors.js';

describe('server configuration', () => {
  it('defaults listen on loopback and admit a million ~250-byte features', () => {
    const c = resolveConfig({}, {});
    expect(c).toEqual(DEFAULT_CONFIG);
    expect(c.host).toBe('127.0.0.1');
    expect(c.bodyLimitBytes).toBeGreaterThanOrEqual(1_000_000 * 250);
  });

  it('environment variables override defaults, flags override both', () => {
    const env = { ROOST_PORT: '9000', ROOST_HOST: '0.0.0.0', ROOST_BODY_LIMIT: '64MiB', ROOST_WORKERS: '3' };
    const fromEnv = resolveConfig({}, env);
    expect(fromEnv).toMatchObject({ port: 9000, host: '0.0.0.0', bodyLimitBytes: 64 * 1024 * 1024, workers: 3 });
    expect(resolveConfig({ port: '9100', workers: 2 }, env)).toMatchObject({ port: 9100, host: '0.0.0.0', workers: 2 });
  });

  it('every option has a distinct flag and ROOST_ variable (DATABASE_URL keeps its usual name)', () => {
    expect(new Set(OPTIONS.map((o) => o.flag)).size).toBe(OPTIONS.length);
    expect(new Set(OPTIONS.map((o) => o.env)).size).toBe(OPTIONS.length);
    expect(new Set(OPTIONS.map((o) => o.key))).toEqual(new Set(Object.keys(DEFAULT_CONFIG)));
    for (const o of OPTIONS) expect(o.env).toMatch(o.key === 'databaseUrl' ? /^DATABASE_URL$/ : /^ROOST_[A-Z_]+$/);
  });

  it('sizes take binary units', () => {
    expect(parseSize('1048576', 'x')).toBe(1048576);
    expect(parseSize('512KiB', 'x')).toBe(512 * 1024);
    expect(parseSize('1.5g', 'x')).toBe(1.5 * 1024 ** 3);
    expect(() => parseSize('lots', 'x')).toThrow(ConfigError);
  });

  it('unusable values are refused with the flag and variable named', () => {
    expect(() => resolveConfig({ port: '80000' }, {})).toThrow(/--port \/ ROOST_PORT/);
    expect(() => resolveConfig({}, { ROOST_WORKERS: '0' })).toThrow(/--workers \/ ROOST_WORKERS/);
    expect(() => resolveConfig({}, { ROOST_WORKERS: 'two' })).toThrow(/ROOST_WORKERS: "two" is not a whole number/);
    expect(() => resolveConfig({ logLevel: 'loud' }, {})).toThrow(/--log-level/);
    expect(() => resolveConfig({ bodyLimitBytes: '3GiB' }, {})).toThrow(/below 2 GiB/);
    expect(() => resolveConfig({ colour: 'red' } as never, {})).toThrow(/unknown server option "colour"/);
  });
});

/** Feeds chunks through the body parser as a request stream would; `held` is the most bytes the body held at once. */
async function parseHeld(limit: number, chunks: Buffer[], contentLength?: number): Promise<{ body: Uint8Array; held: number }> {
  const stream = new PassThrough();
  const request = { headers: contentLength === undefined ? {} : { 'content-length': String(contentLength) } } as unknown as FastifyRequest;
  const { parser, allowance } = rawBodyParser({ limitBytes: limit, uploads: 4, uploadTimeoutMs: 60_000, retryAfterS: 1 });
  const result = new Promise<Uint8Array>((resolve, reject) => {
    parser(request, stream, (err, body) => (err ? reject(err) : resolve(body!)));
  });
  for (const c of chunks) stream.write(c);
  stream.end();
  const body = await result;
  return { body, held: allowance.peakHeldBytes };
}

async function parse(limit: number, chunks: Buffer[], contentLength?: number): Promise<Uint8Array> {
  return (await parseHeld(limit, chunks, contentLength)).body;
}

/** `count` chunks of `size` bytes with a pattern that shows any byte out of place. */
function patternChunks(count: number, size: number): Buffer[] {
  return Array.from({ length: count }, (_, k) => Buffer.from(Array.from({ length: size }, (_, i) => (k * size + i) * 31 % 251)));
}

describe('raw body collection', () => {
  const a = Buffer.from('{"type":"Feature'), b = Buffer.from('Collection"}');

  it('with Content-Length, yields exactly the bytes in a buffer of their own, ready to transfer', async () => {
    const body = await parse(1000, [a, b], a.length + b.length);
    expect(Buffer.from(body).toString()).toBe('{"type":"FeatureCollection"}');
    expect(body.byteOffset).toBe(0);
    expect(body.buffer.byteLength).toBe(body.byteLength);
  });

  it('without Content-Length, grows as needed and yields the bytes', async () => {
    const big = Buffer.alloc(200_000, 0x61);
    const body = await parse(1_000_000, [a, big, b]);
    expect(body.byteLength).toBe(a.length + big.length + b.length);
    expect(Buffer.from(body).subarray(-b.length).equals(b)).toBe(true);
  });

  it('refuses bodies whose length disagrees with Content-Length', async () => {
    await expect(parse(1000, [a, b], 5)).rejects.toMatchObject({ code: 'bad-request' });
    await expect(parse(1000, [a], 100)).rejects.toMatchObject({ code: 'bad-request' });
    // past an eighth of the declared length, when the declared-size buffer is already made
    const half = patternChunks(4, 64);
    await expect(parse(10_000, half, 512)).rejects.toMatchObject({ code: 'bad-request', message: expect.stringMatching(/shorter/) });
    await expect(parse(10_000, [...half, ...half, a], 512)).rejects.toMatchObject({ code: 'bad-request', message: expect.stringMatching(/longer/) });
  });

  it('with Content-Length, holds a body about once (an eighth more), not twice, and yields every byte in place', async () => {
    const chunks = patternChunks(64, 16 * 1024);
    const whole = Buffer.concat(chunks);
    const { body, held } = await parseHeld(8 * 1024 * 1024, chunks, whole.length);
    expect(Buffer.from(body).equals(whole)).toBe(true);
    expect(body.byteOffset).toBe(0);
    expect(body.buffer.byteLength).toBe(whole.length);
    // the declared-size buffer plus the chunks kept until an eighth had come (one chunk of slack)
    expect(held).toBeLessThanOrEqual(whole.length + whole.length / 8 + 16 * 1024);
    expect(held).toBeGreaterThanOrEqual(whole.length);
    // without Content-Length the chunks are kept to the end and joined: twice
    const unsized = await parseHeld(8 * 1024 * 1024, chunks);
    expect(Buffer.from(unsized.body).equals(whole)).toBe(true);
    expect(unsized.held).toBe(2 * whole.length);
  });

  it('allocates nothing from a declared Content-Length: a body declared huge and never sent holds no memory', async () => {
    const stream = new PassThrough();
    const request = { headers: { 'content-length': String(200 * 1024 * 1024) } } as unknown as FastifyRequest;
    const before = process.memoryUsage().arrayBuffers;
    const { parser, allowance } = rawBodyParser({ limitBytes: 256 * 1024 * 1024, uploads: 4, uploadTimeoutMs: 60_000, retryAfterS: 1 });
    const result = new Promise<unknown>((resolve) => parser(request, stream, (err) => resolve(err)));
    stream.write(a);
    expect(allowance.inProgress).toBe(1);
    // 200 MiB declared: a buffer of that size would show here at once
    expect(process.memoryUsage().arrayBuffers - before).toBeLessThan(16 * 1024 * 1024);
    stream.destroy();
    expect(await result).toMatchObject({ code: 'bad-request' });
    expect(allowance.inProgress).toBe(0);
  });

  it('refuses bodies over the limit, declared or counted', async () => {
    await expect(parse(10, [a], a.length)).rejects.toBeInstanceOf(HttpProblem);
    await expect(parse(20, [a, b])).rejects.toMatchObject({ code: 'body-too-large', status: 413 });
  });
});
