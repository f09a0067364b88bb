import { describe, expect, test } from 'vitest';
import { createRng, jump, Xoshiro128StarStar, type Rng } from '../src/sampler/rng.js';
import { Z_TWO_SIDED_1E5 } from './support/reference-distributions.js';

// Statistical checks below use fixed seeds and a two-sided z level of 4.4172 (false-alarm rate
// 1e-5 per check), with standard errors from the exact moments of the uniform distribution.
const SEED = 20261201;
const Z = Z_TWO_SIDED_1E5;

function outputs(rng: Rng, count: number): number[] {
  return Array.from({ length: count }, () => rng.nextU32());
}

describe('xoshiro128** step', () => {
  test('matches the reference algorithm from state (1, 2, 3, 4)', () => {
    // Hand-computed from the published step of xoshiro128** 1.1 (Blackman & Vigna 2018, reference
    // code xoshiro128starstar.c, as recalled: result = rotl(s1·5, 7)·9; t = s1 << 9; s2 ^= s0;
    // s3 ^= s1; s1 ^= s2; s0 ^= s3; s2 ^= t; s3 = rotl(s3, 11)).
    //   step 1: result = rotl(10, 7)·9 = 1280·9 = 11520; state → (7, 0, 1026, 12288)
    //   step 2: result = rotl(0, 7)·9 = 0;               state → (12295, 1029, 1029, 25165824)
    //   step 3: result = rotl(5145, 7)·9 = 658560·9 = 5927040
    const rng = new Xoshiro128StarStar([1, 2, 3, 4]);
    expect(rng.nextU32()).toBe(11520);
    expect(rng.getState()).toEqual([7, 0, 1026, 12288]);
    expect(rng.nextU32()).toBe(0);
    expect(rng.getState()).toEqual([12295, 1029, 1029, 25165824]);
    expect(rng.nextU32()).toBe(5927040);
  });

  test('outputs are unsigned 32-bit integers', () => {
    const rng = createRng(SEED, 0);
    const invalid = outputs(rng, 10_000).filter((x) => !(Number.isInteger(x) && x >= 0 && x < 2 ** 32));
    expect(invalid).toEqual([]);
  });
});

describe('seeding and streams', () => {
  test('the same seed and stream give the same sequence', () => {
    expect(outputs(createRng(SEED, 3), 1000)).toEqual(outputs(createRng(SEED, 3), 1000));
  });

  test('streams, seeds and both halves of each give different sequences', () => {
    const reference = outputs(createRng(SEED, 0), 8);
    const variants: Array<[number, number]> = [
      [SEED, 1],
      [SEED + 1, 0],
      [SEED + 2 ** 32, 0], // differs only in the high half of the seed
      [SEED, 2 ** 32], // differs only in the high half of the stream
      [2 ** 53 - 1, 2 ** 53 - 1],
      [0, 0],
    ];
    const seen = new Set([reference.join(',')]);
    for (const [seed, stream] of variants) {
      const sequence = outputs(createRng(seed, stream), 8).join(',');
      expect(seen.has(sequence)).toBe(false);
      seen.add(sequence);
    }
  });

  test('saving and restoring the state reproduces the continuation', () => {
    const rng = createRng(SEED, 2);
    outputs(rng, 137);
    const saved = rng.getState();
    const first = [...outputs(rng, 50), rng.uniform(), rng.uniform()];
    rng.setState(saved);
    expect([...outputs(rng, 50), rng.uniform(), rng.uniform()]).toEqual(first);
    // getState returns a copy: changing it does not change the generator.
    const copy = rng.getState();
    const before = rng.getState();
    copy[0] ^= 1;
    expect(rng.getState()).toEqual(before);
    const other = createRng(1, 1);
    other.setState(saved);
    expect(outputs(other, 50)).toEqual(first.slice(0, 50));
  });

  test('rejects seeds and streams that are not integers in [0, 2^53 − 1]', () => {
    for (const bad of [-1, 0.5, 2 ** 53, Number.NaN, Infinity]) {
      expect(() => createRng(bad, 0)).toThrow(RangeError);
      expect(() => createRng(0, bad)).toThrow(RangeError);
    }
  });

  test('rejects invalid states, including the forbidden all-zero state', () => {
    const rng = createRng(SEED, 0);
    for (const bad of [[0, 0, 0, 0], [1, 2, 3], [1, 2, 3, 2 ** 32], [1, 2, 3, -1], [1, 2, 3, 0.5]]) {
      expect(() => rng.setState(bad)).toThrow(RangeError);
    }
  });

  test('adjacent streams and seeds are uncorrelated', () => {
    // Sample correlation of n independent pairs has sd 1/√n under independence.
    const n = 200_000;
    const pairs: Array<[Rng, Rng]> = [
      [createRng(SEED, 0), createRng(SEED, 1)],
      [createRng(SEED, 0), createRng(SEED + 1, 0)],
      [createRng(SEED, 0), createRng(SEED + 2 ** 32, 0)],
    ];
    for (const [a, b] of pairs) {
      let sab = 0;
      let sa = 0;
      let sb = 0;
      for (let i = 0; i < n; i++) {
        const x = a.uniform() - 0.5;
        const y = b.uniform() - 0.5;
        sab += x * y;
        sa += x;
        sb += y;
      }
      const correlation = (sab / n - (sa / n) * (sb / n)) * 12;
      expect(Math.abs(correlation)).toBeLessThan(Z / Math.sqrt(n));
    }
  });
});

describe('uniform', () => {
  test('mean and variance match 1/2 and 1/12', () => {
    const n = 1_000_000;
    const rng = createRng(SEED, 0);
    let sum = 0;
    let sumSquares = 0;
    let min = 1;
    let max = 0;
    for (let i = 0; i < n; i++) {
      const u = rng.uniform();
      sum += u;
      sumSquares += u * u;
      if (u < min) min = u;
      if (u > max) max = u;
    }
    const mean = sum / n;
    const variance = sumSquares / n - mean * mean;
    expect(min).toBeGreaterThan(0);
    expect(max).toBeLessThan(1);
    // sd of the mean: √(1/12 / n); sd of the variance estimate: √((μ4 − σ⁴)/n) = √(1/180 / n).
    expect(Math.abs(mean - 0.5)).toBeLessThan(Z * Math.sqrt(1 / 12 / n));
    expect(Math.abs(variance - 1 / 12)).toBeLessThan(Z * Math.sqrt(1 / 180 / n));
  });

  test('every output bit is set half the time', () => {
    const n = 1 << 18;
    const rng = createRng(SEED, 5);
    const counts = new Array<number>(32).fill(0);
    for (let i = 0; i < n; i++) {
      const x = rng.nextU32();
      for (let bit = 0; bit < 32; bit++) counts[bit] += (x >>> bit) & 1;
    }
    for (const count of counts) expect(Math.abs(count - n / 2)).toBeLessThan(Z * Math.sqrt(n / 4));
  });

  test('never returns 0: a zero 53-bit draw is redrawn', () => {
    // With s1 = 0 and s0 = s2 the first two outputs are both 0 (see the step formulas above).
    const state = [0x1234567, 0, 0x1234567, 0x89abcdef];
    const probe = new Xoshiro128StarStar(state);
    expect([probe.nextU32(), probe.nextU32()]).toEqual([0, 0]);
    const expected = ((probe.nextU32() >>> 5) * 2 ** 26 + (probe.nextU32() >>> 6)) * 2 ** -53;
    const rng = new Xoshiro128StarStar(state);
    const u = rng.uniform();
    expect(u).toBeGreaterThan(0);
    expect(u).toBe(expected);
  });

  test('never returns 1: the largest value is 1 − 2^-53', () => {
    // Invert the scrambler: output 0xffffffff needs rotl(s1·5, 7) = 0xffffffff · 9⁻¹ (mod 2^32).
    const inverse9 = 0x38e38e39; // 9 · 0x38e38e39 ≡ 1 (mod 2^32)
    const inverse5 = 0xcccccccd; // 5 · 0xcccccccd ≡ 1 (mod 2^32)
    const rotated = Math.imul(0xffffffff, inverse9) >>> 0;
    const s1 = Math.imul(((rotated >>> 7) | (rotated << 25)) >>> 0, inverse5) >>> 0;
    const state = [77, s1, 77, 99]; // s0 = s2 keeps s1 unchanged by one step
    const probe = new Xoshiro128StarStar(state);
    expect([probe.nextU32(), probe.nextU32()]).toEqual([0xffffffff, 0xffffffff]);
    const u = new Xoshiro128StarStar(state).uniform();
    expect(u).toBe(1 - 2 ** -53);
    expect(u).toBeLessThan(1);
  });
});

describe('jump', () => {
  /** Applies a GF(2) matrix given by its 128 columns (4 words each) to a 4-word vector. */
  function apply(columns: Uint32Array[], v: ArrayLike<number>): Uint32Array {
    const out = new Uint32Array(4);
    for (let k = 0; k < 128; k++) {
      if ((v[k >>> 5] >>> (k & 31)) & 1) {
        const column = columns[k];
        for (let w = 0; w < 4; w++) out[w] ^= column[w];
      }
    }
    return out;
  }

  test('advances by exactly 2^64 steps (checked by squaring the transition matrix)', () => {
    // The xoshiro step is linear over GF(2) (Blackman & Vigna 2018), so 2^64 steps equal the
    // transition matrix raised to 2^64, computed here by 64 squarings: common practice.
    const rng = new Xoshiro128StarStar([1, 0, 0, 0]);
    let columns: Uint32Array[] = [];
    for (let k = 0; k < 128; k++) {
      const unit = [0, 0, 0, 0];
      unit[k >>> 5] = 2 ** (k & 31);
      rng.setState(unit);
      rng.nextU32();
      columns.push(Uint32Array.from(rng.getState()));
    }
    for (let squaring = 0; squaring < 64; squaring++) {
      const current = columns;
      columns = current.map((column) => apply(current, column));
    }
    for (const stream of [0, 1, 7]) {
      const generator = createRng(SEED, stream);
      const expected = Array.from(apply(columns, generator.getState()));
      jump(generator);
      expect(generator.getState()).toEqual(expected);
    }
  });

  test('refuses generators it does not know', () => {
    const foreign: Rng = { nextU32: () => 0, uniform: () => 0.5, getState: () => [], setState: () => {} };
    expect(() => jump(foreign)).toThrow(TypeError);
  });
});
