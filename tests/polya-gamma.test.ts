import { describe, expect, test } from 'vitest';
import { createRng } from '../src/sampler/rng.js';
import {
  PG_EXACT_SUM_MAX_B,
  PG_INVERSE_GAUSSIAN_TV_MAX,
  PG_METHOD_NOTE,
  PG_SERIES_KS_BOUND,
  pg1,
  pgGammaSeries,
  pgInt,
  pgInverseGaussianTvBound,
  pgMean,
  pgOneCdf,
  pgOneDensity,
  pgSeriesTerms,
  pgVariance,
} from '../src/sampler/polya-gamma.js';
import { Z_TWO_SIDED_1E5, kolmogorovUpperTail, ksTest } from './support/reference-distributions.js';
import { gammaSeriesLogCf, pgCumulant, pgKolmogorovBound, pgLogCf, pgMeanBySeries } from './support/pg-characteristic.js';

// False-alarm rates, all with fixed seeds: every goodness-of-fit test (one- or two-sample
// Kolmogorov–Smirnov) rejects at P < 1e-4; every moment check uses a two-sided z of 4.4172
// (rate 1e-5) with the standard error from the exact moments of PG(b, z). With 11 fit tests and
// 45 moment checks the family-wise false-alarm rate of this file is below 2e-3.
//
// Outside references: the definition of PG(b, z) as an infinite sum of gammas (Polson, Scott &
// Windle 2013, JASA 108(504), Definition 1), from which its cumulants b (r − 1)! Σ_k w_k^r and its
// Laplace transform cosh^b(z/2)/cosh^b(√((z²/2 + s)/2)) follow; the characteristic function is
// inverted numerically by the Gil-Pelaez (1951, Biometrika 38, 481–482) formula
// F(x) = 1/2 − (1/π) ∫₀^∞ Im[e^{−iux} φ(u)]/u du, a general-purpose computation written here
// independently of src/.
const SEED = 20261207;
const ALPHA = 1e-4;
const Z = Z_TWO_SIDED_1E5;
const PI = Math.PI;

function draws(n: number, draw: () => number): Float64Array {
  const out = new Float64Array(n);
  for (let i = 0; i < n; i++) out[i] = draw();
  return out;
}

// ---------------------------------------------------------------------------------------------
// Exact reference quantities from the series definition ω = Σ_k w_k g_k, g_k ~ Gamma(b, 1)

/** Checks sample mean and variance against exact moments; sd of s² is √((μ4 − σ⁴)/n). */
function expectPgMoments(sample: Float64Array, b: number, z: number): void {
  const n = sample.length;
  let sum = 0;
  for (const x of sample) sum += x;
  const mean = sum / n;
  let squares = 0;
  for (const x of sample) squares += (x - mean) * (x - mean);
  const variance = squares / (n - 1);
  const exactVariance = pgVariance(b, z);
  const mu4 = pgCumulant(4, b, z) + 3 * exactVariance * exactVariance;
  expect(Math.abs(mean - pgMean(b, z))).toBeLessThan(Z * Math.sqrt(exactVariance / n));
  expect(Math.abs(variance - exactVariance)).toBeLessThan(
    Z * Math.sqrt((mu4 - exactVariance * exactVariance) / n),
  );
}

// ---------------------------------------------------------------------------------------------
// Characteristic functions and their inversion

/** The exact characteristic function on a uniform grid 0 < u ≤ U where |φ(U)| < e^{−45}. */
interface CfGrid {
  h: number;
  u: Float64Array;
  re: Float64Array;
  im: Float64Array;
  mean: number;
}

function exactCfGrid(b: number, z: number, nodes: number): CfGrid {
  let limit = 1;
  while (pgLogCf(b, z, limit)[0] > -45) limit *= 1.25;
  const h = limit / nodes;
  const u = new Float64Array(nodes + 1);
  const re = new Float64Array(nodes + 1);
  const im = new Float64Array(nodes + 1);
  for (let j = 1; j <= nodes; j++) {
    u[j] = j * h;
    const [lr, li] = pgLogCf(b, z, u[j]);
    const modulus = Math.exp(lr);
    re[j] = modulus * Math.cos(li);
    im[j] = modulus * Math.sin(li);
  }
  return { h, u, re, im, mean: pgMean(b, z) };
}

/**
 * Gil-Pelaez (1951) inversion F(x) = 1/2 − (1/π) ∫₀^U Im[e^{−iux} φ(u)]/u du by Simpson's rule;
 * the integrand tends to E[ω] − x at u = 0.
 */
function invertCdf(grid: CfGrid, x: number): number {
  const { h, u, re, im } = grid;
  const last = u.length - 1;
  let sum = grid.mean - x;
  for (let j = 1; j <= last; j++) {
    const value = (Math.cos(u[j] * x) * im[j] - Math.sin(u[j] * x) * re[j]) / u[j];
    sum += (j === last ? 1 : j % 2 === 1 ? 4 : 2) * value;
  }
  return 0.5 - (sum * h) / (3 * PI);
}

/** The gamma-series approximation of src/ for (b, z), rebuilt from its description. */
function seriesApproximation(b: number, z: number): (u: number) => [number, number] {
  return gammaSeriesLogCf(b, z, pgSeriesTerms(z));
}

/**
 * One-sample Kolmogorov–Smirnov statistic restricted to grid points: max_j |F_n(x_j) − F(x_j)|.
 * It never exceeds the full statistic, so the Kolmogorov P-value is conservative (the
 * false-alarm rate is at most the nominal one).
 */
function ksOnGrid(sample: Float64Array, xs: number[], cdf: number[]): { d: number; pValue: number } {
  const sorted = Float64Array.from(sample).sort();
  const n = sorted.length;
  let d = 0;
  let index = 0;
  for (let j = 0; j < xs.length; j++) {
    while (index < n && sorted[index] <= xs[j]) index++;
    d = Math.max(d, Math.abs(index / n - cdf[j]));
  }
  const root = Math.sqrt(n);
  return { d, pValue: kolmogorovUpperTail(d * (root + 0.12 + 0.11 / root)) };
}

/**
 * Two-sample Kolmogorov–Smirnov test, P-value from the limiting distribution with effective size
 * n₁n₂/(n₁ + n₂) and the Stephens (1970) correction (Press et al. 2007, Numerical Recipes 3rd
 * ed., §14.3.3).
 */
function ksTwoSample(a: Float64Array, b: Float64Array): { d: number; pValue: number } {
  const x = Float64Array.from(a).sort();
  const y = Float64Array.from(b).sort();
  let i = 0;
  let j = 0;
  let d = 0;
  while (i < x.length && j < y.length) {
    const v = Math.min(x[i], y[j]);
    while (i < x.length && x[i] <= v) i++;
    while (j < y.length && y[j] <= v) j++;
    d = Math.max(d, Math.abs(i / x.length - j / y.length));
  }
  const root = Math.sqrt((x.length * y.length) / (x.length + y.length));
  return { d, pValue: kolmogorovUpperTail(d * (root + 0.12 + 0.11 / root)) };
}

/** Exact CDF of PG(b, z) at mean + (−6 … 10) sd in 160 steps (inside the support), by inversion. */
function exactCdfOnGrid(b: number, z: number, nodes = 8000): { xs: number[]; cdf: number[] } {
  const grid = exactCfGrid(b, z, nodes);
  const sd = Math.sqrt(pgVariance(b, z));
  const xs: number[] = [];
  for (let j = -60; j <= 100; j++) {
    const x = grid.mean + (j * sd) / 10;
    if (x > 0) xs.push(x);
  }
  return { xs, cdf: xs.map((x) => invertCdf(grid, x)) };
}

/** Simpson's rule with `intervals` (even) panels. */
function simpson(f: (x: number) => number, a: number, b: number, intervals: number): number {
  const h = (b - a) / intervals;
  let sum = f(a) + f(b);
  for (let i = 1; i < intervals; i++) sum += (i % 2 === 1 ? 4 : 2) * f(a + i * h);
  return (sum * h) / 3;
}

// ---------------------------------------------------------------------------------------------

describe('exact moments', () => {
  test('limits at z = 0 are b/4 and b/24', () => {
    // E[PG(b, 0)] = b/4 (Polson, Scott & Windle 2013, §2); Var = b/24 from the series:
    // Σ_k 1/(2π²(k − ½)²)² = (1/(4π⁴)) · 16 · (π⁴/96) = 1/24 (Σ odd n⁻⁴ = π⁴/96, Abramowitz &
    // Stegun 1964, 23.2.20 with 23.2.24 — recalled from memory).
    for (const b of [1, 7, 300]) {
      expect(pgMean(b, 0)).toBe(b / 4);
      expect(Math.abs(pgVariance(b, 0) - b / 24)).toBeLessThan(1e-16 * b);
    }
  });

  test('closed forms equal the series definition (mean, variance) at many z', () => {
    // The closed forms b/(2z) tanh(z/2) and b/(4z³)(sinh z − z)/cosh²(z/2) against the cumulants
    // of Σ w_k g_k computed term by term; both sides of the |z| = 0.2 switch to a Taylor series.
    for (const z of [0, 1e-8, 0.05, 0.15, 0.1999, 0.2, 0.2001, 0.3, 1, 1.5, 6, 20, 50, 300]) {
      for (const zz of [z, -z]) {
        expect(Math.abs(pgMean(3, zz) / pgMeanBySeries(3, zz) - 1)).toBeLessThan(1e-12);
        expect(Math.abs(pgVariance(3, zz) / pgCumulant(2, 3, zz) - 1)).toBeLessThan(1e-12);
      }
    }
  });

  test('large z: finite, and the 1/(2z), 1/(2z³) asymptotes', () => {
    for (const z of [800, 1500, 1e6]) {
      expect(pgMean(1, z) * 2 * z).toBeCloseTo(1, 14);
      expect(pgVariance(1, z) * 2 * z ** 3).toBeCloseTo(1, 12);
    }
  });
});

describe('PG(1, z) density and distribution function', () => {
  test.each([0, 1.5, 6])('z = %s: density integrates to 1, the exact mean and variance', (z) => {
    const upper = 0.25 + 40 * Math.sqrt(pgVariance(1, 0));
    const mass = simpson((x) => pgOneDensity(x, z), 0, upper, 40_000);
    const first = simpson((x) => x * pgOneDensity(x, z), 0, upper, 40_000);
    const second = simpson((x) => x * x * pgOneDensity(x, z), 0, upper, 40_000);
    expect(Math.abs(mass - 1)).toBeLessThan(1e-10);
    expect(Math.abs(first - pgMean(1, z))).toBeLessThan(1e-10);
    expect(Math.abs(second - first * first - pgVariance(1, z))).toBeLessThan(1e-10);
  });

  test.each([0, 1.5, 6])('z = %s: distribution function equals the integrated density', (z) => {
    // Points on both sides of the switch between the left and right series (x = 0.16).
    for (const x of [0.03, 0.08, 0.15, 0.16, 0.17, 0.3, 0.7]) {
      const integral = simpson((s) => pgOneDensity(s, z), 0, x, 20_000);
      expect(Math.abs(pgOneCdf(x, z) - integral)).toBeLessThan(1e-11);
    }
  });

  test.each([0, 1.5, 6])(
    'z = %s: distribution function equals Gil-Pelaez inversion of the Laplace transform',
    (z) => {
      const grid = exactCfGrid(1, z, 150_000);
      for (const x of [0.05, 0.1, 0.159, 0.161, 0.25, 0.5, 1, 1.6]) {
        expect(Math.abs(pgOneCdf(x, z) - invertCdf(grid, x))).toBeLessThan(1e-8);
      }
    },
  );

  test('edges: 0 below the support, 1 at infinity, symmetric in z', () => {
    for (const z of [0, 2, 60]) {
      expect(pgOneCdf(0, z)).toBe(0);
      expect(pgOneCdf(-1, z)).toBe(0);
      expect(pgOneCdf(Infinity, z)).toBe(1);
      expect(pgOneDensity(0, z)).toBe(0);
      expect(pgOneCdf(0.2, -z)).toBe(pgOneCdf(0.2, z));
    }
    expect(Number.isFinite(pgOneCdf(1e-4, 1e4))).toBe(true);
  });
});

describe('pg1: exact PG(1, z) draws', () => {
  test.each([0, 1.5, 6])('z = %s: Kolmogorov–Smirnov fit to the exact distribution function', (z) => {
    const rng = createRng(SEED, 1 + Math.round(10 * z));
    const sample = draws(100_000, () => pg1(rng, z));
    expect(ksTest(sample, (x) => pgOneCdf(x, z)).pValue).toBeGreaterThan(ALPHA);
  });

  test('the fit test has power: a 10% error in z is rejected', () => {
    const rng = createRng(SEED, 90);
    const sample = draws(100_000, () => pg1(rng, 1.65));
    expect(ksTest(sample, (x) => pgOneCdf(x, 1.5)).pValue).toBeLessThan(ALPHA);
  });

  test.each([0, 0.1, 1.5, -3, 6, 20, 50])('z = %s: mean and variance match the exact moments', (z) => {
    const rng = createRng(SEED, 100 + Math.round(10 * Math.abs(z)) + (z < 0 ? 1000 : 0));
    expectPgMoments(draws(100_000, () => pg1(rng, z)), 1, z);
  });

  test('negative z gives the same draws as positive z', () => {
    const a = createRng(SEED, 7);
    const b = createRng(SEED, 7);
    expect(draws(2000, () => pg1(a, -2.5))).toEqual(draws(2000, () => pg1(b, 2.5)));
  });

  test('finite and positive for z = 0, ±tiny and z up to 1e6; mean right at extremes', () => {
    const rng = createRng(SEED, 8);
    for (const z of [0, -0, 1e-300, -1e-300, 50, -50, 700, 1e6, -1e6]) {
      let sum = 0;
      let bad = 0;
      const n = 20_000;
      for (let i = 0; i < n; i++) {
        const x = pg1(rng, z);
        if (!(x > 0 && Number.isFinite(x))) bad++;
        sum += x;
      }
      expect(bad).toBe(0);
      expect(Math.abs(sum / n - pgMean(1, z))).toBeLessThan(Z * Math.sqrt(pgVariance(1, z) / n));
    }
  });

  test('rejects non-finite z', () => {
    const rng = createRng(SEED, 0);
    for (const bad of [Number.NaN, Infinity, -Infinity]) expect(() => pg1(rng, bad)).toThrow(RangeError);
  });
});

describe('pgInt: integer b', () => {
  test('b = 0 is the point mass at 0; bad b or z is rejected', () => {
    const rng = createRng(SEED, 0);
    expect(pgInt(rng, 0, 1.3)).toBe(0);
    for (const bad of [-1, 1.5, Number.NaN, Infinity, 2 ** 53]) {
      expect(() => pgInt(rng, bad, 0)).toThrow(RangeError);
    }
    expect(() => pgInt(rng, 3, Number.NaN)).toThrow(RangeError);
    expect(() => pgGammaSeries(rng, 0, 1)).toThrow(RangeError);
  });

  test.each([
    [2, 0.5],
    [5, 3],
    [PG_EXACT_SUM_MAX_B, 0],
    [21, 0],
    [21, 10],
    [50, 2],
    [200, 1],
    [1000, 15],
    [100_000, 4],
    [21, 25], // inverse-Gaussian branch
    [5000, 40],
  ])('b = %s, z = %s: mean and variance match the exact moments', (b, z) => {
    const rng = createRng(SEED, 200 + b + Math.round(10 * z));
    // Fewer draws where each costs b exact PG(1, z) draws.
    const n = b <= PG_EXACT_SUM_MAX_B ? 40_000 : 100_000;
    expectPgMoments(draws(n, () => pgInt(rng, b, z)), b, z);
  });

  test.each([
    [5, 1],
    [21, 0],
    [21, 15],
    [21, 25], // inverse-Gaussian branch
    [200, 3],
  ])('b = %s, z = %s: Kolmogorov–Smirnov fit to the exact distribution (Fourier inversion)', (b, z) => {
    const { xs, cdf } = exactCdfOnGrid(b, z);
    const rng = createRng(SEED, 300 + b + Math.round(10 * z));
    const sample = draws(b <= PG_EXACT_SUM_MAX_B ? 40_000 : 100_000, () => pgInt(rng, b, z));
    expect(ksOnGrid(sample, xs, cdf).pValue).toBeGreaterThan(ALPHA);
  });

  test('the inversion reference has power: PG(21, 0) draws are rejected as PG(22, 0)', () => {
    const { xs, cdf } = exactCdfOnGrid(22, 0);
    const rng = createRng(SEED, 399);
    const sample = draws(100_000, () => pgInt(rng, 21, 0));
    expect(ksOnGrid(sample, xs, cdf).pValue).toBeLessThan(ALPHA);
  });

  test.each([0, 12, 25])(
    'switch-over b = 21, z = %s: the approximation matches the exact sum of 21 PG(1, z) (two-sample)',
    (z) => {
      const b = PG_EXACT_SUM_MAX_B + 1;
      const rng = createRng(SEED, 500 + Math.round(10 * z));
      const approximate = draws(20_000, () => pgInt(rng, b, z));
      const exact = draws(20_000, () => {
        let sum = 0;
        for (let i = 0; i < b; i++) sum += pg1(rng, z);
        return sum;
      });
      expect(ksTwoSample(approximate, exact).pValue).toBeGreaterThan(ALPHA);
    },
  );

  test('same seed, same draws; a restored state continues identically', () => {
    for (const [b, z] of [
      [3, 1],
      [50, 2],
      [30, 30],
    ]) {
      const a = createRng(SEED, 11);
      const c = createRng(SEED, 11);
      const first = draws(300, () => pgInt(a, b, z));
      expect(draws(300, () => pgInt(c, b, z))).toEqual(first);
      const saved = a.getState();
      const next = draws(50, () => pgInt(a, b, z));
      a.setState(saved);
      expect(draws(50, () => pgInt(a, b, z))).toEqual(next);
      expect(new Set(first).size).toBe(300);
    }
  });

  test('finite and positive across b and extreme z', () => {
    const rng = createRng(SEED, 12);
    let bad = 0;
    for (const b of [1, 20, 21, 1000, 1e9]) {
      for (const z of [0, 1e-300, -1e-300, 10, -10, 22, 50, -50, 700, 1e6]) {
        for (let i = 0; i < 200; i++) {
          const x = pgInt(rng, b, z);
          if (!(x > 0 && Number.isFinite(x))) bad++;
        }
      }
    }
    expect(bad).toBe(0);
  });
});

describe('accuracy of the large-b approximations', () => {
  test('gamma series: Kolmogorov distance below the documented bound wherever pgInt uses it', () => {
    let worst = 0;
    for (const b of [21, 25, 40, 100, 200, 1000, 100_000]) {
      let zSwitch = 0;
      while (pgInverseGaussianTvBound(b, zSwitch) > PG_INVERSE_GAUSSIAN_TV_MAX) zSwitch += 0.05;
      // Just below each increase of the number of kept terms (the worst points) and at the switch.
      const zs = [0, 1, 3];
      for (let z = 2 * PI - 0.01; z < zSwitch; z += 2 * PI) zs.push(z);
      zs.push(zSwitch - 0.05);
      for (const z of zs) {
        const distance = pgKolmogorovBound(b, z, seriesApproximation(b, z));
        worst = Math.max(worst, distance);
        expect(distance).toBeLessThan(PG_SERIES_KS_BOUND);
      }
    }
    // The figures stated in PG_METHOD_NOTE: worst 2.1e-7 (b = 21, z ≈ 18.8, in the grid above).
    expect(worst).toBeGreaterThan(1.9e-7);
    expect(worst).toBeLessThan(2.3e-7);
    expect(PG_METHOD_NOTE).toContain('2.1e-7');
  });

  test.each([
    [21, 4.7e-10],
    [200, 1.3e-10],
  ])('gamma series at b = %s, z = 0: Kolmogorov distance as stated in the method note', (b, stated) => {
    const distance = pgKolmogorovBound(b, 0, seriesApproximation(b, 0));
    expect(Math.abs(distance / stated - 1)).toBeLessThan(0.05);
    expect(PG_METHOD_NOTE).toContain(stated.toExponential(1));
  });

  test('the distance computation detects a real error: normal approximation at b = 21', () => {
    // The normal law with the exact mean and variance misses the skewness γ = κ₃/κ₂^{3/2}; the
    // first Edgeworth term gives sup|ΔF| ≈ |γ|/(6√(2π)) (e.g. Hall 1992, The Bootstrap and
    // Edgeworth Expansion, §2.2 — recalled from memory); at z = 0, γ = (b/60)/(b/24)^{3/2}, here
    // computed from the series cumulants.
    const b = 21;
    const mean = pgMean(b, 0);
    const variance = pgVariance(b, 0);
    const skewness = pgCumulant(3, b, 0) / variance ** 1.5;
    const normal = (u: number): [number, number] => [-0.5 * variance * u * u, mean * u];
    const distance = pgKolmogorovBound(b, 0, normal);
    const edgeworth = skewness / (6 * Math.sqrt(2 * PI));
    expect(distance).toBeGreaterThan(0.9 * edgeworth);
    expect(distance).toBeLessThan(1.5 * edgeworth);
    expect(edgeworth).toBeGreaterThan(0.025); // "about 0.03" in PG_METHOD_NOTE
    expect(edgeworth).toBeLessThan(0.035);
    // And the CDF difference itself, by inversion, is of that size at the mean.
    const grid = exactCfGrid(b, 0, 8000);
    const gap = Math.abs(invertCdf(grid, mean) - 0.5);
    expect(Math.abs(gap - edgeworth)).toBeLessThan(0.2 * edgeworth);
  });

  test('inverse-Gaussian branch: the total-variation bound holds against the exact density (b = 1)', () => {
    // For b = 1 the distance can be computed directly: ½∫|f_PG(x | 1, z) − f_IG(x)| dx with
    // f_IG the density of IG(2/|z|, 1)/4; the bound (≈ e^{−|z|}) must cover it and be near it.
    for (const z of [3, 6, 9]) {
      const mu = 2 / z;
      const igDensity = (x: number): number => {
        const y = 4 * x;
        return (4 * Math.exp(-((y - mu) ** 2) / (2 * mu * mu * y))) / Math.sqrt(2 * PI * y ** 3);
      };
      const tv = 0.5 * simpson((x) => Math.abs(pgOneDensity(x, z) - igDensity(x)), 1e-9, 3, 60_000);
      const bound = pgInverseGaussianTvBound(1, z);
      expect(tv).toBeLessThanOrEqual(bound * (1 + 1e-6));
      expect(tv).toBeGreaterThan(0.4 * bound);
    }
    // Where pgInt switches to it the bound is at most the documented maximum.
    expect(pgInverseGaussianTvBound(21, 21.5)).toBeLessThanOrEqual(PG_INVERSE_GAUSSIAN_TV_MAX);
  });

  test('the method note names each branch and the measured accuracy', () => {
    expect(PG_METHOD_NOTE).toContain(`b ≤ ${PG_EXACT_SUM_MAX_B}`);
    expect(PG_METHOD_NOTE).toContain('Satterthwaite');
    expect(PG_METHOD_NOTE).toContain(PG_SERIES_KS_BOUND.toExponential(0));
    expect(PG_METHOD_NOTE).toContain('inverse-Gaussian');
  });
});
