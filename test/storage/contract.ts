/**
 * The store contract: one suite that every engine must pass. Each test gets a fresh database
 * (SQLite: a new file; PostgreSQL: a new schema) and may open several stores on it to check what
 * happens between processes or instances.
 */
import { afterEach, beforeEach, describe, expect, it, vi } from 'vitest';
import type { NewDataset, ObservationRecord, RunPatch, Store, TrackSummary } from '../../src/storage/store.js';
import { StoreError } from '../../src/storage/store.js';
import { DAY_MS, T0, fromText, propertyMatches, record, seededRecords } from './fixtures.js';

/** A fresh, empty database that stores can be opened on. */
export interface TestDatabase {
  /** a new store (own connection or pool) on this database, migrated */
  open(): Promise<Store>;
  /** removes the database */
  drop(): Promise<void>;
}

export interface StoreHarness {
  /** null when the engine can be tested; else why not (the suite is then reported as skipped) */
  skipReason: string | null;
  newDatabase(): Promise<TestDatabase>;
}

const DS: NewDataset = { id: 'herons', name: 'Heron nests', settings: { eps: 250, min_points: 5 }, idProperty: null, window: 'P30D', schedule: { cron: '0 2 * * *', timezone: 'Europe/Berlin' }, webhook: null };
const KEEP = { replace: false, partial: false };

/**
 * The oracle for longitude extents, by brute force: for every observation taken as the west end,
 * the east end is the one farthest eastwards from it; the smallest such span wins (ties to the
 * plain range, then to the least west). West > east means the range crosses ±180; one that would
 * start at +180 is the plain range (the same meridian as -180).
 */
export function smallestLonRange(lons: readonly number[]): [number, number] {
  const min = Math.min(...lons);
  const max = Math.max(...lons);
  let best: [number, number] = [min, max];
  let width = max - min;
  let crossing = false;
  for (const w of lons) {
    let span = 0;
    let east = w;
    for (const x of lons) {
      const d = (((x - w) % 360) + 360) % 360;
      if (d > span) {
        span = d;
        east = x;
      }
    }
    if (w <= east || w === 180) continue; // not a range across ±180 (or the plain one again)
    if (span < width - 1e-9 || (crossing && Math.abs(span - width) <= 1e-9 && w < best[0])) {
      width = span;
      best = [w, east];
      crossing = true;
    }
  }
  return best;
}

async function rejects(p: Promise<unknown>, code: string): Promise<void> {
  await expect(p).rejects.toBeInstanceOf(StoreError);
  await p.catch((e: StoreError) => expect(e.code).toBe(code));
}

async function all(store: Store, datasetId: string, q: Parameters<Store['listObservations']>[1]): Promise<string[]> {
  const out: string[] = [];
  let cursor = q.cursor;
  for (let guard = 0; guard < 10_000; guard++) {
    const page = await store.listObservations(datasetId, { ...q, cursor });
    expect(page.features.length).toBeLessThanOrEqual(q.limit);
    out.push(...page.features);
    if (page.nextCursor === null) return out;
    expect(page.features.length).toBe(q.limit);
    cursor = page.nextCursor;
  }
  throw new Error('paging did not end');
}

function inBbox(r: ObservationRecord, [w, s, e, n]: [number, number, number, number]): boolean {
  const lonOk = w <= e ? r.lon >= w && r.lon <= e : r.lon >= w || r.lon <= e;
  return lonOk && r.lat >= s && r.lat <= n;
}

export function runStoreContract(name: string, harness: StoreHarness): void {
  if (harness.skipReason !== null) console.warn(`[storage] ${name} contract suite SKIPPED: ${harness.skipReason}`);
  describe.skipIf(harness.skipReason !== null)(`store contract: ${name}${harness.skipReason !== null ? ` (skipped: ${harness.skipReason})` : ''}`, () => {
    let db: TestDatabase;
    let store: Store;
    const opened: Store[] = [];
    const open = async (): Promise<Store> => {
      const s = await db.open();
      opened.push(s);
      return s;
    };

    beforeEach(async () => {
      db = await harness.newDatabase();
      store = await open();
    });
    afterEach(async () => {
      for (const s of opened.splice(0)) await s.close();
      await db.drop();
    });

    describe('migrations', () => {
      it('apply once: migrating again, and from two stores at once, keeps the data', async () => {
        await store.createDataset(DS);
        await store.migrate();
        const [a, b] = [await open(), await open()];
        await Promise.all([a.migrate(), b.migrate(), store.migrate()]);
        expect((await a.getDataset('herons'))?.name).toBe('Heron nests');
      });
    });

    describe('datasets', () => {
      it('create, read, list, update and delete', async () => {
        const created = await store.createDataset(DS);
        expect(created).toMatchObject({ ...DS });
        expect(Date.parse(created.createdAt)).not.toBeNaN();
        expect(created.updatedAt).toBe(created.createdAt);
        expect(await store.getDataset('herons')).toEqual(created);
        expect(await store.getDataset('nope')).toBeNull();
        await store.createDataset({ ...DS, id: 'egrets', name: 'Egrets', schedule: null, webhook: { url: 'https://example.org/hook', secret: 's3' } });
        expect((await store.listDatasets()).map((d) => d.id)).toEqual(['egrets', 'herons']);

        await new Promise((r) => setTimeout(r, 5));
        const changed = await store.updateDataset('herons', { name: 'Herons', schedule: null, settings: { eps: 300 } });
        expect(changed).toMatchObject({ id: 'herons', name: 'Herons', schedule: null, settings: { eps: 300 }, window: 'P30D', createdAt: created.createdAt });
        expect(Date.parse(changed.updatedAt)).toBeGreaterThan(Date.parse(created.updatedAt));
        expect((await store.getDataset('egrets'))?.webhook).toEqual({ url: 'https://example.org/hook', secret: 's3' });

        expect(await store.deleteDataset('herons')).toBe(true);
        expect(await store.deleteDataset('herons')).toBe(false);
        expect(await store.getDataset('herons')).toBeNull();
      });

      it('refuses a second dataset with the same id, bad ids and settings, and changes to unknown datasets', async () => {
        await store.createDataset(DS);
        await rejects(store.createDataset({ ...DS, name: 'again' }), 'conflict');
        await rejects(store.createDataset({ ...DS, id: 'has space' }), 'invalid');
        await rejects(store.createDataset({ ...DS, id: '' }), 'invalid');
        await rejects(store.createDataset({ ...DS, id: 'x', settings: [] as unknown as Record<string, unknown> }), 'invalid');
        await rejects(store.updateDataset('nope', { name: 'x' }), 'not-found');
        expect((await store.getDataset('herons'))?.name).toBe('Heron nests');
      });

      it('deleting a dataset removes its observations, runs and slots', async () => {
        await store.createDataset(DS);
        await store.ingest('herons', seededRecords(1, 20), KEEP);
        const run = await store.createRun({ datasetId: 'herons', settings: {}, trigger: 'request' });
        await store.createScheduledRun({ datasetId: 'herons', settings: {}, trigger: 'schedule' }, '2024-05-01T02:00:00Z');
        await store.deleteDataset('herons');
        await store.createDataset(DS);
        expect(await store.countObservations('herons')).toBe(0);
        expect(await store.getRun('herons', run.id)).toBeNull();
        expect(await store.createScheduledRun({ datasetId: 'herons', settings: {}, trigger: 'schedule' }, '2024-05-01T02:00:00Z')).not.toBeNull();
      });

      it('deleting a dataset while batches arrive from another store leaves no observation behind', async () => {
        const other = await open();
        for (let round = 0; round < 3; round++) {
          await store.createDataset(DS);
          const batches = Array.from({ length: 6 }, (_, k) => seededRecords(100 + round * 10 + k, 300).map((r) => ({ ...r, id: `${round}-${k}-${r.id}` })));
          const posts = batches.map((b) => other.ingest('herons', b, KEEP).then(() => 'stored', (e: StoreError) => e.code));
          await new Promise((resolve) => setTimeout(resolve, round * 3));
          const deleted = await store.deleteDataset('herons');
          const outcomes = await Promise.all(posts);
          expect(deleted).toBe(true);
          expect(outcomes.every((o) => o === 'stored' || o === 'not-found'), outcomes.join()).toBe(true);
          // an observation of a dataset that no longer exists would be counted here
          expect(await store.countObservations('herons')).toBe(0);
        }
      });
    });

    describe('ingestion', () => {
      beforeEach(async () => {
        await store.createDataset(DS);
      });

      it('stores new observations and keeps feature texts byte for byte', async () => {
        const odd = fromText('odd', 10, 20, '{"type":"Feature",  "properties":{"name":"Straße \u{1F426}","b":1,"a":2},"geometry":{"type":"Point","coordinates":[10,20]}}');
        const res = await store.ingest('herons', [record('a', 1, 2), odd], KEEP);
        expect(res).toEqual({ accepted: ['a', 'odd'], duplicates: [], replaced: [], conflicts: [], stored: true });
        expect(await store.countObservations('herons')).toBe(2);
        const page = await store.listObservations('herons', { limit: 10 });
        expect(page.features[1]).toBe(odd.feature);
      });

      it('re-posting the same batch stores nothing twice and reports duplicates', async () => {
        const batch = seededRecords(2, 50);
        await store.ingest('herons', batch, KEEP);
        const again = await store.ingest('herons', batch, KEEP);
        expect(again).toEqual({ accepted: [], duplicates: batch.map((r) => r.id), replaced: [], conflicts: [], stored: true });
        expect(await store.countObservations('herons')).toBe(50);
      });

      it('a changed observation is a conflict that stores nothing, unless replace is asked', async () => {
        await store.ingest('herons', [record('a', 1, 2, { n: 1 }), record('b', 3, 4)], KEEP);
        const changed = record('a', 1, 2, { n: 2 });
        const res = await store.ingest('herons', [record('c', 5, 6), changed, record('b', 3, 4)], KEEP);
        expect(res).toEqual({ accepted: ['c'], duplicates: ['b'], replaced: [], conflicts: ['a'], stored: false });
        expect(await store.countObservations('herons')).toBe(2);
        expect((await store.listObservations('herons', { limit: 10 })).features[0]).toBe(record('a', 1, 2, { n: 1 }).feature);

        const rep = await store.ingest('herons', [record('c', 5, 6), changed], { replace: true, partial: false });
        expect(rep).toEqual({ accepted: ['c'], duplicates: [], replaced: ['a'], conflicts: [], stored: true });
        // the replaced observation keeps its place in the order
        expect((await store.listObservations('herons', { limit: 10 })).features).toEqual([changed.feature, record('b', 3, 4).feature, record('c', 5, 6).feature]);
        const cols = await store.loadForRun('herons');
        expect(cols.ids).toEqual(['a', 'b', 'c']);
      });

      it('stores and loads ids holding line breaks, tabs and backslashes, in insertion order', async () => {
        const ids = ['first', 'two\nlines', 'last\n', 'plain', 'tab\there', 'back\\slash', 'cr\r', '\\N', '\\'];
        await store.ingest('herons', ids.map((id, k) => record(id, k, k)), { replace: false, partial: false });
        const cols = await store.loadForRun('herons');
        expect(cols.ids).toEqual(ids);
        expect([...cols.features]).toEqual(ids.map((id, k) => record(id, k, k).feature));
      });

      it('a rejected entry stores nothing; partial stores the valid ones', async () => {
        const batch = [record('a', 1, 2), record('b', 3, 4)];
        const res = await store.ingest('herons', batch, { replace: false, partial: false, rejected: [{ index: 2, reason: 'not a point' }] });
        expect(res.stored).toBe(false);
        expect(res.accepted).toEqual(['a', 'b']);
        expect(await store.countObservations('herons')).toBe(0);
        const part = await store.ingest('herons', batch, { replace: false, partial: true, rejected: [{ index: 2, reason: 'not a point' }] });
        expect(part).toEqual({ accepted: ['a', 'b'], duplicates: [], replaced: [], conflicts: [], stored: true });
        expect(await store.countObservations('herons')).toBe(2);
      });

      it('partial with a conflict stores the rest and leaves the stored version alone', async () => {
        await store.ingest('herons', [record('a', 1, 2, { v: 1 })], KEEP);
        const res = await store.ingest('herons', [record('a', 1, 2, { v: 2 }), record('b', 3, 4)], { replace: false, partial: true });
        expect(res).toEqual({ accepted: ['b'], duplicates: [], replaced: [], conflicts: ['a'], stored: true });
        expect((await store.listObservations('herons', { limit: 10 })).features).toEqual([record('a', 1, 2, { v: 1 }).feature, record('b', 3, 4).feature]);
      });

      it('within one batch: a repeat is stored once and counted as duplicate; a different repeat is a conflict even with replace', async () => {
        const res = await store.ingest('herons', [record('a', 1, 2), record('b', 1, 2), record('a', 1, 2)], KEEP);
        expect(res).toEqual({ accepted: ['a', 'b'], duplicates: ['a'], replaced: [], conflicts: [], stored: true });
        expect(await store.countObservations('herons')).toBe(2);
        const clash = await store.ingest('herons', [record('c', 1, 2, { v: 1 }), record('d', 0, 0), record('c', 1, 2, { v: 2 })], { replace: true, partial: false });
        expect(clash).toEqual({ accepted: ['d'], duplicates: [], replaced: [], conflicts: ['c'], stored: false });
        const partial = await store.ingest('herons', [record('c', 1, 2, { v: 1 }), record('d', 0, 0), record('c', 1, 2, { v: 2 })], { replace: true, partial: true });
        expect(partial).toMatchObject({ accepted: ['d'], conflicts: ['c'], stored: true });
        expect(await store.countObservations('herons')).toBe(3);
      });

      it('refuses an unknown dataset and malformed records', async () => {
        await rejects(store.ingest('nope', [record('a', 1, 2)], KEEP), 'not-found');
        await rejects(store.ingest('herons', [{ ...record('a', 1, 2), lat: 91 }], KEEP), 'invalid');
        await rejects(store.ingest('herons', [{ ...record('a', 1, 2), observedAt: 1.5 }], KEEP), 'invalid');
        expect(await store.countObservations('herons')).toBe(0);
      });

      it('two stores posting overlapping batches at once store each id exactly once', async () => {
        const other = await open();
        const recs = seededRecords(3, 300);
        const a = recs.slice(0, 200);
        const b = recs.slice(100, 300);
        const results = await Promise.all([store.ingest('herons', a, KEEP), other.ingest('herons', b, KEEP), store.ingest('herons', b, KEEP)]);
        const accepted = results.flatMap((r) => r.accepted);
        expect(new Set(accepted).size).toBe(accepted.length);
        expect(accepted.length).toBe(300);
        expect(await store.countObservations('herons')).toBe(300);
      });

      it('deletes one observation (a retraction)', async () => {
        await store.ingest('herons', [record('a', 1, 2), record('b', 3, 4)], KEEP);
        expect(await store.deleteObservation('herons', 'a')).toBe(true);
        expect(await store.deleteObservation('herons', 'a')).toBe(false);
        expect(await store.countObservations('herons')).toBe(1);
        // the id is free again
        expect((await store.ingest('herons', [record('a', 9, 9)], KEEP)).accepted).toEqual(['a']);
      });
    });

    describe('listing', () => {
      const recs = seededRecords(7, 400);
      beforeEach(async () => {
        await store.createDataset(DS);
        await store.createDataset({ ...DS, id: 'other' });
        await store.ingest('herons', recs.slice(0, 250), KEEP);
        await store.ingest('other', seededRecords(8, 50), KEEP);
        await store.ingest('herons', recs.slice(250), KEEP);
      });

      it('pages through everything in insertion order, each observation once', async () => {
        for (const limit of [1, 7, 400, 1000]) {
          expect(await all(store, 'herons', { limit })).toEqual(recs.map((r) => r.feature));
        }
        await rejects(store.listObservations('herons', { limit: 10, cursor: 'garbage!' }), 'invalid');
        await rejects(store.listObservations('herons', { limit: 0 }), 'invalid');
        // each listed observation comes with its stored position
        const page = await store.listObservations('herons', { limit: 300 });
        expect(page.lon).toEqual(recs.slice(0, 300).map((r) => r.lon));
        expect(page.lat).toEqual(recs.slice(0, 300).map((r) => r.lat));
      });

      it('a cursor stays valid while observations are added and removed', async () => {
        const first = await store.listObservations('herons', { limit: 100 });
        await store.deleteObservation('herons', recs[50]!.id); // already seen
        await store.deleteObservation('herons', recs[150]!.id); // not yet seen
        const late = record('late', 0, 0);
        await store.ingest('herons', [late], KEEP);
        const rest = await all(store, 'herons', { limit: 100, cursor: first.nextCursor as string });
        expect([...first.features, ...rest]).toEqual([...recs.filter((_, i) => i !== 150).map((r) => r.feature), late.feature]);
      });

      it('filters by bbox, including one across the antimeridian', async () => {
        const boxes: [number, number, number, number][] = [[-30, -20, 40, 35], [150, -60, -150, 60], [170, 0, -170, 85], [-180, -90, 180, 90]];
        for (const bbox of boxes) {
          const want = recs.filter((r) => inBbox(r, bbox)).map((r) => r.feature);
          expect(want.length).toBeGreaterThan(0);
          expect(await all(store, 'herons', { bbox, limit: 33 })).toEqual(want);
        }
        await rejects(store.listObservations('herons', { bbox: [0, 10, 5, 0], limit: 5 }), 'invalid');
      });

      it('counts matching observations, reads one by id, and gives the extent of a dataset', async () => {
        const bbox: [number, number, number, number] = [170, 0, -170, 85];
        expect(await store.countObservations('herons', { bbox })).toBe(recs.filter((r) => inBbox(r, bbox)).length);
        expect(await store.countObservations('herons', {})).toBe(400);
        expect(await store.getObservation('herons', recs[17]!.id)).toBe(recs[17]!.feature);
        expect(await store.getObservation('herons', 'no-such-id')).toBeNull();
        const extent = await store.observationExtent('herons');
        const times = recs.flatMap((r) => (r.observedAt === null ? [] : [r.observedAt]));
        const [west, east] = smallestLonRange(recs.map((r) => r.lon));
        expect(extent).toEqual({
          count: 400,
          bbox: [west, Math.min(...recs.map((r) => r.lat)), east, Math.max(...recs.map((r) => r.lat))],
          first: Math.min(...times),
          last: Math.max(...times),
        });
        await store.createDataset({ ...DS, id: 'empty' });
        expect(await store.observationExtent('empty')).toEqual({ count: 0, bbox: null, first: null, last: null });
        // another dataset's observation of the same id is not this one's
        expect(await store.getObservation('empty', recs[17]!.id)).toBeNull();
      });

      it('gives the longitude extent as the smallest range holding every observation, crossing ±180 when that is smaller (brute-force oracle)', async () => {
        // seed printed; ROOST_EXTENT_SEED varies it
        const seed = Number(process.env.ROOST_EXTENT_SEED ?? 20261203);
        console.log(`observation extents: seed ${seed} (set ROOST_EXTENT_SEED to vary)`);
        let state = seed >>> 0;
        const next = (): number => {
          // mulberry32
          state = (state + 0x6d2b79f5) >>> 0;
          let t = state;
          t = Math.imul(t ^ (t >>> 15), t | 1);
          t ^= t + Math.imul(t ^ (t >>> 7), t | 61);
          return ((t ^ (t >>> 14)) >>> 0) / 4294967296;
        };
        const wrap = (x: number): number => Math.round((((x + 540) % 360) - 180) * 1e6) / 1e6;
        // clusters around a few centres, some of them near ±180, and fixed edge cases
        const cases: number[][] = [[179.9, -179.9], [-180, 180], [10, 10], [170, -170, 0], [-179.95, 179.95, -179.99, 179.99], [0.01, 0.04, 0.05, 0.06]];
        for (let k = 0; k < 14; k++) {
          const centres = Array.from({ length: 1 + Math.floor(next() * 3) }, () => (k % 2 === 0 ? 180 : next() * 360 - 180) + (next() - 0.5) * 40);
          cases.push(Array.from({ length: 2 + Math.floor(next() * 40) }, () => wrap(centres[Math.floor(next() * centres.length)]! + (next() - 0.5) * next() * 30)));
        }
        for (const [k, lons] of cases.entries()) {
          const id = `extent-${k}`;
          await store.createDataset({ ...DS, id });
          await store.ingest(id, lons.map((lon, i) => record(`x${i}`, lon, (i % 9) - 4)), KEEP);
          const got = (await store.observationExtent(id)).bbox!;
          const want = smallestLonRange(lons);
          expect([got[0], got[2]], `${id}: ${lons.join(' ')}`).toEqual(want);
        }
        // on both sides of the antimeridian, as around Fiji: west > east
        expect((await store.observationExtent('extent-0')).bbox).toEqual([179.9, -4, -179.9, -3]);
        // two gaps as wide: the range with the least west
        expect((await store.observationExtent('extent-3')).bbox).toEqual([0, -4, -170, -2]);
        // -180 and 180 are one meridian: the plain range
        expect((await store.observationExtent('extent-1')).bbox).toEqual([-180, -4, 180, -3]);
      });

      it('filters by time window [from, to), leaving out observations without a time', async () => {
        const from = T0 + 5 * DAY_MS;
        const to = T0 + 12 * DAY_MS;
        const want = recs.filter((r) => r.observedAt !== null && r.observedAt >= from && r.observedAt < to).map((r) => r.feature);
        expect(want.length).toBeGreaterThan(10);
        expect(await all(store, 'herons', { from, to, limit: 50 })).toEqual(want);
        const open = recs.filter((r) => r.observedAt !== null && r.observedAt >= from).map((r) => r.feature);
        expect(await all(store, 'herons', { from, limit: 50 })).toEqual(open);
        // an observation exactly at `to` is left out, one exactly at `from` kept
        const edge = recs.find((r) => r.observedAt !== null)!;
        expect(await all(store, 'herons', { from: edge.observedAt!, to: edge.observedAt! + 1, limit: 10 })).toContain(edge.feature);
        expect(await all(store, 'herons', { from: edge.observedAt! - 1, to: edge.observedAt!, limit: 10 })).not.toContain(edge.feature);
      });

      it('counts all observations, those without a time, and those matching conditions', async () => {
        expect(await store.countObservations('herons')).toBe(recs.length);
        const untimed = recs.filter((r) => r.observedAt === null);
        expect(untimed.length).toBeGreaterThan(0);
        expect(await store.countObservations('herons', { untimed: true })).toBe(untimed.length);
        const from = T0 + 5 * DAY_MS;
        expect(await store.countObservations('herons', { from })).toBe(recs.filter((r) => r.observedAt !== null && r.observedAt >= from).length);
        const species = JSON.parse(untimed[0]!.feature).properties.species as string;
        const want = untimed.filter((r) => JSON.parse(r.feature).properties.species === species).length;
        expect(await store.countObservations('herons', { untimed: true, where: [{ property: 'species', value: species }] })).toBe(want);
        await rejects(store.countObservations('herons', { untimed: true, from }), 'invalid');
      });

      it('filters by property values the way the file filter does', async () => {
        const conditions: [string, string][] = [['species', 'heron'], ['count', '2'], ['count', '2.5'], ['count', '2.50'], ['count', '02'], ['seen', 'true'], ['seen', 'false'], ['note', 'null'], ['note', 'ok'], ['missing', 'x']];
        for (const [property, value] of conditions) {
          const want = recs.filter((r) => propertyMatches(r.feature, property, value)).map((r) => r.feature);
          if (!['count=2.50', 'count=02', 'missing=x'].includes(`${property}=${value}`)) expect(want.length).toBeGreaterThan(0);
          expect(await all(store, 'herons', { where: [{ property, value }], limit: 64 }), `${property}=${value}`).toEqual(want);
        }
        // numbers that are the same as text ("count": "2" and "count": 2) both match, as in the file filter
        expect(recs.some((r) => propertyMatches(r.feature, 'count', '2') && r.feature.includes('"count":"2"'))).toBe(true);
        const both = recs.filter((r) => propertyMatches(r.feature, 'species', 'ibis') && propertyMatches(r.feature, 'seen', 'true')).map((r) => r.feature);
        expect(await all(store, 'herons', { where: [{ property: 'species', value: 'ibis' }, { property: 'seen', value: 'true' }], limit: 64 })).toEqual(both);
      });

      it('matches property names and values holding dots, quotes, backslashes and a leading $, listing and loading', async () => {
        await store.createDataset({ ...DS, id: 'names' });
        const odd = { 'a.b': 'x', 'q"k': 'y', 'b\\s': 'z', $d: 'w', 'ü': 1e2, "o'k": "it's", 'e\\': "\\'; DROP TABLE observations; --" };
        await store.ingest('names', [record('1', 0, 0, odd), record('2', 0, 0, { a: { b: 'x' } })], KEEP);
        const cases = [['a.b', 'x'], ['q"k', 'y'], ['b\\s', 'z'], ['$d', 'w'], ['ü', '100'], ["o'k", "it's"], ['e\\', "\\'; DROP TABLE observations; --"]] as const;
        for (const [property, value] of cases) {
          expect((await store.listObservations('names', { where: [{ property, value }], limit: 5 })).features, property).toHaveLength(1);
          expect((await store.loadForRun('names', { where: [{ property, value }] })).ids, property).toEqual(['1']);
        }
        expect(await store.countObservations('names')).toBe(2);
      });
    });

    describe('run input', () => {
      it('loads the matching observations as columns in insertion order', async () => {
        await store.createDataset(DS);
        const recs = seededRecords(11, 500);
        await store.ingest('herons', recs, KEEP);
        const all = await store.loadForRun('herons');
        expect(all.ids).toEqual(recs.map((r) => r.id));
        expect(Array.from(all.lon)).toEqual(recs.map((r) => r.lon));
        expect(Array.from(all.lat)).toEqual(recs.map((r) => r.lat));
        expect(Array.from(all.observedAt)).toEqual(recs.map((r) => r.observedAt ?? NaN));
        expect(all.weight).not.toBeNull();
        expect(Array.from(all.weight!)).toEqual(recs.map((r) => r.weight ?? NaN));
        expect([...all.features]).toEqual(recs.map((r) => r.feature));

        const from = T0 + 3 * DAY_MS;
        const to = T0 + 20 * DAY_MS;
        const sub = await store.loadForRun('herons', { from, to, where: [{ property: 'species', value: 'egret' }] });
        const want = recs.filter((r) => r.observedAt !== null && r.observedAt >= from && r.observedAt < to && propertyMatches(r.feature, 'species', 'egret'));
        expect(want.length).toBeGreaterThan(5);
        expect(sub.ids).toEqual(want.map((r) => r.id));
        expect(Array.from(sub.lon)).toEqual(want.map((r) => r.lon));
      });

      it('loads large and interleaved datasets whole and in order, numbers exact, texts byte for byte', async () => {
        await store.createDataset(DS);
        await store.createDataset({ ...DS, id: 'gulls', name: 'Gulls' });
        // numbers whose shortest decimal form needs 17 digits, or that are extreme, must come back exactly
        const hard = [-179.99999999999997, 0.30000000000000004, 5e-324, 1 / 3, -0.1, 89.99999999999999];
        const herons: ObservationRecord[] = [];
        const gulls: ObservationRecord[] = [];
        // 20 100 herons (more than one text chunk of the engines) in batches of 300, with a gull
        // after each batch: herons fill their seq range densely, the gulls sparsely
        for (let b = 0; b < 67; b++) {
          const batch: ObservationRecord[] = [];
          for (let i = 0; i < 300; i++) {
            const n = b * 300 + i;
            const lon = n < hard.length ? (hard[n] as number) : ((n * 7.3) % 360) - 180;
            const lat = n < hard.length ? (hard[(n + 1) % hard.length] as number) % 90 : ((n * 1.7) % 180) - 90;
            // some texts hold line breaks (escaped in JSON, raw in a text given as is)
            const r = n % 5000 === 17 ? fromText(`h${n}`, lon, lat, `{"type":"Feature",\n"id":"h${n}"}`, null, null) : record(`h${n}`, lon, lat, { n, note: n % 3 === 0 ? 'a\nb' : 'é😀' }, T0 + n, n % 2 === 0 ? n / 7 : null);
            batch.push(r);
          }
          await store.ingest('herons', batch, KEEP);
          herons.push(...batch);
          const g = record(`g${b}`, b, 0 - b, { b }, T0 + b);
          await store.ingest('gulls', [g], KEEP);
          gulls.push(g);
        }
        for (const [id, recs] of [['herons', herons], ['gulls', gulls]] as const) {
          const cols = await store.loadForRun(id);
          expect(cols.ids).toEqual(recs.map((r) => r.id));
          expect(Array.from(cols.lon)).toEqual(recs.map((r) => r.lon));
          expect(Array.from(cols.lat)).toEqual(recs.map((r) => r.lat));
          expect(Array.from(cols.observedAt)).toEqual(recs.map((r) => r.observedAt ?? NaN));
          expect(cols.weight === null ? null : Array.from(cols.weight)).toEqual(recs.some((r) => r.weight !== null) ? recs.map((r) => r.weight ?? NaN) : null);
          expect(cols.features.length).toBe(recs.length);
          expect([...cols.features]).toEqual(recs.map((r) => r.feature));
          expect(cols.features.at(recs.length - 1)).toBe(recs.at(-1)!.feature);
          expect(cols.features.at(recs.length)).toBeUndefined();
        }
        const window = await store.loadForRun('herons', { from: T0 + 19_990, to: T0 + 20_050 });
        expect(window.ids).toEqual(herons.filter((r) => r.observedAt !== null && r.observedAt >= T0 + 19_990 && r.observedAt < T0 + 20_050).map((r) => r.id));
        expect([...window.features]).toEqual(herons.filter((r) => window.ids.includes(r.id)).map((r) => r.feature));
      });

      it('gives null weights when no observation has one, and empty columns for an empty dataset', async () => {
        await store.createDataset(DS);
        const empty = await store.loadForRun('herons');
        expect(empty.ids).toEqual([]);
        expect(empty.lon.length).toBe(0);
        expect(empty.weight).toBeNull();
        await store.ingest('herons', [record('a', 1, 2), record('b', -179.5, -89)], KEEP);
        const cols = await store.loadForRun('herons');
        expect(cols.weight).toBeNull();
        expect(Array.from(cols.lon)).toEqual([1, -179.5]);
        const pos = await store.getPositions('herons', ['b', 'zz']);
        expect([...pos.entries()]).toEqual([['b', { lon: -179.5, lat: -89 }]]);
      });
    });

    describe('runs', () => {
      beforeEach(async () => {
        await store.createDataset(DS);
        await store.createDataset({ ...DS, id: 'other' });
      });

      it('go from queued to running to succeeded with progress, summary and timings', async () => {
        const run = await store.createRun({ datasetId: 'herons', settings: { eps: 250 }, trigger: 'request' });
        expect(run).toMatchObject({ datasetId: 'herons', status: 'queued', trigger: 'request', settings: { eps: 250 }, progress: 0, error: null, workerId: null, startedAt: null, finishedAt: null, summary: null });
        expect(run.id).toMatch(/^r\d{6,}$/);
        const claimed = await store.claimNextRun('w1');
        expect(claimed).toMatchObject({ id: run.id, status: 'running', workerId: 'w1' });
        expect(claimed!.startedAt).not.toBeNull();
        expect(await store.claimNextRun('w2')).toBeNull();
        await store.updateRun(run.id, { progress: 40 });
        const done = await store.updateRun(run.id, { status: 'succeeded', progress: 100, finishedAt: '2024-05-02T02:00:05.000Z', summary: { hotspots: 3 }, timings: { load: 12.5, cluster: 40 } }, ['running']);
        expect(done).toMatchObject({ status: 'succeeded', progress: 100, finishedAt: '2024-05-02T02:00:05.000Z', summary: { hotspots: 3 }, timings: { load: 12.5, cluster: 40 } });
        expect(await store.getRun('herons', run.id)).toEqual(done);
        expect(await store.getRun('other', run.id)).toBeNull();
        expect(await store.getRun('herons', 'r999999')).toBeNull();
        expect(await store.getRun('herons', 'nonsense')).toBeNull();
        // a late change guarded by status fails once the run has ended
        await rejects(store.updateRun(run.id, { status: 'cancelled' }, ['queued', 'running']), 'conflict');
        await rejects(store.updateRun('r999999', { progress: 1 }), 'not-found');
        await rejects(store.updateRun(run.id, { progress: 101 }), 'invalid');
        await rejects(store.createRun({ datasetId: 'nope', settings: {}, trigger: 'request' }), 'not-found');
      });

      it('are listed newest first with paging, and the latest of a status is found', async () => {
        const ids: string[] = [];
        for (let i = 0; i < 7; i++) ids.push((await store.createRun({ datasetId: i === 3 ? 'other' : 'herons', settings: { i }, trigger: 'schedule' })).id);
        const mine = ids.filter((_, i) => i !== 3);
        expect([...ids].sort()).toEqual(ids); // creation order
        const seen: string[] = [];
        let cursor: string | undefined;
        do {
          const page = await store.listRuns('herons', { limit: 4, cursor });
          seen.push(...page.runs.map((r) => r.id));
          cursor = page.nextCursor ?? undefined;
        } while (cursor !== undefined);
        expect(seen).toEqual([...mine].reverse());
        expect(await store.latestRun('herons')).toBeNull();
        await store.updateRun(mine[1]!, { status: 'succeeded' });
        await store.updateRun(mine[4]!, { status: 'succeeded' });
        await store.updateRun(mine[5]!, { status: 'failed', error: 'boom' });
        expect((await store.latestRun('herons'))?.id).toBe(mine[4]);
        expect((await store.latestRun('herons', 'succeeded', mine[4]))?.id).toBe(mine[1]);
        expect((await store.latestRun('herons', 'failed'))?.error).toBe('boom');
        expect(await store.latestRun('other')).toBeNull();
      });

      it('give the latest finished run as it is now, read again when its row changed, frozen as it is shared', async () => {
        vi.useFakeTimers({ toFake: ['Date'] });
        try {
          vi.setSystemTime(Date.parse('2026-11-01T10:00:00.000Z'));
          const a = await store.createRun({ datasetId: 'herons', settings: {}, trigger: 'request' });
          await store.updateRun(a.id, { status: 'succeeded', summary: { n: 1 } });
          const first = (await store.latestRun('herons'))!;
          expect(first.summary).toEqual({ n: 1 });
          expect(await store.latestRun('herons')).toEqual(first);
          expect(Object.isFrozen(first) && Object.isFrozen(first.summary)).toBe(true);
          expect(() => ((first.summary as Record<string, unknown>).n = 2)).toThrow(TypeError);
          // the same run changed later: read again
          vi.setSystemTime(Date.parse('2026-11-01T10:00:01.000Z'));
          await store.updateRun(a.id, { summary: { n: 3 } });
          expect((await store.latestRun('herons'))?.summary).toEqual({ n: 3 });
          // a newer run succeeds: it is the latest; the older one is still found before it
          const b = await store.createRun({ datasetId: 'herons', settings: {}, trigger: 'request' });
          expect((await store.latestRun('herons'))?.id).toBe(a.id);
          await store.updateRun(b.id, { status: 'succeeded', summary: { n: 4 } });
          expect((await store.latestRun('herons'))?.summary).toEqual({ n: 4 });
          expect((await store.latestRun('herons', 'succeeded', b.id))?.summary).toEqual({ n: 3 });
          // a running run is never kept: its progress shows as it moves
          const c = await store.createRun({ datasetId: 'herons', settings: {}, trigger: 'request' });
          await store.updateRun(c.id, { status: 'running', progress: 10 });
          expect((await store.latestRun('herons', 'running'))?.progress).toBe(10);
          await store.updateRun(c.id, { progress: 20 });
          expect((await store.latestRun('herons', 'running'))?.progress).toBe(20);
        } finally {
          vi.useRealTimers();
        }
      });

      it('store results that are served as stored, and tracks across runs', async () => {
        const r1 = await store.createRun({ datasetId: 'herons', settings: {}, trigger: 'request' });
        const r2 = await store.createRun({ datasetId: 'herons', settings: {}, trigger: 'request' });
        expect(await store.getRunLayer(r1.id, 'hotspots')).toBeNull();
        expect(await store.getRunHotspots(r1.id)).toEqual([]);
        const layers = { hotspots: '{"type":"FeatureCollection","features":[ ]}', centres: '{"type":"FeatureCollection","features":[]}', noise: '{"n":1}', points: '{"p":"\u00e9"}' };
        const hull = '{"type":"Polygon","coordinates":[[[0,0],[1,0],[0,1],[0,0]]]}';
        const hotspots = [
          { hotspotId: 1, trackId: 't1', members: ['a', 'b', 'c'], coreMembers: ['a', 'b'], hull, figures: { area_km2: 1.5 } },
          { hotspotId: 0, trackId: null, members: ['d'], coreMembers: ['d'], hull, figures: null },
          // ids and figures that need escaping or more than one byte, members beyond a MiB of text
          {
            hotspotId: 2,
            trackId: 't2é',
            members: ['é😀', '"q"', 'back\\slash', 'tab\there', ...Array.from({ length: 120_000 }, (_, i) => `m${i}`)],
            coreMembers: ['é😀', 'm7'],
            hull,
            figures: { centre: [1.5, -2], note: 'a "quoted" \\ é😀', nested: { n: null, list: [1, 'x'] } },
          },
        ];
        await store.saveRunResult(r1.id, { layers, hotspots });
        await store.saveRunResult(r1.id, { layers, hotspots }); // saving again replaces, never doubles
        await store.saveRunResult(r2.id, { layers, hotspots: [{ hotspotId: 0, trackId: 't1', members: ['a', 'b'], coreMembers: ['a'], hull }] });
        for (const l of ['hotspots', 'centres', 'noise', 'points'] as const) expect(await store.getRunLayer(r1.id, l)).toBe(layers[l]);
        expect(await store.getRunHotspots(r1.id)).toEqual([hotspots[1], hotspots[0], hotspots[2]]);
        // a track's history is made of succeeded runs only
        expect(await store.getTrack('herons', 't1')).toEqual([]);
        await store.updateRun(r1.id, { status: 'succeeded' });
        await store.updateRun(r2.id, { status: 'succeeded' });
        expect(await store.getTrack('herons', 't1')).toEqual([
          { runId: r1.id, hotspotId: 1, memberCount: 3, hull, figures: { area_km2: 1.5 } },
          { runId: r2.id, hotspotId: 0, memberCount: 2, hull, figures: null },
        ]);
        expect(await store.getTrack('other', 't1')).toEqual([]);
        await rejects(store.getRunLayer('r999999', 'noise'), 'not-found');
        await rejects(store.getRunLayerPieces('r999999', 'noise'), 'not-found');
        await rejects(store.getRunLayerBytes('r999999', 'noise'), 'not-found');
        await rejects(store.saveRunResult('r999999', { layers, hotspots: [] }), 'not-found');
        await rejects(store.saveRunResult(r1.id, { layers: { ...layers, noise: [] }, hotspots: [] }), 'invalid');
        await rejects(store.saveRunResult(r1.id, { layers: { ...layers, noise: 7 as unknown as string }, hotspots: [] }), 'invalid');
      });

      it('finish a run in the transaction that stores its result, and store nothing when the finish fails', async () => {
        const layers = { hotspots: '{"h":1}', centres: '{"c":1}', noise: '{"n":1}', points: '{"p":1}' };
        const hull = '{"type":"Polygon","coordinates":[[[0,0],[1,0],[0,1],[0,0]]]}';
        const hotspots = [{ hotspotId: 1, trackId: 't1', members: ['a', 'b'], coreMembers: ['a'], hull, figures: { count: 2 } }];
        const made = await store.createRun({ datasetId: 'herons', settings: {}, trigger: 'request' });
        const run = await store.claimRun(made.id, 'w:1', 60_000);
        let asked = 0;
        const finish = (): RunPatch => {
          asked++;
          return { status: 'succeeded', progress: 100, error: null, finishedAt: '2026-05-02T02:00:05.000Z', summary: { n: 2 }, timings: { total: 12.5 } };
        };
        // another claimer's save neither stores nor finishes
        await rejects(store.saveRunResult(run.id, { layers, hotspots, finish }, 'w:2'), 'conflict');
        expect(asked).toBe(0);
        expect(await store.getRunLayer(run.id, 'points')).toBeNull();
        // a finish that throws leaves neither the result nor the update
        const failing = (): RunPatch => {
          throw new Error('no timings');
        };
        await expect(store.saveRunResult(run.id, { layers, hotspots, finish: failing }, 'w:1')).rejects.toThrow('no timings');
        expect(await store.getRunLayer(run.id, 'points')).toBeNull();
        expect(await store.getRunHotspots(run.id)).toEqual([]);
        expect((await store.getRun('herons', run.id))!.status).toBe('running');
        // the claimer's save stores the result and the run's update together, asked for once
        await store.saveRunResult(run.id, { layers, hotspots, finish }, 'w:1');
        expect(asked).toBe(1);
        const done = (await store.getRun('herons', run.id))!;
        expect({ status: done.status, progress: done.progress, finishedAt: done.finishedAt, summary: done.summary, timings: done.timings, leaseUntil: done.leaseUntil }).toEqual({
          status: 'succeeded', progress: 100, finishedAt: '2026-05-02T02:00:05.000Z', summary: { n: 2 }, timings: { total: 12.5 }, leaseUntil: null,
        });
        expect(await store.getRunLayer(run.id, 'points')).toBe(layers.points);
        expect(await store.getRunHotspots(run.id)).toEqual(hotspots);
        expect(await store.getTrack('herons', 't1')).toEqual([{ runId: run.id, hotspotId: 1, memberCount: 2, hull, figures: { count: 2 } }]);
        // a finished run is no longer the claimer's to save again
        await rejects(store.saveRunResult(run.id, { layers, hotspots, finish }, 'w:1'), 'conflict');
        expect(asked).toBe(1);
      });

      it('list a dataset\'s tracks in track id order with paging, the active ones and the ended ones', async () => {
        const hull = '{"type":"Polygon","coordinates":[[[0,0],[1,0],[0,1],[0,0]]]}';
        const layers = { hotspots: '{}', centres: '{}', noise: '{}', points: '{}' };
        const spot = (hotspotId: number, trackId: string | null, n: number, figures: Record<string, unknown> | null = null) => ({
          hotspotId, trackId, members: Array.from({ length: n }, (_, k) => `${hotspotId}-${k}`), coreMembers: [], hull, figures,
        });
        const finished = async (datasetId: string, status: 'succeeded' | 'cancelled', hotspots: ReturnType<typeof spot>[]) => {
          const run = await store.createRun({ datasetId, settings: {}, trigger: 'schedule' });
          await store.saveRunResult(run.id, { layers, hotspots });
          return store.updateRun(run.id, { status, finishedAt: '2026-05-02T02:00:05.000Z' });
        };
        expect(await store.listTracks('herons', { limit: 10 })).toEqual({ tracks: [], nextCursor: null });
        const r1 = await finished('herons', 'succeeded', [spot(1, 't000001', 4), spot(2, 't000002', 6), spot(3, 't000010', 5), spot(4, null, 3)]);
        await finished('other', 'succeeded', [spot(1, 't000001', 9), spot(2, 't000003', 9)]);
        const r3 = await finished('herons', 'succeeded', [spot(1, 't000010', 7), spot(2, 't000001', 5, { count: 5, area_km2: 0.25 }), spot(3, 't1000000', 8)]);
        // a run cancelled after saving its result, and a run still queued, add nothing
        await finished('herons', 'cancelled', [spot(1, 't000002', 6), spot(2, 't000099', 4)]);
        await store.createRun({ datasetId: 'herons', settings: {}, trigger: 'request' });

        const seen: TrackSummary[] = [];
        let cursor: string | undefined;
        for (let guard = 0; guard < 10; guard++) {
          const page = await store.listTracks('herons', { limit: 3, cursor });
          expect(page.tracks.length).toBeLessThanOrEqual(3);
          seen.push(...page.tracks);
          if (page.nextCursor === null) break;
          cursor = page.nextCursor;
        }
        // shorter ids first: t000010 before t1000000, which a plain text order would reverse
        expect(seen.map((t) => t.trackId)).toEqual(['t000001', 't000002', 't000010', 't1000000']);
        const ref = (r: typeof r1) => ({ id: r.id, createdAt: r.createdAt, finishedAt: '2026-05-02T02:00:05.000Z' });
        expect(seen[0]).toEqual({ trackId: 't000001', runCount: 2, firstRun: ref(r1), lastRun: ref(r3), active: true, hotspotId: 2, memberCount: 5, figures: { count: 5, area_km2: 0.25 } });
        expect(seen[1]).toEqual({ trackId: 't000002', runCount: 1, firstRun: ref(r1), lastRun: ref(r1), active: false, hotspotId: 2, memberCount: 6, figures: null });
        expect(seen[2]).toMatchObject({ trackId: 't000010', runCount: 2, active: true, hotspotId: 1, memberCount: 7 });
        expect(seen[3]).toMatchObject({ trackId: 't1000000', runCount: 1, firstRun: ref(r3), active: true, hotspotId: 3 });
        expect((await store.getTrack('herons', 't000002')).map((p) => p.runId)).toEqual([r1.id]);

        const active = await store.listTracks('herons', { limit: 10, active: true });
        expect(active.tracks.map((t) => t.trackId)).toEqual(['t000001', 't000010', 't1000000']);
        expect((await store.listTracks('herons', { limit: 10, active: false })).tracks.map((t) => t.trackId)).toEqual(['t000002']);
        const first = await store.listTracks('herons', { limit: 1, active: true });
        expect((await store.listTracks('herons', { limit: 5, active: true, cursor: first.nextCursor! })).tracks.map((t) => t.trackId)).toEqual(['t000010', 't1000000']);
        // a track given out after a page was read comes on a later page, none is repeated or skipped
        const page1 = await store.listTracks('herons', { limit: 2 });
        await finished('herons', 'succeeded', [spot(1, 't000011', 4)]);
        const page2 = await store.listTracks('herons', { limit: 10, cursor: page1.nextCursor! });
        expect(page2.tracks.map((t) => [t.trackId, t.active])).toEqual([['t000010', false], ['t000011', true], ['t1000000', false]]);

        expect((await store.listTracks('other', { limit: 10 })).tracks.map((t) => t.trackId)).toEqual(['t000001', 't000003']);
        expect(await store.listTracks('nope', { limit: 10 })).toEqual({ tracks: [], nextCursor: null });
        await rejects(store.listTracks('herons', { limit: 0 }), 'invalid');
        await rejects(store.listTracks('herons', { limit: 1001 }), 'invalid');
        await rejects(store.listTracks('herons', { limit: 5, cursor: 'not-a-cursor' }), 'invalid');
        await rejects(store.listTracks('herons', { limit: 5, cursor: Buffer.from('{"t":"a\\u0000"}').toString('base64url') }), 'invalid');
      });

      it('keep large layers in pieces, given whole or in pieces, and hand them out piece by piece', async () => {
        const run = await store.createRun({ datasetId: 'herons', settings: {}, trigger: 'request' });
        expect(await store.getRunLayerPieces(run.id, 'points')).toBeNull();
        expect(await store.getRunLayerBytes(run.id, 'points')).toBeNull();
        // about 20 Mi characters; the first piece boundary (1 Mi) falls inside a surrogate pair
        const big = `${'x'.repeat((1 << 20) - 1)}😀é`.repeat(20);
        expect(big.charCodeAt((1 << 20) - 1)).toBeGreaterThanOrEqual(0xd800);
        const given = ['{"type":"FeatureCollection","features":[', '{"a":1}', ',{"b":"ü"}', ']}'];
        await store.saveRunResult(run.id, { layers: { hotspots: given, centres: '{}', noise: '{}', points: big }, hotspots: [] });
        const pieces: string[] = [];
        for await (const p of (await store.getRunLayerPieces(run.id, 'points'))!) pieces.push(p);
        expect(pieces.length).toBeGreaterThan(16); // more than two reads of eight
        expect(pieces.every((p) => p.length <= 1 << 20)).toBe(true);
        // no piece starts with the second half of a surrogate pair
        expect(pieces.every((p) => !(p.charCodeAt(0) >= 0xdc00 && p.charCodeAt(0) <= 0xdfff))).toBe(true);
        expect(pieces.join('') === big).toBe(true);
        expect((await store.getRunLayer(run.id, 'points')) === big).toBe(true);
        const kept: string[] = [];
        for await (const p of (await store.getRunLayerPieces(run.id, 'hotspots'))!) kept.push(p);
        expect(kept).toEqual(given);
        // as bytes: the UTF-8 of the same text, piece by piece, whatever the piece boundaries
        expect(await store.getRunLayerBytes(run.id, 'noise')).not.toBeNull();
        const bytes: Buffer[] = [];
        for await (const b of (await store.getRunLayerBytes(run.id, 'points'))!) bytes.push(b);
        expect(bytes.every((b) => Buffer.isBuffer(b))).toBe(true);
        expect(bytes.length).toBe(pieces.length);
        expect(Buffer.concat(bytes).equals(Buffer.from(big, 'utf8'))).toBe(true);
        const keptBytes: Buffer[] = [];
        for await (const b of (await store.getRunLayerBytes(run.id, 'hotspots'))!) keptBytes.push(b);
        expect(keptBytes.map((b) => b.toString('utf8'))).toEqual(given);
      });

      it('store layers given piece by piece on demand, as text or UTF-8 bytes, and nothing of a result whose pieces go wrong', async () => {
        const run = await store.createRun({ datasetId: 'herons', settings: {}, trigger: 'request' });
        const utf8 = (s: string): Uint8Array => new Uint8Array(Buffer.from(s, 'utf8'));
        // bytes of whole characters: two-, three- and four-byte ones, and a piece of several MiB
        const given = ['{"type":"FeatureCollection","features":[', '{"a":"é€😀"}', `,{"b":"${'ü'.repeat(3 << 20)}"}`, ']}'];
        let made = 0;
        function* onDemand(asBytes: boolean): Generator<string | Uint8Array> {
          for (const p of given) {
            made++;
            yield asBytes ? utf8(p) : p;
          }
        }
        const empty = (function* (): Generator<string> {})();
        await store.saveRunResult(run.id, { layers: { hotspots: onDemand(true), centres: onDemand(false), noise: empty, points: [utf8('{"p":1}')][Symbol.iterator]() }, hotspots: [] });
        expect(made).toBe(2 * given.length);
        const kept: string[] = [];
        for await (const p of (await store.getRunLayerPieces(run.id, 'hotspots'))!) kept.push(p);
        expect(kept.length).toBe(given.length);
        expect(kept.join('') === given.join('')).toBe(true);
        expect((await store.getRunLayer(run.id, 'centres')) === given.join('')).toBe(true);
        expect(await store.getRunLayer(run.id, 'noise')).toBe('');
        expect(await store.getRunLayer(run.id, 'points')).toBe('{"p":1}');
        // a piece of another kind half-way: the save fails and the result saved before stays whole
        function* broken(): Generator<unknown> {
          yield '{"type":"FeatureCollection","features":[';
          yield 7;
        }
        const hull = '{"type":"Polygon","coordinates":[[[0,0],[1,0],[0,1],[0,0]]]}';
        await rejects(
          store.saveRunResult(run.id, { layers: { hotspots: '{}', centres: '{}', noise: '{}', points: broken() as Iterable<string> }, hotspots: [{ hotspotId: 1, trackId: 't1', members: ['a'], coreMembers: ['a'], hull }] }),
          'invalid',
        );
        expect((await store.getRunLayer(run.id, 'hotspots')) === given.join('')).toBe(true);
        expect(await store.getRunLayer(run.id, 'points')).toBe('{"p":1}');
        expect(await store.getRunHotspots(run.id)).toEqual([]);
        await rejects(store.saveRunResult(run.id, { layers: { hotspots: '{}', centres: '{}', noise: '{}', points: utf8('{}') as unknown as string }, hotspots: [] }), 'invalid');
        // the store is still usable after a save that failed half-way
        await store.saveRunResult(run.id, { layers: { hotspots: '{}', centres: '{}', noise: '{}', points: '{"q":2}' }, hotspots: [] });
        expect(await store.getRunLayer(run.id, 'points')).toBe('{"q":2}');
      });

      it('each queued run is claimed by exactly one of many concurrent claimers on two stores', async () => {
        const other = await open();
        const ids = new Set<string>();
        for (let i = 0; i < 12; i++) ids.add((await store.createRun({ datasetId: 'herons', settings: {}, trigger: 'request' })).id);
        const claims = await Promise.all(Array.from({ length: 30 }, (_, i) => (i % 2 === 0 ? store : other).claimNextRun(`w${i}`)));
        const got = claims.filter((c) => c !== null).map((c) => c!.id);
        expect(new Set(got).size).toBe(got.length);
        expect(new Set(got)).toEqual(ids);
        expect(await store.claimNextRun('late')).toBeNull();
      });

      it('runs left running after a crash are failed with the reason or re-queued', async () => {
        const a = await store.createRun({ datasetId: 'herons', settings: {}, trigger: 'request' });
        const b = await store.createRun({ datasetId: 'herons', settings: {}, trigger: 'request' });
        const c = await store.createRun({ datasetId: 'other', settings: {}, trigger: 'request' });
        const d = await store.createRun({ datasetId: 'herons', settings: {}, trigger: 'request' });
        await store.claimNextRun('old');
        await store.claimNextRun('old');
        await store.claimNextRun('live');
        await store.updateRun(b.id, { progress: 55 });
        // a live worker's fresh runs are not touched by a staleness bound
        expect(await store.markInterruptedRuns('stale', { staleMs: 60_000 })).toEqual([]);
        expect(await store.requeueInterruptedRuns({ workerId: 'old' })).toEqual([a.id, b.id]);
        expect(await store.getRun('herons', b.id)).toMatchObject({ status: 'queued', progress: 0, workerId: null, startedAt: null });
        expect(await store.markInterruptedRuns('the server stopped during the run')).toEqual([c.id]);
        expect(await store.getRun('other', c.id)).toMatchObject({ status: 'failed', error: 'the server stopped during the run' });
        expect((await store.getRun('other', c.id))!.finishedAt).not.toBeNull();
        expect((await store.getRun('herons', d.id))!.status).toBe('queued');
        expect((await store.claimNextRun('new'))?.id).toBe(a.id);
      });

      /** Calls reclaimExpiredRuns until it reclaims something (a lease of 1 ms runs out on the next clock tick). */
      const reclaimOnce = async (s: Store, max = 3): Promise<{ requeued: string[]; failed: string[] }> => {
        for (let guard = 0; guard < 1000; guard++) {
          const r = await s.reclaimExpiredRuns(max);
          if (r.requeued.length + r.failed.length > 0) return r;
          await new Promise((res) => setTimeout(res, 2));
        }
        throw new Error('no lease ran out');
      };

      it('keep the lease a claim had going into a save that took longer than the lease', async () => {
        const other = await open();
        const run = await store.createRun({ datasetId: 'herons', settings: {}, trigger: 'request' });
        const held = (await store.claimNextRun('w1:1', 1000))!;
        expect(held.id).toBe(run.id);
        let spent = 0;
        // a layer made while it is stored, slower than the whole lease (a busy wait: the save is one
        // transaction, during which no heartbeat could renew the lease)
        function* slow(): Generator<string> {
          const t0 = Date.now();
          while (Date.now() - t0 < 1200);
          spent = Date.now() - t0;
          yield '{"slow":true}';
        }
        await store.saveRunResult(run.id, { layers: { hotspots: '{}', centres: '{}', noise: '{}', points: slow() }, hotspots: [] }, 'w1:1');
        const after = (await store.getRun('herons', run.id))!;
        expect(spent).toBeGreaterThanOrEqual(1200);
        expect(Date.parse(after.leaseUntil!) - Date.parse(held.leaseUntil!)).toBeGreaterThanOrEqual(spent);
        // the lease has not run out: no other store takes the run over, and its claimer finishes it
        expect(await other.reclaimExpiredRuns(3)).toEqual({ requeued: [], failed: [] });
        expect(await store.updateRun(run.id, { status: 'succeeded', progress: 100 }, ['running'], 'w1:1')).toMatchObject({ status: 'succeeded' });
        expect(await store.getRunLayer(run.id, 'points')).toBe('{"slow":true}');
      });

      it('hold a lease: renewed only by their claim, taken over by any store once it runs out, failed after too many interruptions', async () => {
        const other = await open();
        const a = await store.createRun({ datasetId: 'herons', settings: {}, trigger: 'request' });
        const b = await store.createRun({ datasetId: 'herons', settings: {}, trigger: 'request' });
        const held = (await store.claimNextRun('w1:1', 60_000))!;
        expect(held).toMatchObject({ id: a.id, workerId: 'w1:1', interruptions: 0 });
        expect(Date.parse(held.leaseUntil!) - Date.parse(held.startedAt!)).toBeGreaterThan(50_000);
        expect(await store.renewRunLease(a.id, 'w1:1', 60_000)).toBe(true);
        expect(await other.renewRunLease(a.id, 'someone-else', 60_000)).toBe(false);
        // a live lease is never taken over
        expect(await other.reclaimExpiredRuns(3)).toEqual({ requeued: [], failed: [] });
        // b's claimer dies: its 1 ms lease runs out and another store puts it back in the queue
        expect((await store.claimNextRun('w2:1', 1))!.id).toBe(b.id);
        expect(await reclaimOnce(other)).toEqual({ requeued: [b.id], failed: [] });
        const back = (await store.getRun('herons', b.id))!;
        expect(back).toMatchObject({ status: 'queued', workerId: null, startedAt: null, leaseUntil: null, interruptions: 1, progress: 0 });
        expect(back.error).toMatch(/^interrupted 1 time: .*queued again$/);
        // the dead claimer's late writes are refused once another claim holds the run
        const again = (await other.claimNextRun('w3:1', 60_000))!;
        expect(again.id).toBe(b.id);
        expect(await store.renewRunLease(b.id, 'w2:1', 60_000)).toBe(false);
        await rejects(store.updateRun(b.id, { progress: 50 }, ['running'], 'w2:1'), 'conflict');
        await rejects(store.saveRunResult(b.id, { layers: { hotspots: '{}', centres: '{}', noise: '{}', points: '{}' }, hotspots: [] }, 'w2:1'), 'conflict');
        expect(await store.getRunLayer(b.id, 'points')).toBeNull();
        await store.saveRunResult(b.id, { layers: { hotspots: '{}', centres: '{}', noise: '{}', points: '{"mine":1}' }, hotspots: [] }, 'w3:1');
        expect(await store.getRunLayer(b.id, 'points')).toBe('{"mine":1}');
        const finished = await other.updateRun(b.id, { status: 'succeeded', progress: 100 }, ['running'], 'w3:1');
        expect(finished).toMatchObject({ status: 'succeeded', leaseUntil: null, error: 'interrupted 1 time: the process running it stopped before it finished; queued again' });
        // a run interrupted the most times allowed is failed, with what to do
        await store.updateRun(a.id, { status: 'cancelled' });
        const c = await store.createRun({ datasetId: 'other', settings: {}, trigger: 'request' });
        for (let time = 1; time <= 2; time++) {
          await rejects(store.claimRun(c.id, 'x', 0), 'invalid');
          expect((await store.claimRun(c.id, `w4:${time}`, 1)).workerId).toBe(`w4:${time}`);
          await rejects(store.claimRun(c.id, 'w5', 1), 'conflict');
          const r = await reclaimOnce(time % 2 === 0 ? store : other, 2);
          expect(r).toEqual(time < 2 ? { requeued: [c.id], failed: [] } : { requeued: [], failed: [c.id] });
        }
        const failed = (await store.getRun('other', c.id))!;
        expect(failed).toMatchObject({ status: 'failed', interruptions: 2, leaseUntil: null });
        expect(failed.finishedAt).not.toBeNull();
        expect(failed.error).toMatch(/^interrupted 2 times: .*not tried again\. .*narrow it/);
      });

      it('are taken over exactly once when many stores look for expired leases at the same time', async () => {
        const others = [store, await open(), await open()];
        const ids: string[] = [];
        for (let i = 0; i < 6; i++) {
          const r = await store.createRun({ datasetId: 'herons', settings: {}, trigger: 'request' });
          await store.claimRun(r.id, `dead:${i}`, 1);
          ids.push(r.id);
        }
        const seen: string[] = [];
        for (let guard = 0; guard < 1000 && seen.length < ids.length; guard++) {
          const got = await Promise.all(Array.from({ length: 9 }, (_, i) => others[i % 3]!.reclaimExpiredRuns(3)));
          for (const g of got) seen.push(...g.requeued, ...g.failed);
          if (seen.length < ids.length) await new Promise((res) => setTimeout(res, 2));
        }
        expect(seen.sort()).toEqual(ids);
        for (const id of ids) expect(await store.getRun('herons', id)).toMatchObject({ status: 'queued', interruptions: 1 });
      });
    });

    describe('schedule slots', () => {
      it('are claimed together with their run: one run per slot across racing stores, none for a slot taken', async () => {
        await store.createDataset(DS);
        const other = await open();
        const slot = '2024-05-02T00:00:00.000Z';
        const claim = (s: Store, datasetId: string, at: string, settings: Record<string, unknown> = {}) => s.createScheduledRun({ datasetId, settings, trigger: 'schedule' }, at);
        const runs = await Promise.all(Array.from({ length: 16 }, (_, i) => claim(i % 2 === 0 ? store : other, 'herons', slot, { eps: 90 })));
        const made = runs.filter((r) => r !== null);
        expect(made).toHaveLength(1);
        expect(made[0]).toMatchObject({ datasetId: 'herons', status: 'queued', trigger: 'schedule', settings: { eps: 90 } });
        expect((await store.listRuns('herons', { limit: 50 })).runs.map((r) => r.id)).toEqual([made[0]!.id]);
        // the same instant written with an offset is the same slot; the next night is a new one
        expect(await claim(other, 'herons', '2024-05-02T02:00:00+02:00')).toBeNull();
        expect(await claim(other, 'herons', '2024-05-03T00:00:00Z')).not.toBeNull();
        // refused: nothing claimed, so the slot stays free
        await rejects(claim(store, 'nope', slot), 'not-found');
        await rejects(claim(store, 'herons', '2024-05-04T00:00:00Z', [] as unknown as Record<string, unknown>), 'invalid');
        await rejects(claim(store, 'herons', 'tonight'), 'invalid');
        expect(await claim(store, 'herons', '2024-05-04T00:00:00Z')).not.toBeNull();
      });
    });

    describe('publishing settings', () => {
      it('are stored with the dataset as given, changed by a patch and cleared with null', async () => {
        const created = await store.createDataset(DS);
        expect(created.publish).toBeNull();
        const publish = { public: true, generalise_m: 250, min_count: 10, noise: 'withhold', properties: ['species'] };
        const changed = await store.updateDataset('herons', { publish });
        expect(changed.publish).toEqual(publish);
        expect((await (await open()).getDataset('herons'))?.publish).toEqual(publish);
        expect((await store.updateDataset('herons', { name: 'Renamed' })).publish).toEqual(publish);
        expect((await store.updateDataset('herons', { publish: null })).publish).toBeNull();
        const withIt = await store.createDataset({ ...DS, id: 'egrets', publish: { public: false, generalise_m: 100 } });
        expect(withIt.publish).toEqual({ public: false, generalise_m: 100 });
        await rejects(store.updateDataset('herons', { publish: [] as never }), 'invalid');
      });
    });

    describe('keys and audit records', () => {
      const hash = (n: number): string => n.toString(16).padStart(64, '0');
      it('store a key by its hash only, find it until revoked, and count keys in force', async () => {
        expect(await store.countKeys()).toBe(0);
        const k = await store.createKey({ id: 'k_00000000000a', tokenHash: hash(1), role: 'admin', datasetId: null, label: 'first admin' });
        expect(k).toMatchObject({ id: 'k_00000000000a', role: 'admin', datasetId: null, label: 'first admin', revokedAt: null });
        expect(Object.keys(k).sort()).toEqual(['createdAt', 'datasetId', 'id', 'label', 'revokedAt', 'role']);
        expect(await store.findKey(hash(1))).toEqual(k);
        expect(await store.findKey(hash(2))).toBeNull();
        // another store (process or instance) sees the same keys
        const other = await open();
        expect(await other.findKey(hash(1))).toEqual(k);
        expect(await other.countKeys()).toBe(1);
        const revoked = await other.revokeKey(k.id);
        expect(revoked?.revokedAt).not.toBeNull();
        expect(await store.findKey(hash(1))).toBeNull();
        expect(await store.countKeys()).toBe(0);
        // revoking again keeps the first time; an unknown id is null
        expect((await store.revokeKey(k.id))?.revokedAt).toBe(revoked?.revokedAt);
        expect(await store.revokeKey('k_0000000000ff')).toBeNull();
        expect((await store.listKeys()).map((x) => x.id)).toEqual([k.id]);
      });

      it('refuse a duplicate id or token, an unknown dataset and bad fields', async () => {
        await store.createDataset(DS);
        await store.createKey({ id: 'k_000000000001', tokenHash: hash(1), role: 'reader', datasetId: 'herons', label: null });
        await rejects(store.createKey({ id: 'k_000000000001', tokenHash: hash(2), role: 'reader', datasetId: null, label: null }), 'conflict');
        await rejects(store.createKey({ id: 'k_000000000002', tokenHash: hash(1), role: 'reader', datasetId: null, label: null }), 'conflict');
        await rejects(store.createKey({ id: 'k_000000000003', tokenHash: hash(3), role: 'reader', datasetId: 'nope', label: null }), 'not-found');
        await rejects(store.createKey({ id: 'k_000000000004', tokenHash: hash(4), role: 'owner' as never, datasetId: null, label: null }), 'invalid');
        await rejects(store.createKey({ id: 'key-5', tokenHash: hash(5), role: 'reader', datasetId: null, label: null }), 'invalid');
        await rejects(store.createKey({ id: 'k_000000000006', tokenHash: 'not-a-hash', role: 'reader', datasetId: null, label: null }), 'invalid');
        expect((await store.listKeys()).map((k) => k.id)).toEqual(['k_000000000001']);
      });

      it('delete a dataset-limited key with its dataset, so a new dataset of that id does not inherit it', async () => {
        await store.createDataset(DS);
        await store.createKey({ id: 'k_000000000001', tokenHash: hash(1), role: 'manager', datasetId: 'herons', label: null });
        await store.createKey({ id: 'k_000000000002', tokenHash: hash(2), role: 'admin', datasetId: null, label: null });
        expect(await store.deleteDataset('herons')).toBe(true);
        await store.createDataset(DS);
        expect(await store.findKey(hash(1))).toBeNull();
        expect((await store.listKeys()).map((k) => k.id)).toEqual(['k_000000000002']);
      });

      it('keep audit records newest first, in pages', async () => {
        for (let i = 0; i < 5; i++) {
          await store.appendAudit({ keyId: i % 2 === 0 ? 'k_000000000001' : null, actor: i % 2 === 0 ? 'key' : 'open', action: `POST /x/${i}`, datasetId: i === 0 ? null : 'herons', target: null, status: 200 + i });
        }
        const first = await store.listAudit({ limit: 2 });
        expect(first.records.map((r) => r.action)).toEqual(['POST /x/4', 'POST /x/3']);
        expect(first.records[0]).toMatchObject({ keyId: 'k_000000000001', actor: 'key', datasetId: 'herons', target: null, status: 204 });
        expect(Number.isNaN(Date.parse(first.records[0]!.at))).toBe(false);
        const second = await store.listAudit({ limit: 2, cursor: first.nextCursor! });
        const third = await store.listAudit({ limit: 2, cursor: second.nextCursor! });
        expect([...second.records, ...third.records].map((r) => r.action)).toEqual(['POST /x/2', 'POST /x/1', 'POST /x/0']);
        expect(third.nextCursor).toBeNull();
        await rejects(store.listAudit({ limit: 2, cursor: 'bogus' }), 'invalid');
        await rejects(store.appendAudit({ keyId: null, actor: 'someone' as never, action: 'x', datasetId: null, target: null, status: 0 }), 'invalid');
      });
    });

    describe('track numbers', () => {
      it('are reserved in blocks never handed out twice, per dataset, across stores', async () => {
        await store.createDataset(DS);
        await store.createDataset({ ...DS, id: 'other', schedule: null });
        const other = await open();
        const sizes = [1, 3, 2, 5, 1, 4, 2, 1];
        const firsts = await Promise.all(sizes.map((n, i) => (i % 2 === 0 ? store : other).reserveTrackNumbers('herons', n)));
        const taken = sizes.flatMap((n, i) => Array.from({ length: n }, (_, k) => firsts[i]! + k));
        // every number of 1..sum exactly once: no gap, no repeat
        expect([...taken].sort((a, b) => a - b)).toEqual(Array.from({ length: 19 }, (_, k) => k + 1));
        expect(await other.reserveTrackNumbers('other', 2)).toBe(1);
        await rejects(store.reserveTrackNumbers('nope', 1), 'not-found');
        await rejects(store.reserveTrackNumbers('herons', 0), 'invalid');
        await rejects(store.reserveTrackNumbers('herons', 1.5), 'invalid');
      });
    });
  });
}
