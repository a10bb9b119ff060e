/**
 * Seeded random numbers for the Monte Carlo test and the resampling. Every simulation (and every
 * resample) draws from its own stream, derived from the user's seed and its own number, so the
 * results do not depend on how the simulations are shared out among threads: simulation 17 sees
 * the same numbers whether it runs first on one thread or last on four.
 *
 * The generator is sfc32 (Chris Doty-Humphrey's small fast counting generator, public domain,
 * from PractRand), whose 128-bit state is filled from the seed and stream number by the 32-bit
 * finaliser of MurmurHash3 (fmix32), so neighbouring streams start far apart.
 */

/** A source of uniform numbers in [0, 1) and whole numbers below a bound. */
export interface Random {
  /** uniform in [0, 1), 32 bits of resolution */
  next(): number;
  /** uniform whole number in 0..n-1 (n ≥ 1, at most 2^32) */
  below(n: number): number;
}

/** MurmurHash3's 32-bit finaliser: a bijection that spreads every input bit over the output. */
function fmix32(h: number): number {
  h ^= h >>> 16;
  h = Math.imul(h, 0x85ebca6b);
  h ^= h >>> 13;
  h = Math.imul(h, 0xc2b2ae35);
  h ^= h >>> 16;
  return h >>> 0;
}

/** What a stream is for: simulations and resamples never share numbers even with the same index. */
export const STREAM_SIMULATION = 1;
export const STREAM_RESAMPLE = 2;

/**
 * The stream numbered `index` of kind `purpose` under `seed` (a whole number 0..2^32-1).
 */
export function randomStream(seed: number, purpose: number, index: number): Random {
  let a = fmix32((seed ^ 0x9e3779b9) >>> 0);
  let b = fmix32((a ^ Math.imul(purpose + 1, 0x632be5ab)) >>> 0);
  let c = fmix32((b ^ Math.imul(index + 1, 0x85157af5)) >>> 0);
  let d = fmix32((c ^ (index >>> 0)) + 0x6c8e9cf5);
  const next32 = (): number => {
    const t = (((a + b) | 0) + d) | 0;
    d = (d + 1) | 0;
    a = b ^ (b >>> 9);
    b = (c + (c << 3)) | 0;
    c = (c << 21) | (c >>> 11);
    c = (c + t) | 0;
    return t >>> 0;
  };
  // the first outputs of a freshly filled state are discarded, as the generator's author advises
  for (let i = 0; i < 15; i++) next32();
  return {
    next: () => next32() / 4294967296,
    below(n: number): number {
      // Lemire-style rejection keeps every value equally likely
      const limit = 4294967296 - (4294967296 % n);
      let x = next32();
      while (x >= limit) x = next32();
      return x % n;
    },
  };
}
