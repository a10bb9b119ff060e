/**
 * Notices of change: a local receiver on 127.0.0.1 checks the signature the way a user's receiver
 * would, failing receivers are retried with a doubling back-off, and a receiver that never accepts
 * does not fail the run.
 */
import { createHmac, timingSafeEqual } from 'node:crypto';
import { createServer, type IncomingHttpHeaders, type Server } from 'node:http';
import type { AddressInfo } from 'node:net';
import { afterEach, beforeEach, describe, expect, it } from 'vitest';
import { createRoostHooks } from '../../src/jobs/run-hooks.js';
import { deliverNotice, resolveWebhookSettings, runNotice, signNotice, verifySignature, type DeliveryReport } from '../../src/jobs/notify.js';
import type { Dataset, Store } from '../../src/storage/store.js';
import { DATASET, grid, runOnce, tempStore } from './helpers.js';

interface Received {
  at: number;
  headers: IncomingHttpHeaders;
  body: string;
}

/** A receiver answering with the given statuses in turn (the last one repeats). */
async function receiver(statuses: number[], extraHeaders: Record<string, string> = {}): Promise<{ url: string; got: Received[]; server: Server }> {
  const got: Received[] = [];
  const server = createServer((req, res) => {
    const chunks: Buffer[] = [];
    req.on('data', (c: Buffer) => chunks.push(c));
    req.on('end', () => {
      got.push({ at: performance.now(), headers: req.headers, body: Buffer.concat(chunks).toString('utf8') });
      res.writeHead(statuses[Math.min(got.length - 1, statuses.length - 1)]!, extraHeaders);
      res.end('');
    });
  });
  await new Promise<void>((resolve) => server.listen(0, '127.0.0.1', resolve));
  return { url: `http://127.0.0.1:${(server.address() as AddressInfo).port}/hook`, got, server };
}

/** Closes a receiver without waiting for idle keep-alive connections to time out. */
function stop(server: Server): Promise<void> {
  return new Promise((resolve) => {
    server.close(() => resolve());
    server.closeAllConnections();
  });
}

const SECRET = 'correct horse battery staple';
/** the receivers here listen on loopback, which only private webhooks may reach */
const FAST = { firstDelayMs: 30, maxDelayMs: 1000, attempts: 4, timeoutMs: 2000, allowPrivate: true };

/** The receiver side, written from the documentation alone (not with verifySignature). */
function receiverAccepts(secret: string, raw: string, header: string): boolean {
  const m = /^t=(\d+),v1=([0-9a-f]{64})$/.exec(header);
  if (!m) return false;
  const expected = createHmac('sha256', secret).update(`${m[1]}.${raw}`).digest();
  return timingSafeEqual(expected, Buffer.from(m[2]!, 'hex')) && Math.abs(Date.now() / 1000 - Number(m[1])) <= 300;
}

describe('signatures', () => {
  it('verify over the raw body, and fail for another body, secret, or an old time', () => {
    const body = '{"event":"run.finished","dataset":"nests"}';
    const now = 1_750_000_000;
    const header = signNotice(SECRET, body, now);
    expect(header).toMatch(/^t=1750000000,v1=[0-9a-f]{64}$/);
    expect(verifySignature(SECRET, body, header, 300, now + 10)).toBe(true);
    expect(verifySignature(SECRET, new TextEncoder().encode(body), header, 300, now)).toBe(true);
    expect(verifySignature(SECRET, body.replace('nests', 'nest5'), header, 300, now)).toBe(false);
    expect(verifySignature('another secret', body, header, 300, now)).toBe(false);
    expect(verifySignature(SECRET, body, header, 300, now + 301)).toBe(false);
    expect(verifySignature(SECRET, body, header.replace(/v1=./, 'v1=x'), 300, now)).toBe(false);
    expect(verifySignature(SECRET, body, 'garbage', 300, now)).toBe(false);
    // what the documentation tells a receiver to compute
    expect(header.split('v1=')[1]).toBe(createHmac('sha256', SECRET).update(`${now}.${body}`).digest('hex'));
  });

  it('refuses unusable retry settings', () => {
    expect(() => resolveWebhookSettings({ attempts: 0 })).toThrow(/attempts/);
    expect(() => resolveWebhookSettings({ timeoutMs: 1.5 })).toThrow(/timeoutMs/);
    expect(resolveWebhookSettings({})).toEqual({ attempts: 5, firstDelayMs: 2000, maxDelayMs: 60000, timeoutMs: 10000, allowPrivate: false });
  });
});

describe('delivery', () => {
  const servers: Server[] = [];
  afterEach(async () => {
    await Promise.all(servers.splice(0).map(stop));
  });

  it('is retried after 500s with a doubling back-off, then delivered; the body and delivery id stay the same', async () => {
    const r = await receiver([500, 503, 200]);
    servers.push(r.server);
    const body = '{"hello":"world"}';
    const report = await deliverNotice({ url: r.url, secret: SECRET }, body, FAST);
    expect(report).toEqual({ delivered: true, attempts: 3, status: 200, error: null });
    expect(r.got).toHaveLength(3);
    for (const g of r.got) {
      expect(g.body).toBe(body);
      expect(g.headers['content-type']).toBe('application/json');
      expect(receiverAccepts(SECRET, g.body, g.headers['roost-signature'] as string)).toBe(true);
      expect(g.headers['roost-delivery']).toBe(r.got[0]!.headers['roost-delivery']);
    }
    // waits of at least 30 ms, then 60 ms (lower bounds only: a busy machine may wait longer)
    expect(r.got[1]!.at - r.got[0]!.at).toBeGreaterThanOrEqual(29);
    expect(r.got[2]!.at - r.got[1]!.at).toBeGreaterThanOrEqual(59);
  });

  it('stops after the bounded number of attempts and reports why', async () => {
    const r = await receiver([500]);
    servers.push(r.server);
    const report = await deliverNotice({ url: r.url, secret: SECRET }, '{}', { ...FAST, attempts: 3, firstDelayMs: 5 });
    expect(report).toEqual({ delivered: false, attempts: 3, status: 500, error: 'the receiver answered 500' });
    expect(r.got).toHaveLength(3);
  });

  it('does not retry a refusal (4xx other than 408, 425, 429) or a redirect', async () => {
    for (const status of [400, 401, 404, 302]) {
      const r = await receiver([status], status === 302 ? { location: 'http://127.0.0.1:1/' } : {});
      servers.push(r.server);
      const report = await deliverNotice({ url: r.url, secret: SECRET }, '{}', FAST);
      expect(report).toMatchObject({ delivered: false, attempts: 1, status });
      expect(r.got).toHaveLength(1);
    }
  });

  it('retries 429 after the Retry-After the receiver asked for, within the longest wait', async () => {
    const r = await receiver([429, 200], { 'retry-after': '1' });
    servers.push(r.server);
    const report = await deliverNotice({ url: r.url, secret: SECRET }, '{}', { ...FAST, firstDelayMs: 1, maxDelayMs: 200 });
    expect(report.delivered).toBe(true);
    // asked for 1 s, bounded by maxDelayMs 200 ms
    expect(r.got[1]!.at - r.got[0]!.at).toBeGreaterThanOrEqual(199);
  });

  it('gives up on a receiver that does not answer in time, and on one that is not there', async () => {
    const silent = createServer(() => undefined); // never answers
    await new Promise<void>((resolve) => silent.listen(0, '127.0.0.1', resolve));
    servers.push(silent);
    const port = (silent.address() as AddressInfo).port;
    const slow = await deliverNotice({ url: `http://127.0.0.1:${port}/`, secret: SECRET }, '{}', { attempts: 2, firstDelayMs: 1, maxDelayMs: 1, timeoutMs: 100, allowPrivate: true });
    expect(slow).toEqual({ delivered: false, attempts: 2, status: null, error: 'no answer within 100 ms' });
    const closed = createServer();
    await new Promise<void>((resolve) => closed.listen(0, '127.0.0.1', resolve));
    const gonePort = (closed.address() as AddressInfo).port;
    await new Promise((r) => closed.close(r));
    const gone = await deliverNotice({ url: `http://127.0.0.1:${gonePort}/`, secret: SECRET }, '{}', { attempts: 2, firstDelayMs: 1, maxDelayMs: 1, timeoutMs: 1000, allowPrivate: true });
    expect(gone).toMatchObject({ delivered: false, attempts: 2, status: null });
    expect(gone.error).toMatch(/ECONNREFUSED/);
  });
});

describe('notices after stored runs', () => {
  let store: Store;
  let dispose: () => Promise<void>;
  const servers: Server[] = [];
  beforeEach(async () => {
    ({ store, dispose } = await tempStore());
  });
  afterEach(async () => {
    await Promise.all(servers.splice(0).map(stop));
    await dispose();
  });

  it('summarise the run: counts per transition kind, links, status; signed', async () => {
    const r = await receiver([200]);
    servers.push(r.server);
    await store.createDataset({ ...DATASET, webhook: { url: r.url, secret: SECRET } });
    const reports: DeliveryReport[] = [];
    const hooks = createRoostHooks({ webhook: FAST, publicUrl: 'https://roost.example.org/', onNotice: (_id, rep) => reports.push(rep) });
    await store.ingest(DATASET.id, grid('P', [12.5, 41.9], 0, 0, 3, 3), { replace: false, partial: false });
    const r1 = await runOnce(store, DATASET.id, hooks);
    await store.ingest(DATASET.id, grid('Q', [12.5, 41.9], 5000, 0, 3, 3), { replace: false, partial: false });
    const r2 = await runOnce(store, DATASET.id, hooks);
    await hooks.idle();
    expect(reports.map((x) => x.delivered)).toEqual([true, true]);
    expect(r.got).toHaveLength(2);
    const [first, second] = r.got.map((g) => JSON.parse(g.body) as Record<string, unknown>);
    expect(first).toMatchObject({ event: 'run.finished', dataset: 'nests', run: { id: r1.id, status: 'succeeded', trigger: 'command', error: null }, hotspots: 1, previous_run: null, counts: null });
    expect(second).toEqual({
      event: 'run.finished',
      dataset: 'nests',
      run: { id: r2.id, status: 'succeeded', trigger: 'command', error: null },
      hotspots: 2,
      previous_run: r1.id,
      counts: { emergence: 1, survival: 1, split: 0, absorption: 0, disappearance: 0 },
      links: {
        run: `https://roost.example.org/v1/datasets/nests/runs/${r2.id}`,
        hotspots: `https://roost.example.org/v1/datasets/nests/runs/${r2.id}/hotspots`,
        changes: `https://roost.example.org/v1/datasets/nests/changes?to=${r2.id}`,
      },
      links_are: 'absolute',
    });
    for (const g of r.got) expect(receiverAccepts(SECRET, g.body, g.headers['roost-signature'] as string)).toBe(true);
    await hooks.close();
  });

  it('a receiver that always fails does not fail the run; a failed run is announced too', async () => {
    const r = await receiver([500]);
    servers.push(r.server);
    await store.createDataset({ ...DATASET, webhook: { url: r.url, secret: SECRET } });
    const reports: DeliveryReport[] = [];
    const hooks = createRoostHooks({ webhook: { ...FAST, attempts: 3, firstDelayMs: 5 }, onNotice: (_id, rep) => reports.push(rep) });
    await store.ingest(DATASET.id, grid('P', [12.5, 41.9], 0, 0, 3, 3), { replace: false, partial: false });
    const ok = await runOnce(store, DATASET.id, hooks);
    const bad = await runOnce(store, DATASET.id, hooks, { eps: 120, min_points: 4, where: 'kind=none' });
    await hooks.idle();
    expect((await store.getRun(DATASET.id, ok.id))!.status).toBe('succeeded');
    expect(bad.status).toBe('failed');
    expect(reports).toEqual([
      { delivered: false, attempts: 3, status: 500, error: 'the receiver answered 500' },
      { delivered: false, attempts: 3, status: 500, error: 'the receiver answered 500' },
    ]);
    const failedNotice = JSON.parse(r.got[3]!.body) as { run: { status: string; error: string }; counts: unknown; links: { run: string } };
    expect(failedNotice.run.status).toBe('failed');
    expect(failedNotice.run.error).toMatch(/no observations/);
    expect(failedNotice.counts).toBeNull();
    expect(failedNotice.links.run).toBe(`/v1/datasets/nests/runs/${bad.id}`);
    await hooks.close();
  });

  it('close() stops retries that are waiting', async () => {
    const r = await receiver([500]);
    servers.push(r.server);
    await store.createDataset({ ...DATASET, webhook: { url: r.url, secret: SECRET } });
    const reports: DeliveryReport[] = [];
    // the client's own word that its first attempt was answered and it is now waiting to retry
    // (waiting on the receiver instead raced the client reading the answer)
    let firstFailed!: () => void;
    const waiting = new Promise<void>((res) => (firstFailed = res));
    const hooks = createRoostHooks({
      webhook: { attempts: 5, firstDelayMs: 60_000, maxDelayMs: 60_000, timeoutMs: 1000, allowPrivate: true },
      onNotice: (_id, rep) => reports.push(rep),
      onAttempt: () => firstFailed(),
    });
    await store.ingest(DATASET.id, grid('P', [12.5, 41.9], 0, 0, 3, 3), { replace: false, partial: false });
    await runOnce(store, DATASET.id, hooks);
    await waiting;
    expect(r.got).toHaveLength(1);
    await hooks.close(); // would wait a minute for the second attempt otherwise
    expect(reports).toEqual([{ delivered: false, attempts: 1, status: 500, error: 'stopped: the service is shutting down' }]);
  });

  it('notice links are paths without a public URL, and the dataset id is escaped', () => {
    const ds = { id: 'a~b', webhook: null } as unknown as Dataset;
    const n = runNotice(ds, { id: 'r000009', trigger: 'schedule' } as never, { status: 'cancelled', summary: null, error: 'cancelled by a user' });
    expect(n.links.run).toBe('/v1/datasets/a~b/runs/r000009');
    expect(n.run).toEqual({ id: 'r000009', status: 'cancelled', trigger: 'schedule', error: 'cancelled by a user' });
  });
});
