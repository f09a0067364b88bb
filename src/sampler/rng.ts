/**
 * Seeded pseudo-random number generator: one independent, reproducible stream per
 * (seed, stream) pair, e.g. (config seed, chain index).
 *
 * Generator: xoshiro128** 1.1 (Blackman & Vigna 2018; "Scrambled linear pseudorandom number
 * generators", ACM Transactions on Mathematical Software 47(4), 2021, article 36; reference C
 * code xoshiro128starstar.c). 128 bits of state, period 2^128 − 1, only 32-bit operations, so
 * it runs at full speed in JavaScript with `Math.imul` and `>>> 0`, no BigInt.
 *
 * Seeding: the 128-bit input (seed as two 32-bit halves, stream as two 32-bit halves) passes
 * through a bijective mixing network made of SplitMix-style steps — add a Weyl increment based on
 * the golden ratio, then apply a 32-bit avalanche finalizer (Steele, Lea & Flood 2014, "Fast
 * splittable pseudorandom number generators", OOPSLA; finalizer constants from Appleby's
 * MurmurHash3 `fmix32`). Because every step is invertible, two different (seed, stream) pairs
 * never start from the same state, and nearby inputs (stream 0, 1, 2, ...) start from states
 * that look unrelated, which is what xoshiro's authors ask of a seeding procedure.
 *
 * Streams started at pseudo-random points of a 2^128 cycle overlap with negligible probability
 * (for k streams of length L, about k²L/2^128). For a guaranteed separation, `jump` advances a
 * generator by exactly 2^64 steps.
 */

/** A seeded source of random numbers whose whole state can be saved and restored. */
export interface Rng {
  /** Next raw output, an integer in [0, 2^32). */
  nextU32(): number;
  /** uniform in the open interval (0,1), 53-bit resolution */
  uniform(): number;
  /** A copy of the complete state; `setState(getState())` resumes the same sequence. */
  getState(): number[];
  /** Restores a state previously returned by `getState`. */
  setState(s: number[]): void;
}

const TWO_POW_32 = 4294967296;
const TWO_POW_26 = 67108864;
const TWO_POW_MINUS_53 = 1 / 9007199254740992;
/** 2^32 / golden ratio, the Weyl increment of SplitMix (Steele, Lea & Flood 2014). */
const GOLDEN_GAMMA = 0x9e3779b9;
/** Jump polynomial for 2^64 steps, from the reference code xoshiro128starstar.c. */
const JUMP_2_POW_64 = [0x8764000b, 0xf542d2d3, 0x6fa035c3, 0x77f2db5b];

/**
 * MurmurHash3 32-bit finalizer (Appleby): a bijection on 32-bit words with full avalanche.
 * Returns a signed 32-bit integer.
 */
function avalanche32(h: number): number {
  h ^= h >>> 16;
  h = Math.imul(h, 0x85ebca6b);
  h ^= h >>> 13;
  h = Math.imul(h, 0xc2b2ae35);
  return h ^ (h >>> 16);
}

/**
 * Mixes four 32-bit words into a generator state. Each sub-step replaces one word by
 * avalanche32(word + neighbour + Weyl constant) while the neighbour is unchanged, so the whole
 * map is invertible; three rounds let every output bit depend on every input bit.
 */
function mixSeedWords(words: number[]): number[] {
  const w = words.map((x) => x | 0);
  let weyl = 0;
  for (let round = 0; round < 3; round++) {
    for (let j = 0; j < 4; j++) {
      weyl = (weyl + GOLDEN_GAMMA) | 0;
      w[j] = avalanche32((w[j] + w[(j + 3) & 3] + weyl) | 0);
    }
  }
  // xoshiro's one forbidden state; exactly one input maps here, so replace it deterministically.
  if ((w[0] | w[1] | w[2] | w[3]) === 0) w[0] = GOLDEN_GAMMA | 0;
  return w;
}

function checkSafeNonNegativeInteger(value: number, what: string): void {
  if (!Number.isSafeInteger(value) || value < 0) {
    throw new RangeError(`${what} must be an integer from 0 to 2^53-1, got ${value}`);
  }
}

/**
 * xoshiro128** 1.1 (Blackman & Vigna 2018). State words are kept as signed 32-bit integers;
 * outputs are converted to unsigned with `>>> 0`.
 */
export class Xoshiro128StarStar implements Rng {
  private s0 = 0;
  private s1 = 0;
  private s2 = 0;
  private s3 = 0;

  /** @param state four 32-bit words, not all zero (see {@link Xoshiro128StarStar.setState}). */
  constructor(state: number[]) {
    this.setState(state);
  }

  nextU32(): number {
    const s0 = this.s0;
    const s1 = this.s1;
    let s2 = this.s2;
    let s3 = this.s3;
    // result = rotl(s1 * 5, 7) * 9   (the "**" scrambler)
    const m = Math.imul(s1, 5);
    const result = Math.imul((m << 7) | (m >>> 25), 9);
    const t = s1 << 9;
    s2 ^= s0;
    s3 ^= s1;
    this.s1 = s1 ^ s2;
    this.s0 = s0 ^ s3;
    this.s2 = s2 ^ t;
    this.s3 = (s3 << 11) | (s3 >>> 21);
    return result >>> 0;
  }

  /**
   * k · 2^-53 with k uniform on {1, ..., 2^53 − 1}: the top 27 and 26 bits of two outputs make a
   * 53-bit integer (the usual double construction, cf. Vigna's notes to the reference code);
   * k = 0 is redrawn so the result is never 0, and the largest value is 1 − 2^-53 < 1.
   */
  uniform(): number {
    for (;;) {
      const high = this.nextU32() >>> 5;
      const low = this.nextU32() >>> 6;
      const k = high * TWO_POW_26 + low;
      if (k !== 0) return k * TWO_POW_MINUS_53;
    }
  }

  getState(): number[] {
    return [this.s0 >>> 0, this.s1 >>> 0, this.s2 >>> 0, this.s3 >>> 0];
  }

  /** @throws RangeError unless `s` holds four integers in [0, 2^32), not all zero. */
  setState(s: number[]): void {
    const valid =
      Array.isArray(s) &&
      s.length === 4 &&
      s.every((x) => Number.isInteger(x) && x >= 0 && x < TWO_POW_32) &&
      s.some((x) => x !== 0);
    if (!valid) {
      throw new RangeError('rng state must be four integers in [0, 2^32), not all zero');
    }
    this.s0 = s[0] | 0;
    this.s1 = s[1] | 0;
    this.s2 = s[2] | 0;
    this.s3 = s[3] | 0;
  }

  /**
   * Advances the generator by exactly 2^64 steps (jump polynomial from the reference code
   * xoshiro128starstar.c), giving 2^64 non-overlapping subsequences of length 2^64.
   */
  jump(): void {
    let a0 = 0;
    let a1 = 0;
    let a2 = 0;
    let a3 = 0;
    for (const word of JUMP_2_POW_64) {
      for (let bit = 0; bit < 32; bit++) {
        if ((word >>> bit) & 1) {
          a0 ^= this.s0;
          a1 ^= this.s1;
          a2 ^= this.s2;
          a3 ^= this.s3;
        }
        this.nextU32();
      }
    }
    this.s0 = a0;
    this.s1 = a1;
    this.s2 = a2;
    this.s3 = a3;
  }
}

/**
 * Creates the generator for one (seed, stream) pair, e.g. (config seed, chain index). The same
 * pair always gives the same sequence, on any machine and in any thread.
 *
 * @param seed integer in [0, 2^53 − 1]; both 32-bit halves are used.
 * @param stream integer in [0, 2^53 − 1]; different streams give unrelated sequences.
 * @throws RangeError if either argument is not such an integer.
 * @example
 * const rng = createRng(20261201, 0);
 * rng.uniform(); // in (0, 1)
 */
export function createRng(seed: number, stream: number): Rng {
  checkSafeNonNegativeInteger(seed, 'seed');
  checkSafeNonNegativeInteger(stream, 'stream');
  const words = [
    seed >>> 0,
    Math.floor(seed / TWO_POW_32),
    stream >>> 0,
    Math.floor(stream / TWO_POW_32),
  ];
  return new Xoshiro128StarStar(mixSeedWords(words).map((x) => x >>> 0));
}

/**
 * Advances a generator made by {@link createRng} by exactly 2^64 steps.
 * @throws TypeError for any other kind of `Rng`.
 */
export function jump(rng: Rng): void {
  if (!(rng instanceof Xoshiro128StarStar)) {
    throw new TypeError('jump() needs a generator made by createRng');
  }
  rng.jump();
}
