import { describe, expect, it } from 'vitest';
import fc from 'fast-check';
import { ProblemList, jsonErrorOffset, lineColumn, parseDecimal, parseTimestamp, rangeProblem } from '../../src/ingest/checks.js';
import { InputError } from '../../src/ingest/types.js';

const pad = (v: number, w: number) => String(v).padStart(w, '0');

describe('parseTimestamp (RFC 3339 date-time)', () => {
  it('agrees with Date.parse on random valid date-times with offsets and fractions', () => {
    fc.assert(
      fc.property(
        fc.integer({ min: 0, max: 9999 }),
        fc.integer({ min: 1, max: 12 }),
        fc.integer({ min: 1, max: 28 }),
        fc.integer({ min: 0, max: 23 }),
        fc.integer({ min: 0, max: 59 }),
        fc.integer({ min: 0, max: 59 }),
        fc.option(fc.integer({ min: 0, max: 999 })),
        fc.option(fc.tuple(fc.boolean(), fc.integer({ min: 0, max: 23 }), fc.integer({ min: 0, max: 59 }))),
        (y, mo, d, h, mi, s, ms, off) => {
          const frac = ms === null ? '' : `.${pad(ms, 3)}`;
          const zone = off === null ? 'Z' : `${off[0] ? '+' : '-'}${pad(off[1], 2)}:${pad(off[2], 2)}`;
          const text = `${pad(y, 4)}-${pad(mo, 2)}-${pad(d, 2)}T${pad(h, 2)}:${pad(mi, 2)}:${pad(s, 2)}${frac}${zone}`;
          // source: ECMAScript Date.parse, which reads this ISO 8601 form exactly
          expect(parseTimestamp(text)).toBe(Date.parse(text));
        },
      ),
      { numRuns: 2000, seed: 7 },
    );
  });

  it('accepts the RFC 3339 variants: lower-case t and z, a space separator, long fractions', () => {
    expect(parseTimestamp('2024-05-01t06:30:00z')).toBe(Date.UTC(2024, 4, 1, 6, 30));
    expect(parseTimestamp('2024-05-01 06:30:00Z')).toBe(Date.UTC(2024, 4, 1, 6, 30));
    expect(parseTimestamp('2024-05-01T06:30:00.123456789Z')).toBe(Date.UTC(2024, 4, 1, 6, 30, 0, 123));
    expect(parseTimestamp('2024-02-29T00:00:00Z')).toBe(Date.UTC(2024, 1, 29));
    // a leap second reads as the first second of the next minute
    expect(parseTimestamp('2016-12-31T23:59:60Z')).toBe(Date.UTC(2017, 0, 1));
  });

  it('rejects what is not an RFC 3339 date-time', () => {
    for (const s of [
      '2024-05-01T06:30:00', // no offset
      '2024-05-01',
      '2024-5-1T06:30:00Z',
      '2024-13-01T00:00:00Z',
      '2023-02-29T00:00:00Z',
      '2100-02-29T00:00:00Z',
      '2024-04-31T00:00:00Z',
      '2024-05-01T24:00:00Z',
      '2024-05-01T06:60:00Z',
      '2024-05-01T06:30Z',
      '2024-05-01T06:30:00.Z',
      '2024-05-01T06:30:00+0200',
      '2024-05-01T06:30:00Z ',
      'Wed, 01 May 2024 06:30:00 GMT',
      '',
    ]) {
      expect(parseTimestamp(s), s).toBeNaN();
    }
  });

  it('takes a bare date as midnight UTC only when asked', () => {
    expect(parseTimestamp('2024-05-01', true)).toBe(Date.UTC(2024, 4, 1));
    expect(parseTimestamp('0050-01-01', true)).toBe(Date.parse('0050-01-01T00:00:00Z'));
  });
});

describe('jsonErrorOffset', () => {
  it('says −1 exactly when JSON.parse succeeds and names the same position as V8 when V8 gives one', () => {
    let positions = 0;
    fc.assert(
      fc.property(
        fc.json(),
        fc.nat(),
        fc.constantFrom('', '"', '}', ']', ',', ':', '\\', 'x', '\n', '1', '-', '.', 'e', ' ', '{', '['),
        fc.boolean(),
        (json, at, insert, drop) => {
          const p = at % (json.length + 1);
          const text = drop ? json.slice(0, p) + json.slice(p + 1) : json.slice(0, p) + insert + json.slice(p);
          let message: string | null = null;
          try {
            JSON.parse(text);
          } catch (err) {
            message = (err as Error).message;
          }
          const offset = jsonErrorOffset(text);
          // source: V8's JSON.parse (Node 20) as the reference parser
          expect(offset === -1).toBe(message === null);
          const m = message === null ? null : /at position (\d+)/.exec(message);
          if (m !== null) {
            positions++;
            expect(offset).toBe(Number(m[1]));
          }
        },
      ),
      { numRuns: 3000, seed: 11 },
    );
    expect(positions).toBeGreaterThan(100);
  });

  it('handles deep nesting without overflowing the stack', () => {
    const deep = '['.repeat(200_000) + ']'.repeat(200_000);
    expect(jsonErrorOffset(deep)).toBe(-1);
    expect(jsonErrorOffset(deep.slice(0, -1))).toBe(deep.length - 1);
  });

  it('gives 1-based line and column', () => {
    expect(lineColumn('ab\ncd\nef', 7)).toEqual({ line: 3, column: 2 });
    expect(lineColumn('abc', 0)).toEqual({ line: 1, column: 1 });
  });
});

describe('parseDecimal', () => {
  it('reads decimal notation and nothing else', () => {
    expect(parseDecimal(' -12.5 ')).toBe(-12.5);
    expect(parseDecimal('1e3')).toBe(1000);
    expect(parseDecimal('.5')).toBe(0.5);
    for (const s of ['', ' ', '0x10', '0b1', '12abc', 'Infinity', '-Infinity', 'NaN', '12,5', '1e999']) expect(parseDecimal(s), s).toBeNaN();
  });
});

describe('rangeProblem', () => {
  it('passes in-range pairs and classifies the rest', () => {
    expect(rangeProblem(180, -90)).toBeNull();
    expect(rangeProblem(-180.000001, 0)?.code).toBe('out-of-range');
    expect(rangeProblem(45.2, 120.5)?.code).toBe('swapped-coordinates');
    expect(rangeProblem(-33.9, -151.2)?.code).toBe('swapped-coordinates');
    expect(rangeProblem(95, 120)?.code).toBe('out-of-range');
    expect(rangeProblem(0, 180.5)?.code).toBe('out-of-range');
  });
});

describe('ProblemList', () => {
  it('keeps at most cap problems, counts all, puts whole-input notes first, and throws one InputError', () => {
    const list = new ProblemList(3);
    for (let i = 0; i < 5; i++) list.add(i, i === 1 ? 'b' : undefined, 'x', `feature ${i}: bad`);
    list.addFirst('y', 'the input as a whole');
    expect(list.total).toBe(6);
    expect(list.items.map((p) => p.index)).toEqual([null, 0, 1]);
    expect(list.items[2]!.id).toBe('b');
    let thrown: unknown;
    try {
      list.throwIfAny();
    } catch (err) {
      thrown = err;
    }
    expect(thrown).toBeInstanceOf(InputError);
    expect((thrown as InputError).total).toBe(6);
    expect((thrown as InputError).message).toBe('the input as a whole (and 5 more problems)');
    expect(() => new ProblemList().throwIfAny()).not.toThrow();
  });
});
