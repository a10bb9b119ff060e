/**
 * Clustering bodies read while they arrive (src/http/arriving.ts) answer exactly as bodies read
 * after their upload: valid and invalid bodies, bodies with a settings member, bodies cut short,
 * bodies whose Content-Length lies, bodies over the size limit, and a body whose thread is wanted
 * by another request meanwhile. Each case is posted twice to one listening service, once with the
 * early start turned off (the ordinary path) and once with it on, and the answers are compared.
 *
 * Seeded: ROOST_ARRIVING_SEED changes the data (the seed in use is printed).
 */
import { request as httpRequest } from 'node:http';
import { connect } from 'node:net';
import { PassThrough } from 'node:stream';
import type { FastifyInstance, FastifyRequest } from 'fastify';
import { Piscina } from 'piscina';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { ArrivingBody } from '../../src/http/arriving.js';
import { rawBodyParser, READ_WHILE_ARRIVING, type ArrivalStart } from '../../src/http/body.js';
import { READ_WHILE_ARRIVING_FROM_BYTES } from '../../src/http/routes/cluster.js';
import type { WorkResult, WorkTask } from '../../src/http/work.js';
import work from '../../src/http/worker.js';
import { pointsCollection, seeded, testApp } from './helper.js';

const SEED = Number(process.env.ROOST_ARRIVING_SEED ?? 16);
console.log(`arriving-body tests: seed ${SEED} (set ROOST_ARRIVING_SEED to change)`);

/** A seeded FeatureCollection of about `bytes` bytes (above the early-start size when asked). */
function collection(bytes: number, seed: number): string {
  const perFeature = 200;
  return pointsCollection(Math.ceil(bytes / perFeature), seed);
}

/** Puts a wrong value into feature `k` (its longitude), keeping the document valid JSON. */
function withBadFeature(text: string, k: number): string {
  let at = -1;
  for (let i = 0; i <= k; i++) at = text.indexOf('"coordinates":[', at + 1);
  return text.slice(0, at) + '"coordinates":[512.5,' + text.slice(text.indexOf(',', at + 15) + 1);
}

/** Answers without what differs from one request to the next (request ids, stage timings, dates). */
function normalised(text: string): string {
  return text
    .replace(/"request_id":"[^"]*"/g, '"request_id":""')
    .replace(/"timings_ms":\{[^}]*\}/g, '"timings_ms":{}')
    .replace(/\r\n(date|x-request-id|keep-alive|connection):[^\r]*/gi, '');
}

interface Answer {
  status: number;
  text: string;
}

/** POSTs with Content-Length (or chunked, `sized` false), written in 64 KiB pieces. */
function post(base: string, path: string, body: Buffer, contentType = 'application/geo+json', sized = true): Promise<Answer> {
  return new Promise((resolve, reject) => {
    const u = new URL(path, base);
    const headers: Record<string, string | number> = { 'content-type': contentType };
    if (sized) headers['content-length'] = body.length;
    const req = httpRequest({ host: u.hostname, port: u.port, path: u.pathname + u.search, method: 'POST', headers }, (res) => {
      const chunks: Buffer[] = [];
      res.on('data', (d: Buffer) => chunks.push(d));
      res.on('end', () => resolve({ status: res.statusCode ?? 0, text: normalised(Buffer.concat(chunks).toString('utf8')) }));
    });
    req.on('error', reject);
    for (let off = 0; off < body.length; off += 1 << 16) req.write(body.subarray(off, off + (1 << 16)));
    req.end();
  });
}

/**
 * A raw exchange: the head declaring `declared` bytes, then `parts` of the body one after another
 * (each awaited by a callback), then the connection half-closed or left open. Resolves with the
 * first answer's status and body.
 */
function raw(base: string, path: string, declared: number, first: Buffer, end: boolean): { answer: Promise<Answer>; send: (b: Buffer, end: boolean) => void } {
  const u = new URL(base);
  const socket = connect(Number(u.port), u.hostname);
  socket.write(`POST ${path} HTTP/1.1\r\nHost: ${u.host}\r\nContent-Type: application/geo+json\r\nContent-Length: ${declared}\r\n\r\n`);
  const send = (b: Buffer, last: boolean): void => {
    for (let off = 0; off < b.length; off += 1 << 16) socket.write(b.subarray(off, off + (1 << 16)));
    if (last) socket.end();
  };
  send(first, end);
  let text = '';
  const answer = new Promise<Answer>((resolve) => {
    let answered = false;
    const done = (): void => {
      if (answered) return;
      answered = true;
      const head = text.indexOf('\r\n\r\n');
      const status = Number(/^HTTP\/1\.1 (\d+)/.exec(text)?.[1] ?? 0);
      const length = Number(/\r\ncontent-length: (\d+)/i.exec(text.slice(0, head))?.[1] ?? 0);
      resolve({ status, text: normalised(Buffer.from(text.slice(head + 4, head + 4 + length), 'latin1').toString('utf8')) });
    };
    socket.on('data', (d: Buffer) => {
      text += d.toString('latin1');
      const head = text.indexOf('\r\n\r\n');
      const length = head < 0 ? -1 : Number(/\r\ncontent-length: (\d+)/i.exec(text.slice(0, head))?.[1] ?? -1);
      if (length >= 0 && text.length >= head + 4 + length) {
        done();
        socket.destroy();
      }
    });
    socket.on('close', done);
    socket.on('error', () => undefined);
  });
  return { answer, send };
}

describe('clustering bodies read while they arrive', () => {
  let app: FastifyInstance;
  let base: string;
  let early = true;
  const started: Array<Promise<WorkResult>> = [];

  beforeAll(async () => {
    app = await testApp({ workers: 1, queueSize: 2, bodyLimitBytes: 4 * 1024 * 1024, uploadTimeoutMs: 20_000 });
    base = await app.listen({ port: 0, host: '127.0.0.1' });
    const pool = app.workPool;
    const idle = Object.getOwnPropertyDescriptor(pool, 'idle')!.get!;
    // the early start is offered only to an idle pool: "busy" turns it off for the reference answers
    Object.defineProperty(pool, 'idle', { get: () => early && idle.call(pool), configurable: true });
    const runArriving = pool.runArriving.bind(pool);
    pool.runArriving = (task, arriving, signal) => {
      const p = runArriving(task, arriving, signal);
      started.push(p);
      return p;
    };
  });
  afterAll(async () => {
    await app?.close();
  });

  /** The answer with the early start off and on; checks that it was taken when on. */
  async function both(send: () => Promise<Answer>, what = '', expectStart = true): Promise<[Answer, Answer]> {
    early = false;
    const before = started.length;
    const reference = await send();
    expect(started.length, what).toBe(before);
    early = true;
    const read = await send();
    expect(started.length, what).toBe(before + (expectStart ? 1 : 0));
    return [reference, read];
  }

  /** Waits until no request is in progress, queued or uploading. */
  async function quiet(): Promise<void> {
    const end = Date.now() + 20_000;
    for (;;) {
      const h = (await (await fetch(`${base}/healthz`)).json()) as Record<string, unknown>;
      if (h.in_progress === 0 && h.queued === 0 && h.uploading === 0) return;
      if (Date.now() > end) throw new Error(`still busy: ${JSON.stringify(h)}`);
      await new Promise((r) => setTimeout(r, 20));
    }
  }

  it('valid bodies: the same answer for every layer, the whole document, CSV and text sequences', { timeout: 120_000 }, async () => {
    const body = Buffer.from(collection(1.5 * READ_WHILE_ARRIVING_FROM_BYTES, SEED));
    for (const layer of ['&layer=hotspots', '&layer=points', '&layer=noise', '']) {
      const [reference, read] = await both(() => post(base, `/v1/cluster?eps=80&min_points=4${layer}`, body));
      expect(reference.status, reference.text.slice(0, 300)).toBe(200);
      expect(read).toEqual(reference);
    }
    type Doc = { features: Array<{ id: string; geometry: { coordinates: number[] }; properties: { count: number } }> };
    // CSV rows are short: more of them to pass the early-start size
    const many = JSON.parse(collection(7 * READ_WHILE_ARRIVING_FROM_BYTES, SEED)) as Doc;
    const csv = Buffer.from(['id,lon,lat,count', ...many.features.map((f) => `${f.id},${f.geometry.coordinates[0]},${f.geometry.coordinates[1]},${f.properties.count}`)].join('\n') + '\n');
    const seq = Buffer.from((JSON.parse(body.toString()) as Doc).features.map((f) => JSON.stringify(f)).join('\n') + '\n');
    expect(Math.min(csv.length, seq.length)).toBeGreaterThan(READ_WHILE_ARRIVING_FROM_BYTES);
    for (const [bytes, type] of [
      [csv, 'text/csv'],
      [seq, 'application/geo+json-seq'],
    ] as const) {
      const [reference, read] = await both(() => post(base, '/v1/cluster?eps=80&min_points=4&weight=count&layer=points', bytes, type));
      expect(reference.status, reference.text.slice(0, 300)).toBe(200);
      expect(read).toEqual(reference);
    }
  });

  it('invalid bodies: the same problems (index, id, what is wrong), bad JSON and settings in the body', { timeout: 120_000 }, async () => {
    const rnd = seeded(SEED);
    const text = collection(1.5 * READ_WHILE_ARRIVING_FROM_BYTES, SEED + 1);
    const n = (text.match(/"Feature"/g) ?? []).length;
    const bad = withBadFeature(withBadFeature(text, Math.floor(rnd() * n)), n - 1 - Math.floor(rnd() * 10));
    const cases: Array<[string, string]> = [
      ['/v1/cluster?eps=80&min_points=4&layer=hotspots', bad],
      // JSON broken near the start, near the end, and cut
      ['/v1/cluster?eps=80&min_points=4&layer=hotspots', text.slice(0, 5000) + '}' + text.slice(5000)],
      ['/v1/cluster?eps=80&min_points=4&layer=hotspots', text.slice(0, text.length - 3) + ',]}'],
      ['/v1/cluster?eps=80&min_points=4', text.slice(0, text.length - 2)],
      // settings in the body: eps only there, the query's winning, and a member that is not an object
      ['/v1/cluster?min_points=4&layer=hotspots', text.replace('{"type":"FeatureCollection",', '{"type":"FeatureCollection","settings":{"eps":120},')],
      ['/v1/cluster?eps=80&min_points=4&layer=hotspots', text.replace('{"type":"FeatureCollection",', '{"type":"FeatureCollection","settings":{"eps":120,"min_points":9},')],
      ['/v1/cluster?eps=80&layer=hotspots', text.replace('{"type":"FeatureCollection",', '{"type":"FeatureCollection","settings":[1],')],
      // the bytes "settings" that set nothing: an empty member, a property of a feature (the answer read while arriving stands)
      ['/v1/cluster?eps=80&min_points=4&layer=hotspots', text.replace('{"type":"FeatureCollection",', '{"type":"FeatureCollection","settings":{},')],
      ['/v1/cluster?eps=80&min_points=4', text.replace('"properties":{', '"properties":{"settings":{"eps":5},')],
      // a setting the data decides is wrong only once read
      ['/v1/cluster?eps=80&min_points=4&weight=kind&layer=hotspots', text],
    ];
    const statuses: number[] = [];
    for (const [path, body] of cases) {
      const [reference, read] = await both(() => post(base, path, Buffer.from(body)), path);
      expect(read, path).toEqual(reference);
      statuses.push(reference.status);
    }
    expect(statuses).toEqual([422, 400, 400, 400, 200, 200, 400, 200, 200, 422]);
    expect(JSON.parse((await post(base, cases[0]![0], Buffer.from(bad))).text)).toMatchObject({ problems: expect.arrayContaining([expect.objectContaining({ id: expect.any(String), index: expect.any(Number) })]) });
  });

  it('a body cut short gets the upload problem, stops its reading and frees its thread', { timeout: 120_000 }, async () => {
    const body = Buffer.from(collection(1.5 * READ_WHILE_ARRIVING_FROM_BYTES, SEED + 2));
    const [reference, read] = await both(async () => {
      const { answer } = raw(base, '/v1/cluster?eps=80&min_points=4&layer=hotspots', body.length, body.subarray(0, Math.floor(body.length * 0.6)), true);
      return answer;
    });
    expect(reference.status).toBe(400);
    expect(read).toEqual(reference);
    await quiet();
    // the thread is free again: the next body is read while it arrives, and answered
    const [okRef, ok] = await both(() => post(base, '/v1/cluster?eps=80&min_points=4&layer=hotspots', body));
    expect(ok.status).toBe(200);
    expect(ok).toEqual(okRef);
  });

  it('a body that lies about its length: declared longer (408 at the upload limit) or shorter (read as declared)', { timeout: 120_000 }, async () => {
    const quick = await testApp({ workers: 1, queueSize: 2, bodyLimitBytes: 4 * 1024 * 1024, uploadTimeoutMs: 1500 });
    const quickBase = await quick.listen({ port: 0, host: '127.0.0.1' });
    try {
      const body = Buffer.from(collection(1.5 * READ_WHILE_ARRIVING_FROM_BYTES, SEED + 3));
      // declared a MiB longer than sent, connection left open: the upload deadline answers
      const longer = raw(quickBase, '/v1/cluster?eps=80&min_points=4&layer=hotspots', body.length + (1 << 20), body, false);
      const a = await longer.answer;
      expect(a.status).toBe(408);
      expect(JSON.parse(a.text)).toMatchObject({ type: expect.stringMatching(/request-timeout/) });
      const after = await post(quickBase, '/v1/cluster?eps=80&min_points=4&layer=hotspots', body);
      expect(after.status).toBe(200);
    } finally {
      await quick.close();
    }
    // declared shorter than sent: the body is what was declared (here bad JSON); the rest is not a body
    const body = Buffer.from(collection(1.5 * READ_WHILE_ARRIVING_FROM_BYTES, SEED + 4));
    const [reference, read] = await both(() => raw(base, '/v1/cluster?eps=80&min_points=4&layer=hotspots', body.length - 1000, body, true).answer);
    expect(reference.status).toBe(400);
    expect(read).toEqual(reference);
  });

  it('bodies over the size limit are refused as before, declared or counted', { timeout: 60_000 }, async () => {
    const body = Buffer.from(collection(5 * 1024 * 1024, SEED + 5));
    for (const sized of [true, false]) {
      const [reference, read] = await both(() => post(base, '/v1/cluster?eps=80&min_points=4&layer=hotspots', body, 'application/geo+json', sized), 'too large', false);
      expect(reference.status).toBe(413);
      expect(read).toEqual(reference);
    }
    await quiet();
  });

  it('a thread waiting for an upload gives way to another request, and the body is read after its upload', { timeout: 120_000 }, async () => {
    const body = Buffer.from(collection(1.5 * READ_WHILE_ARRIVING_FROM_BYTES, SEED + 6));
    const path = '/v1/cluster?eps=80&min_points=4&layer=points';
    early = false;
    const reference = await post(base, path, body);
    early = true;
    const before = started.length;
    const half = Math.floor(body.length / 2);
    const slow = raw(base, path, body.length, body.subarray(0, half), false);
    const end = Date.now() + 20_000;
    while (started.length === before) {
      if (Date.now() > end) throw new Error('the body was not read while it arrived');
      await new Promise((r) => setTimeout(r, 10));
    }
    // the one thread is reading the half-sent body; another request needs it
    const small = Buffer.from(pointsCollection(300, SEED));
    const other = await post(base, '/v1/cluster?eps=80&min_points=4&layer=hotspots', small);
    expect(other.status).toBe(200);
    expect(await started[before]).toEqual({ ok: false, code: 'read-again' });
    slow.send(body.subarray(half), false);
    expect(await slow.answer).toEqual(reference);
  });
});

describe('the worker reads a body that arrived into shared memory as it reads a body it was given', () => {
  /** The worker's answer to `text` given whole, and read from a shared buffer filled and complete. */
  function answers(text: string, query: Record<string, unknown>, layer: WorkTask['layer'], format: WorkTask['format'] = 'geojson'): [WorkResult, WorkResult] {
    const bytes = Buffer.from(text);
    const given = Buffer.allocUnsafeSlow(bytes.length);
    bytes.copy(given);
    const arriving = new ArrivingBody(bytes.length);
    bytes.copy(arriving.buffer);
    arriving.filled(bytes.length);
    arriving.complete();
    const task = (body: Uint8Array, share?: ArrivingBody): WorkTask => ({ op: 'cluster', body, format, query, layer, arriving: share?.share });
    // a success comes wrapped for piscina to transfer its bytes
    const plain = (moved: WorkResult): unknown => {
      const r = ((moved as unknown as Record<symbol, WorkResult>)[Piscina.valueSymbol] ?? moved) as WorkResult;
      return r.ok ? { ...r, body: normalised(Buffer.from(r.body).toString()) } : r;
    };
    return [plain(work(task(given))) as WorkResult, plain(work(task(new Uint8Array(arriving.share.bytes), arriving))) as WorkResult];
  }

  it('seeded bodies, valid and not, with and without settings', () => {
    const rnd = seeded(SEED + 7);
    for (let k = 0; k < 12; k++) {
      let text = pointsCollection(200 + Math.floor(rnd() * 800), SEED * 100 + k);
      const n = (text.match(/"Feature"/g) ?? []).length;
      if (k % 3 === 1) text = withBadFeature(text, Math.floor(rnd() * n));
      if (k % 4 === 2) text = text.slice(0, Math.floor(rnd() * text.length));
      if (k % 5 === 3) text = text.replace('{"type":"FeatureCollection",', `{"type":"FeatureCollection","settings":{"eps":${50 + Math.floor(rnd() * 100)}},`);
      const query = k % 5 === 3 ? { min_points: '4' } : { eps: String(40 + Math.floor(rnd() * 100)), min_points: '4' };
      const layer = (['hotspots', 'points', 'noise', null] as const)[k % 4]!;
      const [given, read] = answers(text, query, layer);
      expect(read, `case ${k}`).toEqual(given);
    }
  });
});

describe('the body parser and a body read while it arrives', () => {
  /** Feeds chunks through the parser with an early start that always takes the body. */
  async function feed(chunks: Buffer[], declared: number, end = true): Promise<{ err: unknown; body?: Uint8Array; arriving: ArrivingBody | null; failedAllIn: boolean | null; held: number }> {
    const stream = new PassThrough();
    let arriving: ArrivingBody | null = null;
    let failedAllIn: boolean | null = null;
    const start: ArrivalStart = (size) => (arriving = new ArrivingBody(size, (allIn) => (failedAllIn = allIn)));
    const request = { headers: { 'content-length': String(declared) }, [READ_WHILE_ARRIVING]: start } as unknown as FastifyRequest;
    const { parser, allowance } = rawBodyParser({ limitBytes: 1 << 24, uploads: 4, uploadTimeoutMs: 60_000, retryAfterS: 1 });
    const result = new Promise<{ err: unknown; body?: Uint8Array }>((resolve) => parser(request, stream, (err, body) => resolve({ err, body })));
    for (const c of chunks) stream.write(c);
    if (end) stream.end();
    else stream.destroy();
    const r = await result;
    return { ...r, arriving, failedAllIn, held: allowance.peakHeldBytes };
  }

  const pattern = (n: number, seed: number): Buffer => {
    const rnd = seeded(seed);
    return Buffer.from(Array.from({ length: n }, () => Math.floor(rnd() * 256)));
  };

  it('a whole body is received into the shared buffer, held once, and marked complete', async () => {
    const bytes = pattern(300_000, SEED);
    const chunks = Array.from({ length: 30 }, (_, k) => bytes.subarray(k * 10_000, (k + 1) * 10_000));
    const r = await feed(chunks, bytes.length);
    expect(r.err).toBeNull();
    expect(r.arriving).not.toBeNull();
    expect(Buffer.from(r.body!).equals(bytes)).toBe(true);
    expect(r.body!.buffer).toBe(r.arriving!.share.bytes);
    expect(r.arriving!.arriving).toBe(false);
    expect(r.failedAllIn).toBeNull();
    expect(r.held).toBeLessThanOrEqual(bytes.length + bytes.length / 8 + 10_000);
  });

  it('a body cut short, too long or abandoned fails the shared buffer', async () => {
    const bytes = pattern(100_000, SEED + 1);
    const chunks = Array.from({ length: 10 }, (_, k) => bytes.subarray(k * 10_000, (k + 1) * 10_000));
    const short = await feed(chunks.slice(0, 6), bytes.length);
    expect(short.err).toMatchObject({ code: 'bad-request', message: expect.stringMatching(/shorter/) });
    expect(short.failedAllIn).toBe(false);
    const long = await feed([...chunks, bytes.subarray(0, 10)], bytes.length);
    expect(long.err).toMatchObject({ code: 'bad-request', message: expect.stringMatching(/longer/) });
    expect(long.failedAllIn).toBe(true);
    const gone = await feed(chunks.slice(0, 4), bytes.length, false);
    expect(gone.err).toMatchObject({ code: 'bad-request' });
    expect(gone.failedAllIn).toBe(false);
  });
});
