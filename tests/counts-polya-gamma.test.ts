/**
 * Pólya–Gamma variates of the counts model (src/sampler/polya-gamma-real.ts): real shapes b and
 * the short series for b ≥ 21.
 *
 * Outside references: the definition of PG(b, z) as an infinite sum of gammas, its exact
 * characteristic function and the convolution PG(b₁, z) + PG(b₂, z) = PG(b₁ + b₂, z) (Polson,
 * Scott & Windle 2013, JASA 108(504), Definition 1); Gil-Pelaez (1951, Biometrika 38, 481–482)
 * inversion for the distance between an approximation and the exact law, written independently of
 * src/ in tests/support/pg-characteristic.ts. The exact PG(b ≤ 20, z) sampler used as the other
 * side of the convolution checks is itself tested against the exact distribution function in
 * tests/polya-gamma.test.ts.
 *
 * False alarms (fixed seeds): each two-sample Kolmogorov–Smirnov test rejects at P < 1e-4 and
 * each moment check uses a two-sided z of 4.4172 (1e-5); 6 + 2·8 checks keep the family-wise
 * rate below 1e-3.
 */
import { describe, expect, test } from 'vitest';
import { createRng } from '../src/sampler/rng.js';
import { pgInt, pgMean, pgVariance, PG_INVERSE_GAUSSIAN_TV_MAX, pgInverseGaussianTvBound } from '../src/sampler/polya-gamma.js';
import {
  PG_REAL_KS_BOUND,
  PG_REAL_METHOD_NOTE,
  PG_REAL_MIN_MEASURED_B,
  pgLargeShapeTerms,
  pgRealPieceTerms,
  pgReal,
  unitShapeMoments,
} from '../src/sampler/polya-gamma-real.js';
import { gammaSeriesLogCf, pgCumulant, pgKolmogorovBound } from './support/pg-characteristic.js';
import { Z_TWO_SIDED_1E5, kolmogorovUpperTail } from './support/reference-distributions.js';

const SEED = 20261209;
const Z = Z_TWO_SIDED_1E5;

/** |z| from which the inverse-Gaussian branch replaces the series at shape b (as in src/). */
function inverseGaussianSwitch(b: number): number {
  let z = 0;
  while (pgInverseGaussianTvBound(b, z) > PG_INVERSE_GAUSSIAN_TV_MAX) z += 0.01;
  return z;
}

/** Tilts where the series is used: 0, 1, and just below each increase of the term count. */
function worstTilts(b: number, termsOf: (z: number) => number): number[] {
  const limit = inverseGaussianSwitch(b);
  const zs = [0, 1];
  let previous = termsOf(0);
  for (let z = 0.01; z < limit; z += 0.01) {
    const k = termsOf(z);
    if (k !== previous) zs.push(z - 0.01);
    previous = k;
  }
  zs.push(limit - 0.01);
  return zs;
}

function draws(n: number, draw: () => number): Float64Array {
  const out = new Float64Array(n);
  for (let i = 0; i < n; i++) out[i] = draw();
  return out;
}

function expectMoments(sample: Float64Array, b: number, z: number): void {
  const n = sample.length;
  let sum = 0;
  for (const x of sample) sum += x;
  const mean = sum / n;
  let squares = 0;
  for (const x of sample) squares += (x - mean) ** 2;
  const variance = squares / (n - 1);
  const exactVariance = pgVariance(b, z);
  const mu4 = pgCumulant(4, b, z) + 3 * exactVariance * exactVariance;
  expect(Math.abs(mean - pgMean(b, z)), `mean b=${b} z=${z}`).toBeLessThan(Z * Math.sqrt(exactVariance / n));
  expect(Math.abs(variance - exactVariance), `variance b=${b} z=${z}`).toBeLessThan(
    Z * Math.sqrt((mu4 - exactVariance * exactVariance) / n),
  );
}

/** Two-sample Kolmogorov–Smirnov (Press et al. 2007, Numerical Recipes 3rd ed., §14.3.3). */
function ksTwoSample(a: Float64Array, b: Float64Array): number {
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
  return kolmogorovUpperTail(d * (root + 0.12 + 0.11 / root));
}

describe('accuracy of the series branches, by Fourier inversion', () => {
  test('b ≥ 21 with 3 + ⌈|z|⌉ terms: Kolmogorov distance below the documented bound', () => {
    let worst = 0;
    for (const b of [21, 21.5, 27.3, 50, 137.4, 500, 2000, 100_000]) {
      for (const z of worstTilts(b, pgLargeShapeTerms)) {
        const distance = pgKolmogorovBound(b, z, gammaSeriesLogCf(b, z, pgLargeShapeTerms(z)), 6000);
        worst = Math.max(worst, distance);
        expect(distance, `b = ${b}, z = ${z}`).toBeLessThan(PG_REAL_KS_BOUND);
      }
    }
    // The module doc's figure: 1.7e-7 at b = 21, z = 0 with 3 terms.
    expect(pgKolmogorovBound(21, 0, gammaSeriesLogCf(21, 0, 3), 6000)).toBeCloseTo(1.7e-7, 8);
    expect(worst).toBeGreaterThan(1e-8);
  });

  test('the distance computation sees a too-short series: 2 terms at b = 21, z = 6 exceed the bound', () => {
    expect(pgKolmogorovBound(21, 6, gammaSeriesLogCf(21, 6, 2), 6000)).toBeGreaterThan(10 * PG_REAL_KS_BOUND);
  });

  test(`pieces of shape r < 2 (non-integer effective counts): below the bound for r ≥ ${PG_REAL_MIN_MEASURED_B}`, () => {
    for (const r of [PG_REAL_MIN_MEASURED_B, 0.1, 0.3, 0.7, 0.999, 1, 1.3, 1.999]) {
      for (const z of worstTilts(r, (t) => pgRealPieceTerms(r, t)).filter((_, k, all) => k % 2 === 0 || k === all.length - 1)) {
        const distance = pgKolmogorovBound(r, z, gammaSeriesLogCf(r, z, pgRealPieceTerms(r, z)), 20_000);
        expect(distance, `r = ${r}, z = ${z}`).toBeLessThan(PG_REAL_KS_BOUND);
      }
    }
  });

  test('the method note states the branches and the bound', () => {
    expect(PG_REAL_METHOD_NOTE).toContain('3 + ⌈|z|⌉');
    expect(PG_REAL_METHOD_NOTE).toContain(PG_REAL_KS_BOUND.toExponential(0));
    expect(PG_REAL_METHOD_NOTE).toContain('Satterthwaite');
  });
});

describe('pgReal draws', () => {
  test('the one-tanh moments equal pgMean and pgVariance (closed forms of Polson, Scott & Windle 2013)', () => {
    for (const z of [0, 0.05, -0.19, 0.2, 0.7, -2.5, 6, 19, 40, 300]) {
      const { mean, variance } = unitShapeMoments(z);
      expect(Math.abs(mean / pgMean(1, z) - 1), `mean at ${z}`).toBeLessThan(1e-13);
      expect(Math.abs(variance / pgVariance(1, z) - 1), `variance at ${z}`).toBeLessThan(1e-12);
    }
  });

  test.each([
    [0.4, 1.2],
    [1.7, -0.5],
    [7.5, 2.5],
    [20.6, 0],
    [21, 3.3],
    [33.3, -1.4],
    [250, 6],
    [2.5, 30], // inverse-Gaussian piece
  ])('b = %s, z = %s: mean and variance match the exact moments', (b, z) => {
    const rng = createRng(SEED, Math.round(100 * b + 10 * Math.abs(z)));
    // Shapes below 2 cost ~200 gamma variates a draw: fewer draws (the tolerance follows n).
    expectMoments(draws(b < 2 ? 30_000 : 100_000, () => pgReal(rng, b, z)), b, z);
  });

  test.each([
    [0.3, 2.7, 1.1],
    [1.25, 1.75, -2],
    [12.5, 12.5, 0.7],
    [30.5, 9.5, 2.2],
  ])('PG(%s) + PG(%s) has the law of exact PG(b₁ + b₂) at z = %s (two-sample KS)', (b1, b2, z) => {
    const rng = createRng(SEED, 5000 + Math.round(10 * b1));
    const n = 30_000;
    const summed = draws(n, () => pgReal(rng, b1, z) + pgReal(rng, b2, z));
    // The reference: an exact sum of PG(1, z) draws where b₁ + b₂ ≤ 20; at 40 the series branch
    // of src/sampler/polya-gamma.ts (its accuracy measured in tests/polya-gamma.test.ts).
    const reference = draws(n, () => pgInt(rng, b1 + b2, z));
    expect(ksTwoSample(summed, reference)).toBeGreaterThan(1e-4);
  });

  test('the two-sample check has power: PG(0.3) + PG(2.9) is told from PG(3)', () => {
    const rng = createRng(SEED, 77);
    const n = 30_000;
    const summed = draws(n, () => pgReal(rng, 0.3, 1.1) + pgReal(rng, 2.9, 1.1));
    const reference = draws(n, () => pgInt(rng, 3, 1.1));
    expect(ksTwoSample(summed, reference)).toBeLessThan(1e-4);
  });

  test('b = 0 gives 0; whole b ≤ 20 is the exact sum (same draws as pgInt); bad input is rejected', () => {
    const rng = createRng(SEED, 1);
    expect(pgReal(rng, 0, 2)).toBe(0);
    const a = createRng(SEED, 2);
    const b = createRng(SEED, 2);
    expect(draws(500, () => pgReal(a, 7, -1.3))).toEqual(draws(500, () => pgInt(b, 7, -1.3)));
    for (const bad of [-0.5, Number.NaN, Infinity]) expect(() => pgReal(rng, bad, 0)).toThrow(RangeError);
    expect(() => pgReal(rng, 2.5, Number.NaN)).toThrow(RangeError);
  });
});
