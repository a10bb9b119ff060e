/**
 * The member-id table of the tracks match (IdSlots in src/tracks/overlap.ts) answers as a Map of
 * the same ids would, ids met twice and ids that share a hash position included.
 */
import fc from 'fast-check';
import { describe, expect, it } from 'vitest';
import { IdSlots } from '../../src/tracks/overlap.js';

describe('IdSlots', () => {
  it('gives the slots a Map gives, and says which ids it had', () => {
    const id = fc.oneof(fc.string({ maxLength: 6 }), fc.constantFrom('b1', 'b10', '', 'é😀', 'x'.repeat(40)), fc.integer({ min: 0, max: 300 }).map((i) => `b${i}`));
    fc.assert(
      fc.property(fc.array(id, { maxLength: 400 }), fc.array(id, { maxLength: 100 }), (set, asked) => {
        const slots = new IdSlots(set.length);
        const map = new Map<string, number>();
        set.forEach((s, k) => {
          const had = map.has(s);
          map.set(s, k);
          expect(slots.set(s, k)).toBe(!had);
        });
        expect(slots.size).toBe(map.size);
        for (const s of [...set, ...asked]) expect(slots.get(s)).toBe(map.get(s) ?? -1);
      }),
      { numRuns: 500, seed: 20261204 },
    );
  });
});
