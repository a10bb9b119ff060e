/**
 * parseTimestampBytes (src/ingest/checks.ts), the byte readers' RFC 3339 reading, against
 * parseTimestamp on seeded random timestamp-like texts: wherever it gives a value, it is the one
 * parseTimestamp gives for the same text; and it reads the usual forms. Seed: ROOST_SEED (printed).
 */
import { describe, expect, it } from 'vitest';
import { parseTimestamp, parseTimestampBytes } from '../../src/ingest/checks.js';
import { rng } from '../reference/seeded.js';

const SEED = Number(process.env.ROOST_SEED ?? 16);
const CASES = 20000;

const BASES = ['2024-05-01T06:30:00Z', '2024-05-01 06:30:00.250+02:00', '2000-02-29t23:59:60z', '1900-02-29T00:00:00Z', '0001-01-01T00:00:00-23:59', '2024-12-31T23:59:59.999999Z', '2024-05-01T06:30:00+02:0'];
const NOISE = ['0', '9', ':', '-', '+', '.', 'T', 'Z', ' ', 'é', '\\', '1', '5', '6', '3'];

describe('RFC 3339 from bytes', () => {
  it('gives parseTimestamp\'s value wherever it gives one', () => {
    console.info(`timestamp bytes seed ${SEED} (ROOST_SEED), ${CASES} cases`);
    const r = rng(SEED).next;
    let read = 0;
    const differ: string[] = [];
    for (let c = 0; c < CASES; c++) {
      let text = BASES[Math.floor(r() * BASES.length)]!;
      // a few characters replaced, inserted or cut
      const edits = Math.floor(r() * 3);
      for (let k = 0; k < edits; k++) {
        const at = Math.floor(r() * (text.length + 1));
        const ch = NOISE[Math.floor(r() * NOISE.length)]!;
        const kind = r();
        text = kind < 0.5 ? text.slice(0, at) + ch + text.slice(at + 1) : kind < 0.8 ? text.slice(0, at) + ch + text.slice(at) : text.slice(0, at) + text.slice(at + 1);
      }
      const bytes = Buffer.from(`xx${text}yy`, 'utf8');
      const v = parseTimestampBytes(bytes, 2, bytes.length - 2);
      if (v !== v) continue;
      read++;
      if (!Object.is(v, parseTimestamp(text))) differ.push(JSON.stringify(text));
    }
    expect(differ.slice(0, 5)).toEqual([]);
    expect(read).toBeGreaterThan(CASES / 4);
  });

  it('reads the usual forms', () => {
    for (const text of ['2024-05-01T06:30:00Z', '2024-05-01 06:30:00.250+02:00', '2016-12-31T23:59:60Z']) {
      const b = Buffer.from(text);
      expect(parseTimestampBytes(b, 0, b.length)).toBe(parseTimestamp(text));
      expect(parseTimestamp(text)).toBe(parseTimestamp(text)); // a number, not NaN
    }
    expect(parseTimestampBytes(Buffer.from('2024-05-01T06:30:00Z'), 0, 20)).toBe(Date.UTC(2024, 4, 1, 6, 30));
  });
});
