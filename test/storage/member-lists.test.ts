/**
 * Stored member lists read back (parseMembers in src/storage/runs.ts) give what JSON.parse gives,
 * for the texts the stores write (JSON.stringify of the ids) and for texts of other forms.
 * The property test's seed is printed and can be changed with ROOST_SEED.
 */
import fc from 'fast-check';
import { describe, expect, it } from 'vitest';
import { parseMembers } from '../../src/storage/runs.js';

const SEED = Number(process.env.ROOST_SEED ?? 20261205);

describe('parseMembers', () => {
  it('reads what JSON.stringify wrote, ids that need escaping included', () => {
    console.log(`member lists: seed ${SEED} (ROOST_SEED to change)`);
    const id = fc.oneof(
      fc.string({ maxLength: 8 }),
      fc.string({ unit: 'binary', maxLength: 4 }),
      fc.constantFrom('', '","', '"', '\\', 'a","b', '\u0000', '\ud800', 'é😀', ' ', '[', ']'),
      fc.integer({ min: 0, max: 1000 }).map((i) => `b${i}`),
    );
    fc.assert(
      fc.property(fc.array(id, { maxLength: 50 }), (ids) => {
        const text = JSON.stringify(ids);
        expect(parseMembers(text, ids.length)).toEqual(ids);
      }),
      { numRuns: 2000, seed: SEED },
    );
  });

  it('parses texts of another form, and a count that does not fit the text', () => {
    expect(parseMembers('[]', 0)).toEqual([]);
    expect(parseMembers('[""]', 1)).toEqual(['']);
    expect(parseMembers('["a", "b"]', 2)).toEqual(['a', 'b']);
    expect(parseMembers('[ "a","b" ]', 2)).toEqual(['a', 'b']);
    expect(parseMembers('["a","b"]', 3)).toEqual(['a', 'b']);
    expect(parseMembers('["a\\"","b"]', 2)).toEqual(['a"', 'b']);
    expect(() => parseMembers('["a","b"', 2)).toThrow(SyntaxError);
  });
});
