import { describe, expect, test } from 'vitest';
import { createRng, type Rng } from '../src/sampler/rng.js';
import {
  buildNormalZiggurat,
  fillNormal,
  gamma,
  inverseGamma,
  normal,
  normalTail,
} from '../src/sampler/variates.js';
import {
  Z_TWO_SIDED_1E5,
  chiSquarePValue,
  erfc,
  gammaP,
  gammaQ,
  kolmogorovCritical,
  ksTest,
  logGamma,
  normalCdf,
  normalUpperTail,
} from './support/reference-distributions.js';

// False-alarm rates, all with fixed seeds: each goodness-of-fit test (Kolmogorov–Smirnov or
// chi-square) rejects at P < 1e-4; each moment check uses a two-sided z of 4.4172 (rate 1e-5)
// with the standard error computed from the exact moments of the target distribution.
const SEED = 20261201;
const ALPHA = 1e-4;
const Z = Z_TWO_SIDED_1E5;

function draws(n: number, draw: () => number): Float64Array {
  const out = new Float64Array(n);
  for (let i = 0; i < n; i++) out[i] = draw();
  return out;
}

function meanAndVariance(sample: Float64Array): { mean: number; variance: number } {
  let sum = 0;
  for (const x of sample) sum += x;
  const mean = sum / sample.length;
  let squares = 0;
  for (const x of sample) squares += (x - mean) * (x - mean);
  return { mean, variance: squares / (sample.length - 1) };
}

/** Checks sample mean and variance against exact moments; sd of s² is √((μ4 − σ⁴)/n). */
function expectMoments(sample: Float64Array, mean: number, variance: number, mu4: number): void {
  const n = sample.length;
  const observed = meanAndVariance(sample);
  expect(Math.abs(observed.mean - mean)).toBeLessThan(Z * Math.sqrt(variance / n));
  expect(Math.abs(observed.variance - variance)).toBeLessThan(Z * Math.sqrt((mu4 - variance * variance) / n));
}

/** Simpson's rule with `intervals` (even) panels: a general-purpose reference integral. */
function simpson(f: (x: number) => number, a: number, b: number, intervals: number): number {
  const h = (b - a) / intervals;
  let sum = f(a) + f(b);
  for (let i = 1; i < intervals; i++) sum += (i % 2 === 1 ? 4 : 2) * f(a + i * h);
  return (sum * h) / 3;
}

describe('reference functions used by the tests', () => {
  test('erfc and the normal CDF match tabulated values', () => {
    // erf(1) = 0.842700792949715, erf(2) = 0.995322265018953 (Abramowitz & Stegun 1964, Table 7.1;
    // digits recalled from memory).
    expect(Math.abs(erfc(1) - 0.157299207050285)).toBeLessThan(1e-14);
    expect(Math.abs(erfc(2) - 0.004677734981047)).toBeLessThan(1e-14);
    expect(Math.abs(erfc(-1) - 1.842700792949715)).toBeLessThan(1e-14);
    // Φ(1.959963984540054) = 0.975: common practice (the 95% two-sided normal quantile).
    expect(Math.abs(normalCdf(1.959963984540054) - 0.975)).toBeLessThan(1e-14);
    expect(Math.abs(normalUpperTail(1.959963984540054) - 0.025)).toBeLessThan(1e-15);
  });

  test('ln Γ matches exact values', () => {
    expect(Math.abs(logGamma(0.5) - 0.5 * Math.log(Math.PI))).toBeLessThan(1e-14);
    expect(Math.abs(logGamma(10) - Math.log(362880))).toBeLessThan(1e-13);
    let logFactorial40 = 0;
    for (let k = 2; k <= 40; k++) logFactorial40 += Math.log(k);
    expect(Math.abs(logGamma(41) - logFactorial40)).toBeLessThan(1e-12);
    // Γ(1/3) = 2.678938534707747633 (Abramowitz & Stegun 1964, 6.1.10 area; recalled from memory).
    expect(Math.abs(Math.exp(logGamma(1 / 3)) - 2.678938534707747633)).toBeLessThan(1e-13);
    // Recurrence Γ(x + 1) = x Γ(x) (A&S 6.1.15) at the shapes tested below.
    for (const x of [0.3, 1.3, 2.5, 40]) {
      expect(Math.abs(logGamma(x + 1) - logGamma(x) - Math.log(x))).toBeLessThan(1e-13);
    }
  });

  test('incomplete gamma matches closed forms, a table value and numerical integration', () => {
    for (const x of [0.2, 1, 3, 9]) {
      expect(Math.abs(gammaP(1, x) - (1 - Math.exp(-x)))).toBeLessThan(1e-14); // exponential CDF
    }
    // Integer shape: Q(n, x) = e^{-x} Σ_{k<n} x^k/k!, the Poisson identity (A&S 1964, 6.5.13).
    for (const x of [25, 40, 58]) {
      let term = Math.exp(-x);
      let sum = term;
      for (let k = 1; k < 40; k++) {
        term *= x / k;
        sum += term;
      }
      expect(Math.abs(gammaQ(40, x) - sum)).toBeLessThan(1e-13);
    }
    // Half-integer shape via P(a + 1, x) = P(a, x) − x^a e^{-x} / Γ(a + 1) (A&S 1964, 6.5.21)
    // from P(1/2, x) = erf(√x).
    for (const x of [0.7, 2.5, 6]) {
      const p15 = 1 - erfc(Math.sqrt(x)) - (Math.sqrt(x) * Math.exp(-x)) / (Math.sqrt(Math.PI) / 2);
      const p25 = p15 - (x ** 1.5 * Math.exp(-x)) / ((3 * Math.sqrt(Math.PI)) / 4);
      expect(Math.abs(gammaP(2.5, x) - p25)).toBeLessThan(1e-14);
    }
    // Shape 0.3 by Simpson's rule after t = s^(1/a), which removes the singularity at 0:
    // γ(a, x) = ∫_0^{x^a} e^{−s^{1/a}} ds / a.
    const a = 0.3;
    for (const x of [0.05, 0.8, 2.5]) {
      const integral = simpson((s) => Math.exp(-(s ** (1 / a))), 0, x ** a, 20_000) / a;
      expect(Math.abs(gammaP(a, x) - integral / Math.exp(logGamma(a)))).toBeLessThan(1e-10);
    }
    // χ²(10) upper 5% point 18.307 (A&S 1964, Table 26.8; any χ² table), 3 decimals.
    expect(Math.abs(chiSquarePValue(18.307, 10) - 0.05)).toBeLessThan(1e-5);
  });

  test('Kolmogorov critical values match the usual table', () => {
    // 1.358 at 5% and 1.628 at 1% (Smirnov 1948 asymptotic table, as reproduced in most texts;
    // recalled from memory).
    expect(Math.abs(kolmogorovCritical(0.05) - 1.358)).toBeLessThan(1e-3);
    expect(Math.abs(kolmogorovCritical(0.01) - 1.628)).toBeLessThan(1e-3);
  });

  test('the KS check detects a 4% error in a gamma shape', () => {
    const rng = createRng(SEED, 90);
    const sample = draws(200_000, () => gamma(rng, 2.6));
    expect(ksTest(sample, (x) => gammaP(2.5, x)).pValue).toBeLessThan(ALPHA);
  });
});

describe('normal ziggurat tables', () => {
  test('128 layers reproduce the published constants', () => {
    // Marsaglia & Tsang (2000), J. Stat. Software 5(8), RNOR code: dn = 3.442619855899,
    // vn = 9.91256303526217e-3 (recalled from memory).
    const table = buildNormalZiggurat(128);
    expect(Math.abs(table.r - 3.442619855899)).toBeLessThan(1e-11);
    expect(Math.abs(table.v - 9.91256303526217e-3)).toBeLessThan(1e-12);
  });

  test('256 layers reproduce the usual constant', () => {
    // r = 3.6541528853610088 for 256 layers, as used by common 256-layer implementations
    // (recalled from memory).
    expect(Math.abs(buildNormalZiggurat(256).r - 3.6541528853610088)).toBeLessThan(1e-13);
  });

  test('every layer has the same area and the top closes at the peak', () => {
    const { layers, r, v, x, f, ratio } = buildNormalZiggurat(256);
    expect(Math.abs(x[0] * Math.exp(-0.5 * r * r) - v)).toBeLessThan(1e-16);
    for (let i = 1; i < layers; i++) {
      expect(Math.abs(x[i] * (f[i + 1] - f[i]) - v)).toBeLessThan(1e-15);
      expect(x[i + 1]).toBeLessThan(x[i]);
      expect(Math.abs(f[i] - Math.exp(-0.5 * x[i] * x[i]))).toBeLessThan(1e-15);
    }
    expect(x[layers]).toBe(0);
    expect(f[layers]).toBe(1);
    expect(ratio[layers - 1]).toBe(0);
  });
});

describe('normal', () => {
  test('is reproducible from a saved state, and fillNormal equals repeated calls', () => {
    const rng = createRng(SEED, 1);
    const saved = rng.getState();
    const first = draws(1000, () => normal(rng));
    rng.setState(saved);
    const filled = new Float64Array(1000);
    fillNormal(rng, filled);
    expect(filled).toEqual(first);
    expect(new Set(first).size).toBe(1000);
  });

  test('mean, variance and Kolmogorov–Smirnov fit to Φ', () => {
    const rng = createRng(SEED, 2);
    const sample = draws(1_000_000, () => normal(rng));
    expectMoments(sample, 0, 1, 3);
    expect(ksTest(sample, normalCdf).pValue).toBeGreaterThan(ALPHA);
  });

  test('chi-square fit on fine bins, and the exact tail beyond the ziggurat base', () => {
    const n = 4_000_000;
    const width = 0.05;
    const edge = 4;
    const inner = Math.round((2 * edge) / width);
    const counts = new Float64Array(inner + 2); // [0] below −4, [inner + 1] above 4
    const { r } = buildNormalZiggurat(256);
    const tail: number[] = [];
    const rng = createRng(SEED, 3);
    for (let i = 0; i < n; i++) {
      const z = normal(rng);
      const bin = z < -edge ? 0 : z >= edge ? inner + 1 : 1 + Math.min(inner - 1, Math.floor((z + edge) / width));
      counts[bin]++;
      if (Math.abs(z) > r) tail.push(Math.abs(z));
    }
    let statistic = 0;
    for (let bin = 0; bin < counts.length; bin++) {
      const lower = bin === 0 ? -Infinity : -edge + (bin - 1) * width;
      const upper = bin === inner + 1 ? Infinity : -edge + bin * width;
      const p = upper <= 0 ? normalCdf(upper) - normalCdf(lower) : normalUpperTail(lower) - normalUpperTail(upper);
      const expected = n * p;
      expect(expected).toBeGreaterThan(5);
      statistic += (counts[bin] - expected) ** 2 / expected;
    }
    expect(chiSquarePValue(statistic, counts.length - 1)).toBeGreaterThan(ALPHA);

    // Draws beyond r come from Marsaglia's tail method: count ~ Binomial(n, 2Q(r)), shape = the
    // normal conditioned on |z| > r.
    const tailProbability = 2 * normalUpperTail(r);
    expect(Math.abs(tail.length - n * tailProbability)).toBeLessThan(Z * Math.sqrt(n * tailProbability));
    const conditional = (x: number): number => 1 - normalUpperTail(x) / normalUpperTail(r);
    expect(ksTest(Float64Array.from(tail), conditional).pValue).toBeGreaterThan(ALPHA);
  });
});

describe('normalTail', () => {
  test.each([1, 3.6541528853610088])('above %s: Kolmogorov–Smirnov fit to the conditioned normal', (lower) => {
    const rng = createRng(SEED, 8);
    const sample = draws(200_000, () => normalTail(rng, lower));
    const conditional = (x: number): number => 1 - normalUpperTail(x) / normalUpperTail(lower);
    expect(ksTest(sample, conditional).pValue).toBeGreaterThan(ALPHA);
  });

  test('rejects a start that is not finite and positive', () => {
    const rng = createRng(SEED, 0);
    for (const bad of [0, -1, Number.NaN, Infinity]) expect(() => normalTail(rng, bad)).toThrow(RangeError);
  });
});

describe('gamma', () => {
  test.each([0.3, 1, 2.5, 40])('shape %s: moments and Kolmogorov–Smirnov fit to P(a, x)', (shape) => {
    const rng = createRng(SEED, 10 + Math.round(shape * 10));
    const sample = draws(200_000, () => gamma(rng, shape));
    // Gamma(a, 1): mean = variance = a, fourth central moment 3a² + 6a.
    expectMoments(sample, shape, shape, 3 * shape * shape + 6 * shape);
    expect(ksTest(sample, (x) => gammaP(shape, x)).pValue).toBeGreaterThan(ALPHA);
  });

  test('is reproducible from a saved state', () => {
    const rng = createRng(SEED, 4);
    const saved = rng.getState();
    const first = draws(500, () => gamma(rng, 0.7));
    rng.setState(saved);
    expect(draws(500, () => gamma(rng, 0.7))).toEqual(first);
  });

  test('rejects shapes that are not finite and positive', () => {
    const rng = createRng(SEED, 0);
    for (const bad of [0, -1, Number.NaN, Infinity]) expect(() => gamma(rng, bad)).toThrow(RangeError);
  });
});

describe('inverseGamma', () => {
  test('moments match the closed forms', () => {
    // E X^k = scale^k / ((a−1)(a−2)…(a−k)) for a > k; mean scale/(a−1),
    // variance scale²/((a−1)²(a−2)) (e.g. Gelman et al. 2013, BDA3, Appendix A).
    const shape = 12;
    const scale = 2.5;
    const raw = (k: number): number => {
      let value = 1;
      for (let j = 1; j <= k; j++) value *= scale / (shape - j);
      return value;
    };
    const mean = raw(1);
    const variance = raw(2) - mean * mean;
    expect(mean).toBeCloseTo(scale / (shape - 1), 15);
    expect(variance).toBeCloseTo((scale * scale) / ((shape - 1) ** 2 * (shape - 2)), 15);
    const mu4 = raw(4) - 4 * mean * raw(3) + 6 * mean * mean * raw(2) - 3 * mean ** 4;
    const rng = createRng(SEED, 5);
    expectMoments(draws(400_000, () => inverseGamma(rng, shape, scale)), mean, variance, mu4);
  });

  test('Kolmogorov–Smirnov fit to Q(a, scale/x)', () => {
    const rng = createRng(SEED, 6);
    const sample = draws(200_000, () => inverseGamma(rng, 3, 2));
    expect(ksTest(sample, (x) => gammaQ(3, 2 / x)).pValue).toBeGreaterThan(ALPHA);
  });

  test('the inverse-gamma mixture reproduces a half-Cauchy scale', () => {
    // Wand, Ormerod, Padoan & Frühwirth (2011), Bayesian Analysis 6(4), Result 5 (see
    // shared/checks/FORMULAS.md §3): a ~ IG(1/2, 1/A²), σ² | a ~ IG(ν/2, ν/a) gives σ ~ half-t(ν, A);
    // ν = 1 is half-Cauchy with CDF (2/π) arctan(σ/A), median A, 90% point A·tan(0.45π).
    const A = 2.5;
    const rng = createRng(SEED, 7);
    const sample = draws(200_000, () => {
      const a = inverseGamma(rng, 0.5, 1 / (A * A));
      return Math.sqrt(inverseGamma(rng, 0.5, 1 / a));
    });
    expect(ksTest(sample, (s) => (2 / Math.PI) * Math.atan(s / A)).pValue).toBeGreaterThan(ALPHA);
  });

  test('rejects scales that are not finite and positive', () => {
    const rng: Rng = createRng(SEED, 0);
    for (const bad of [0, -2, Number.NaN, Infinity]) expect(() => inverseGamma(rng, 2, bad)).toThrow(RangeError);
  });
});
