/**
 * The binary COPY reader behind PostgreSQL's loadForRun. Two sources of bytes: the PostgreSQL
 * server itself (source: the server's own `COPY … TO STDOUT (FORMAT binary)` output, compared
 * with a plain SELECT of the same rows), fed to the reader in chunks of every awkward size; and
 * streams encoded here by the layout the PostgreSQL 15 manual gives under COPY, "Binary Format"
 * (signature, flags, extension length; per row an int16 field count, then per field an int32
 * length, -1 for NULL, and the bytes; an int16 -1 as trailer), for the cases a server does not
 * produce on demand.
 */
import pg from 'pg';
import { to as copyTo } from 'pg-copy-streams';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { RUN_COPY_COLUMNS, RunCopyQuery, RunCopyReader } from '../../src/storage/pg-copy.js';
import type { RunInput } from '../../src/storage/store.js';
import { postgresSkipReason, TEST_DATABASE_URL } from '../reference/postgres.js';
import { rng } from '../reference/seeded.js';

interface Row {
  seq: number;
  lon: number;
  lat: number;
  t: number | null;
  w: number | null;
  id: string;
  text: string | Buffer;
}

/** One binary COPY stream of rows in the run column layout. */
function encode(rows: Row[], options: { trailer?: boolean; fields?: number } = {}): Buffer {
  const parts: Buffer[] = [Buffer.from('PGCOPY\n\xff\r\n\0', 'latin1'), Buffer.alloc(8)];
  const num = (v: number | null): Buffer => {
    if (v === null) return Buffer.from([0xff, 0xff, 0xff, 0xff]);
    const b = Buffer.alloc(12);
    b.writeInt32BE(8, 0);
    b.writeDoubleBE(v, 4);
    return b;
  };
  const text = (v: string | Buffer): Buffer => {
    const body = typeof v === 'string' ? Buffer.from(v, 'utf8') : v;
    const len = Buffer.alloc(4);
    len.writeInt32BE(body.length, 0);
    return Buffer.concat([len, body]);
  };
  for (const r of rows) {
    const count = Buffer.alloc(2);
    count.writeInt16BE(options.fields ?? 7, 0);
    parts.push(count, num(r.seq), num(r.lon), num(r.lat), num(r.t), num(r.w), text(r.id), text(r.text));
  }
  if (options.trailer !== false) parts.push(Buffer.from([0xff, 0xff]));
  return Buffer.concat(parts);
}

/** Feeds `bytes` in pieces of the given sizes (cycled) and returns the reader's result. */
function read(bytes: Buffer, sizes: number[] = [bytes.length]): RunInput {
  const reader = new RunCopyReader();
  for (let at = 0, k = 0; at < bytes.length; k++) {
    const n = Math.max(1, sizes[k % sizes.length] as number);
    reader.push(bytes.subarray(at, at + n));
    at += n;
  }
  return reader.finish();
}

function expectRows(got: RunInput, want: Row[]): void {
  const texts = want.map((r) => (typeof r.text === 'string' ? r.text : r.text.toString('utf8')));
  expect(got.ids).toEqual(want.map((r) => r.id));
  expect(Array.from(got.lon)).toEqual(want.map((r) => r.lon));
  expect(Array.from(got.lat)).toEqual(want.map((r) => r.lat));
  expect(Array.from(got.observedAt)).toEqual(want.map((r) => r.t ?? NaN));
  if (want.some((r) => r.w !== null)) expect(Array.from(got.weight!)).toEqual(want.map((r) => r.w ?? NaN));
  else expect(got.weight).toBeNull();
  expect(got.features.length).toBe(want.length);
  expect([...got.features]).toEqual(texts);
  for (let i = 0; i < want.length; i += 97) expect(got.features.at(i)).toBe(texts[i]);
}

function sampleRows(n: number, seed: number, text: (i: number) => string): Row[] {
  const r = rng(seed);
  return Array.from({ length: n }, (_, i) => ({
    seq: i + 1,
    lon: r.next() * 360 - 180,
    lat: r.next() * 180 - 90,
    t: i % 3 === 0 ? null : 1_714_521_600_000 + i,
    w: i % 4 === 0 ? i / 7 : null,
    id: `o-${i}`,
    text: text(i),
  }));
}

describe('RunCopyReader on streams laid out by the manual', () => {
  it('reads every row whatever the chunk boundaries', () => {
    const rows = sampleRows(500, 3, (i) => `{"type":"Feature","id":"o-${i}","properties":{"n":${i}}}`);
    const bytes = encode(rows);
    for (const sizes of [[1], [2, 3, 5, 7], [19], [20], [64], [4096], [bytes.length]]) expectRows(read(bytes, sizes), rows);
  });

  it('keeps multi-byte characters, four-byte ones and line breaks in ids and texts', () => {
    const rows = sampleRows(300, 5, (i) => (i % 2 === 0 ? `{"note":"Springkraut drüsig ${i} 😀"}` : `{"a":${i}}`));
    rows[7]!.id = 'zwei\nZeilen';
    rows[8]!.id = 'Ölweide 🌿';
    rows[9]!.text = '{"raw":\n"line break"}';
    expectRows(read(encode(rows), [33]), rows);
  });

  it('decodes row by row when the bytes are not valid UTF-8', () => {
    const rows = sampleRows(50, 9, (i) => `{"i":${i}}`);
    rows[4]!.text = Buffer.from([0x7b, 0xc3, 0x28, 0x7d]); // 0xc3 0x28 is an invalid sequence
    rows[6]!.text = Buffer.from([0x7b, 0x80, 0x7d]); // a continuation byte with no lead
    rows[5]!.text = '{"é":1}';
    expectRows(read(encode(rows)), rows);
  });

  it('puts rows in seq order when the table gave them otherwise', () => {
    const rows = sampleRows(200, 11, (i) => `{"i":${i},"s":"é"}`);
    const shuffled = [...rows];
    const r = rng(12);
    for (let i = shuffled.length - 1; i > 0; i--) {
      const j = r.int(i + 1);
      [shuffled[i], shuffled[j]] = [shuffled[j]!, shuffled[i]!];
    }
    expectRows(read(encode(shuffled), [100]), rows);
  });

  it('takes a row larger than the staging buffer', () => {
    const big = `{"blob":"${'x'.repeat(9 << 20)}"}`;
    const rows = sampleRows(5, 13, (i) => (i === 2 ? big : `{"i":${i}}`));
    const got = read(encode(rows), [65536]);
    expect(got.features.at(2)).toBe(big);
    expectRows(got, rows);
  });

  it('reads an empty result', () => {
    const got = read(encode([]));
    expect(got.ids).toEqual([]);
    expect(got.lon.length).toBe(0);
    expect(got.features.length).toBe(0);
  });

  it('refuses a stream cut short, a foreign stream and rows of another shape', () => {
    const rows = sampleRows(3, 1, (i) => `{"i":${i}}`);
    expect(() => read(encode(rows, { trailer: false }))).toThrow(/ended before its trailer/);
    expect(() => read(encode(rows).subarray(0, 60))).toThrow(/ended before its trailer/);
    expect(() => read(Buffer.from('seq\tlon\n1\t2\n'.repeat(4)))).toThrow(/signature/);
    expect(() => read(encode(rows, { fields: 6 }))).toThrow(/6 fields, expected 7/);
  });
});

const skipReason = await postgresSkipReason();

describe.skipIf(skipReason !== null)(`RunCopyReader on the PostgreSQL server's own COPY output${skipReason ? ` (skipped: ${skipReason})` : ''}`, () => {
  const schema = `roost_copy_${process.pid}`;
  let client: pg.Client;
  beforeAll(async () => {
    client = new pg.Client({ connectionString: TEST_DATABASE_URL });
    await client.connect();
    await client.query(`DROP SCHEMA IF EXISTS ${schema} CASCADE; CREATE SCHEMA ${schema}`);
    await client.query(`CREATE TABLE ${schema}.o (seq BIGINT PRIMARY KEY, lon FLOAT8 NOT NULL, lat FLOAT8 NOT NULL, observed_at BIGINT, weight FLOAT8, obs_id TEXT NOT NULL, feature TEXT NOT NULL)`);
    const rows = sampleRows(3000, 21, (i) => JSON.stringify({ type: 'Feature', id: `o-${i}`, properties: { note: i % 10 === 0 ? 'Hänfling 🐦' : 'x'.repeat(i % 300), n: i } }));
    await client.query(
      `INSERT INTO ${schema}.o SELECT * FROM unnest($1::int8[], $2::float8[], $3::float8[], $4::int8[], $5::float8[], $6::text[], $7::text[])`,
      [rows.map((r) => r.seq), rows.map((r) => r.lon), rows.map((r) => r.lat), rows.map((r) => r.t), rows.map((r) => r.w), rows.map((r) => r.id), rows.map((r) => r.text)],
    );
    // an update writes the row's new version at the end of the table: out of seq order
    await client.query(`UPDATE ${schema}.o SET lon = 1.5 WHERE seq IN (10, 20)`);
  });
  afterAll(async () => {
    await client?.query(`DROP SCHEMA IF EXISTS ${schema} CASCADE`);
    await client?.end();
  });

  it('gives what a plain SELECT gives, in seq order, fed whole or in small pieces', async () => {
    const chunks: Buffer[] = [];
    for await (const c of client.query(copyTo(`COPY (SELECT ${RUN_COPY_COLUMNS} FROM ${schema}.o o) TO STDOUT (FORMAT binary)`)) as AsyncIterable<Buffer>) chunks.push(c);
    const bytes = Buffer.concat(chunks);
    const plain = await client.query({ text: `SELECT seq, lon, lat, observed_at, weight, obs_id, feature FROM ${schema}.o ORDER BY seq`, rowMode: 'array' });
    const want: Row[] = (plain.rows as [string, number, number, string | null, number | null, string, string][]).map((r) => ({
      seq: Number(r[0]),
      lon: r[1],
      lat: r[2],
      t: r[3] === null ? null : Number(r[3]),
      w: r[4],
      id: r[5],
      text: r[6],
    }));
    expect(want[9]!.lon).toBe(1.5);
    for (const sizes of [[bytes.length], [1, 2, 3], [8191], [13, 1000, 17]]) expectRows(read(bytes, sizes), want);
    // the query object reading the socket itself gives the same
    expectRows(await copyQuery(`COPY (SELECT ${RUN_COPY_COLUMNS} FROM ${schema}.o o) TO STDOUT (FORMAT binary)`), want);
  });

  async function copyQuery(text: string): Promise<RunInput> {
    const q = new RunCopyQuery(text);
    client.query(q as unknown as pg.Submittable);
    return q.result;
  }

  it('reports a server error and leaves the connection usable', async () => {
    await expect(copyQuery(`COPY (SELECT ${RUN_COPY_COLUMNS} FROM ${schema}.missing o) TO STDOUT (FORMAT binary)`)).rejects.toMatchObject({ code: '42P01' });
    expect((await client.query('SELECT 41 + 1 AS n')).rows).toEqual([{ n: 42 }]);
  });

  it('refuses rows of another shape, reads the rest of the reply, and leaves the connection usable', async () => {
    await expect(copyQuery(`COPY (SELECT o.seq, o.lon FROM ${schema}.o o) TO STDOUT (FORMAT binary)`)).rejects.toThrow(/2 fields, expected 7/);
    expect((await client.query('SELECT 41 + 1 AS n')).rows).toEqual([{ n: 42 }]);
    const empty = await copyQuery(`COPY (SELECT ${RUN_COPY_COLUMNS} FROM ${schema}.o o WHERE false) TO STDOUT (FORMAT binary)`);
    expect(empty.ids).toEqual([]);
  });
});
