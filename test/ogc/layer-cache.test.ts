/**
 * Stored result layers kept in memory (src/ogc/layer-cache.ts): read from the store once and then
 * served from memory byte for byte, read once for requests at the same time, kept only once read
 * whole, never when larger than the bound per sent layer, and the least recently used let go past the bound overall; a layer sent whole
 * and then paged is held once, its index made from the bytes already kept.
 */
import { afterEach, beforeEach, describe, expect, it } from 'vitest';
import { buildApp } from '../../src/http/app.js';
import { LayerCache } from '../../src/ogc/layer-cache.js';
import { indexParts } from '../../src/ogc/layer-index.js';
import type { Run, Store } from '../../src/storage/store.js';
import { openSqliteStore, type SqliteStore } from '../../src/storage/sqlite.js';
import { testConfig } from '../http/helper.js';

/** The store with its layer reads counted. */
function counted(real: SqliteStore): { store: Store; reads: () => number } {
  let reads = 0;
  const store = new Proxy(real, {
    get(target, key, receiver) {
      if (key === 'getRunLayerBytes') {
        return (...args: Parameters<typeof real.getRunLayerBytes>) => {
          reads++;
          return target.getRunLayerBytes(...args);
        };
      }
      const v = Reflect.get(target, key, receiver) as unknown;
      return typeof v === 'function' ? (v as (...a: unknown[]) => unknown).bind(target) : v;
    },
  });
  return { store, reads: () => reads };
}

async function collect(pieces: AsyncIterable<Buffer> | Buffer[] | null): Promise<Buffer> {
  const out: Buffer[] = [];
  for await (const p of pieces!) out.push(p);
  return Buffer.concat(out);
}

describe('whole layers kept in memory', () => {
  let real: SqliteStore;
  let runs: Run[];
  const text = (i: number): string => `{"type":"FeatureCollection","features":[${Array.from({ length: 200 }, (_, k) => `{"type":"Feature","id":"é${i}-${k}","geometry":null,"properties":{"n":${k}}}`).join(',')}]}`;

  beforeEach(async () => {
    real = openSqliteStore({ path: ':memory:' });
    await real.migrate();
    await real.createDataset({ id: 'c', name: 'c', settings: { eps: 50 }, idProperty: null, window: null, schedule: null, webhook: null });
    runs = [];
    for (let i = 0; i < 3; i++) {
      await real.createRun({ datasetId: 'c', settings: { eps: 50 }, trigger: 'request' });
      const run = (await real.claimNextRun('w'))!;
      const t = text(i);
      // in pieces, so that a layer is more than one read
      await real.saveRunResult(run.id, { layers: { points: [t.slice(0, 5000), t.slice(5000, 9000), t.slice(9000)], hotspots: t, centres: t, noise: t }, hotspots: [] });
      await real.updateRun(run.id, { status: 'succeeded', progress: 100 });
      runs.push((await real.getRun('c', run.id))!);
    }
  });
  afterEach(async () => {
    await real.close();
  });

  it('reads a layer from the store once, then gives the same bytes from memory', async () => {
    const { store, reads } = counted(real);
    const cache = new LayerCache();
    const first = await collect(await cache.pieces(store, runs[0]!.id, 'points'));
    expect(first.equals(Buffer.from(text(0)))).toBe(true);
    expect(reads()).toBe(1);
    const again = await collect(await cache.pieces(store, runs[0]!.id, 'points'));
    expect(again.equals(first)).toBe(true);
    expect(reads()).toBe(1);
    expect(cache.bytes).toBe(first.length);
    // another layer of the same run is its own entry
    await collect(await cache.pieces(store, runs[0]!.id, 'noise'));
    expect(reads()).toBe(2);
  });

  it('keeps a layer only once read whole, never one over the bound per layer, and lets the least recently sent go past the bound', async () => {
    const { store, reads } = counted(real);
    const size = Buffer.byteLength(text(0));
    // the read is no client's: one gone after the first piece leaves the layer kept, read once
    const gone = new LayerCache(2 * size + 10, size);
    for await (const p of (await gone.pieces(store, runs[0]!.id, 'points'))!) {
      expect(p.length).toBeGreaterThan(0);
      break;
    }
    expect(gone.bytes).toBe(size);
    expect((await collect(await gone.pieces(store, runs[0]!.id, 'points'))).equals(Buffer.from(text(0)))).toBe(true);
    expect(reads()).toBe(1);
    const cache = new LayerCache(2 * size + 10, size);
    for (const r of runs) await collect(await cache.pieces(store, r.id, 'points'));
    expect(reads()).toBe(4);
    // three layers over a bound of two: the first is let go, the last two are kept
    expect(cache.bytes).toBe(Buffer.byteLength(text(1)) + Buffer.byteLength(text(2)));
    await collect(await cache.pieces(store, runs[2]!.id, 'points'));
    expect(reads()).toBe(4);
    await collect(await cache.pieces(store, runs[0]!.id, 'points'));
    expect(reads()).toBe(5);
    const small = new LayerCache(10 * size, size - 1);
    await collect(await small.pieces(store, runs[1]!.id, 'points'));
    expect(small.bytes).toBe(0);
  });

  it('reads a layer once for requests at the same time, also one too large to keep, each getting every byte', async () => {
    const { store, reads } = counted(real);
    const cache = new LayerCache();
    const asked = await Promise.all([0, 1, 2].map(() => cache.pieces(store, runs[1]!.id, 'points')));
    const got = await Promise.all(asked.map(collect));
    for (const g of got) expect(g.equals(Buffer.from(text(1)))).toBe(true);
    expect(reads()).toBe(1);
    expect(cache.bytes).toBe(got[0]!.length);
    // too large to keep (the bound is under the first stored piece): the first request goes on
    // from where the shared read stopped, the others read their own, and nothing is kept
    const small = new LayerCache(1 << 20, 100);
    const many = await Promise.all([0, 1].map(() => small.pieces(store, runs[2]!.id, 'points')));
    for (const m of await Promise.all(many.map(collect))) expect(m.equals(Buffer.from(text(2)))).toBe(true);
    expect(reads()).toBe(3);
    expect(small.bytes).toBe(0);
  });

  it('makes an index from the bytes a whole read kept, holding them once, and sends what it indexed', async () => {
    const { store, reads } = counted(real);
    const cache = new LayerCache();
    const whole = await collect(await cache.pieces(store, runs[0]!.id, 'points'));
    const held = cache.bytes;
    expect(held).toBe(whole.length);
    const given: Uint8Array[] = [];
    const index = await cache.index(`${runs[0]!.id}/points`, () => store.getRunLayerBytes(runs[0]!.id, 'points') as never, async (bytes) => {
      given.push(bytes);
      return indexParts(bytes);
    });
    // no second read, and the index's bytes are those kept: only its arrays are added
    expect(reads()).toBe(1);
    expect(given.length).toBe(1);
    expect(given[0]!.buffer).toBeInstanceOf(SharedArrayBuffer);
    expect(index.count).toBe(200);
    expect(index.feature(3)).toBe(`{"type":"Feature","id":"é0-3","geometry":null,"properties":{"n":3}}`);
    const parts = indexParts(given[0]!);
    const arrays = parts.spans.byteLength + parts.idEnds.byteLength + parts.boxes.byteLength + parts.times.byteLength + 2 * parts.ids.length;
    expect(cache.bytes).toBe(held + arrays);
    // sent whole again from the same memory; asked again, the index is not made again
    const again = (await cache.pieces(store, runs[0]!.id, 'points')) as Buffer[];
    expect(again.length).toBe(1);
    expect(again[0]!.buffer).toBe(given[0]!.buffer);
    await cache.index(`${runs[0]!.id}/points`, () => Promise.reject(new Error('read again')), async () => Promise.reject(new Error('indexed again')));
    expect(reads()).toBe(1);
  });

  it('makes one index for requests at the same time, and keeps it with its bytes from then on', async () => {
    const { store, reads } = counted(real);
    const cache = new LayerCache();
    let made = 0;
    const indexer = async (bytes: Uint8Array) => {
      made++;
      return indexParts(bytes);
    };
    const load = async () => (await store.getRunLayerBytes(runs[1]!.id, 'hotspots'))!;
    const [a, b] = await Promise.all([cache.index('k', load, indexer), cache.index('k', load, indexer)]);
    expect(a).toBe(b);
    expect([made, reads()]).toEqual([1, 1]);
    expect(cache.bytes).toBeGreaterThan(Buffer.byteLength(text(1)));
  });

  it('serves a whole layer GET from memory the second time, the same bytes and headers', async () => {
    const { store, reads } = counted(real);
    const app = await buildApp({ config: testConfig(), logger: false, store });
    await app.ready();
    try {
      const url = `/v1/datasets/c/runs/${runs[1]!.id}/points`;
      const first = await app.inject({ method: 'GET', url });
      const second = await app.inject({ method: 'GET', url });
      expect(first.statusCode).toBe(200);
      expect(second.statusCode).toBe(200);
      expect(first.rawPayload.equals(Buffer.from(text(1)))).toBe(true);
      expect(second.rawPayload.equals(first.rawPayload)).toBe(true);
      for (const h of ['content-type', 'etag', 'last-modified', 'x-roost-run', 'vary']) expect(second.headers[h]).toBe(first.headers[h]);
      expect(reads()).toBe(1);
    } finally {
      await app.close();
    }
  });
});
