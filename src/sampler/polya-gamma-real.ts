/**
 * Pólya–Gamma variates PG(b, z) for the counts model: any real shape b ≥ 0 (a design effect
 * turns the counts into non-integer effective counts, src/data/counts.ts), and a cheaper series
 * for large b, whose accuracy is measured like that of src/sampler/polya-gamma.ts.
 *
 * PG(b, z) is infinitely divisible: PG(b₁, z) + PG(b₂, z) = PG(b₁ + b₂, z) for independent terms
 * (Polson, Scott & Windle 2013, JASA 108(504), Definition 1: a sum of Gamma(b, 1) variates with
 * fixed weights). So b is split into parts that each have a measured method:
 *
 * - b ≤ 20 a whole number: {@link pgInt}, the exact sum of b PG(1, z) draws.
 * - b > 21, or b = 21: one inverse-Gaussian draw when its total-variation bound is ≤
 *   {@link PG_INVERSE_GAUSSIAN_TV_MAX} (as {@link pgInt}), else the gamma series of Definition 1
 *   kept exactly for K = {@link pgLargeShapeTerms}(z) = 3 + ⌈|z|⌉ terms with the tail matched in
 *   mean and variance by one gamma variate (Satterthwaite 1946). For b ≥ 21 the tail of the
 *   series is so close to its two-moment match that far fewer terms than {@link pgInt}'s
 *   10 + 3⌈|z|/(2π)⌉ keep the Kolmogorov distance below {@link PG_REAL_KS_BOUND}: at b = 21
 *   (the worst b) it is 1.7e-7 at z = 0 with 3 terms (measured, tests/counts-polya-gamma.test.ts,
 *   over b from 21 to 10⁵ and |z| up to the inverse-Gaussian switch). For the counts model,
 *   where most sites have more than 20 trials, this makes a sweep about twice as fast at typical
 *   logits (|z| ≤ 3: 4 to 6 gamma variates instead of 14).
 * - otherwise b = w + r with w = ⌊b⌋ − 1 whole (exact sum of PG(1, z) draws) and r ∈ [1, 2); or
 *   b = r < 1. The piece PG(r, z) is one inverse-Gaussian draw where the bound allows (|z| above
 *   about 19), else the gamma series kept exactly for K = {@link pgSeriesTerms}(z) + 40 terms
 *   (r ≥ 1) or + 200 terms (r < 1) with the tail matched in mean and variance. Extra terms
 *   are needed because the one-gamma tail match is poor for small shapes: with the base K the
 *   Kolmogorov distance is 1e-1 at r = 0.02, 4e-3 at r = 0.1 and 2e-4 at r = 0.25 (measured).
 *   With the extra terms it is below {@link PG_REAL_KS_BOUND} for r ≥ 0.05 wherever the
 *   series is used (tests/counts-polya-gamma.test.ts). Convolution with an exact independent
 *   part cannot increase a Kolmogorov distance, so the bound holds for the sum.
 */
import type { Rng } from './rng.js';
import {
  PG_EXACT_SUM_MAX_B,
  PG_INVERSE_GAUSSIAN_TV_MAX,
  PG_TRUNCATION,
  pgInt,
  pgInverseGaussianTvBound,
  pgMean,
  pgSeriesTerms,
  pgVariance,
} from './polya-gamma.js';
import { gamma, normal } from './variates.js';

/** Extra exact gamma terms of the series for a piece of shape in [1, 2), and below 1. */
export const PG_REAL_EXTRA_TERMS = 40;
export const PG_REAL_SMALL_SHAPE_EXTRA_TERMS = 200;

/**
 * Documented bound on the Kolmogorov distance of {@link pgReal} from PG(b, z) for non-integer
 * b ≥ {@link PG_REAL_MIN_MEASURED_B} (tests/counts-polya-gamma.test.ts recomputes it by Fourier
 * inversion of the exact and approximate characteristic functions).
 */
export const PG_REAL_KS_BOUND = 1e-6;
/** Smallest shape at which the bound was measured (an effective sample size of 0.05). */
export const PG_REAL_MIN_MEASURED_B = 0.05;

const TWO_PI_SQUARED = 2 * Math.PI * Math.PI;

/** Number of exact gamma terms for a piece of shape r at tilt z. */
export function pgRealPieceTerms(r: number, z: number): number {
  return pgSeriesTerms(z) + (r >= 1 ? PG_REAL_EXTRA_TERMS : PG_REAL_SMALL_SHAPE_EXTRA_TERMS);
}

/**
 * PG(b, z) by the gamma series of Polson, Scott & Windle (2013, Definition 1) kept exactly for
 * `terms` terms, the tail replaced by one gamma variate with the tail's exact mean and variance
 * (Satterthwaite 1946, Biometrics Bulletin 2(6)); as {@link pgGammaSeries} with a chosen K.
 */
export function pgGammaSeriesTerms(rng: Rng, b: number, z: number, terms: number): number {
  const halfZSquared = 0.5 * z * z;
  // Marsaglia–Tsang constants of Gamma(b), once for all terms.
  const d = b - 1 / 3;
  const c = 1 / Math.sqrt(9 * d);
  let omega = 0;
  let sumWeights = 0;
  let sumSquaredWeights = 0;
  for (let k = 1; k <= terms; k++) {
    const h = k - 0.5;
    const w = 1 / (TWO_PI_SQUARED * h * h + halfZSquared);
    sumWeights += w;
    sumSquaredWeights += w * w;
    omega += w * (b >= 1 ? gammaAtLeastOne(rng, d, c) : gamma(rng, b));
  }
  const moments = unitShapeMoments(z);
  const tailMean = b * (moments.mean - sumWeights);
  const tailVariance = b * (moments.variance - sumSquaredWeights);
  if (tailMean > 0 && tailVariance > 0) {
    const scale = tailVariance / tailMean;
    omega += scale * gamma(rng, tailMean / scale);
  }
  return omega;
}

/** Below this |z| the variance needs the series of {@link pgVariance} (cancellation). */
const VARIANCE_SERIES_BELOW = 0.2;

/**
 * Mean and variance of PG(1, z) (those of PG(b, z) are b times them) from one tanh:
 * E = tanh(x)/(4x), Var = (2 tanh x − z sech² x)/(4|z|³) with x = |z|/2 and sech² = 1 − tanh²
 * (Polson, Scott & Windle 2013, §2.1; the same closed forms as {@link pgMean} and
 * {@link pgVariance}, which the tests compare), the series of {@link pgVariance} near 0. The
 * result object is reused between calls (no allocation in the sampler's inner loop).
 */
const unitMoments = { mean: 0, variance: 0 };
export function unitShapeMoments(z: number): { mean: number; variance: number } {
  const az = Math.abs(z);
  if (az < VARIANCE_SERIES_BELOW) {
    unitMoments.mean = pgMean(1, z);
    unitMoments.variance = pgVariance(1, z);
    return unitMoments;
  }
  const x = 0.5 * az;
  const t = Math.tanh(x);
  unitMoments.mean = (0.25 * t) / x;
  unitMoments.variance = (2 * t - az * (1 - t) * (1 + t)) / (4 * az * az * az);
  return unitMoments;
}

/**
 * Gamma(shape ≥ 1) by Marsaglia & Tsang (2000, ACM TOMS 26(3), 363–372) with d = shape − ⅓ and
 * c = 1/√(9d) passed in — the same steps as src/sampler/variates.ts, here so a series can hoist
 * them out of its loop over terms of one shape.
 */
function gammaAtLeastOne(rng: Rng, d: number, c: number): number {
  for (;;) {
    let x: number;
    let v: number;
    do {
      x = normal(rng);
      v = 1 + c * x;
    } while (v <= 0);
    v = v * v * v;
    const u = rng.uniform();
    const x2 = x * x;
    if (u < 1 - 0.0331 * x2 * x2) return d * v;
    if (Math.log(u) < 0.5 * x2 + d * (1 - v + Math.log(v))) return d * v;
  }
}

/**
 * Inverse Gaussian IG(μ, λ) by the transformation with multiple roots of Michael, Schucany &
 * Haas (1976, The American Statistician 30(2), 88–90), in the cancellation-free form of
 * src/sampler/polya-gamma.ts.
 */
function inverseGaussian(rng: Rng, mu: number, lambda: number): number {
  const n = normal(rng);
  const w = (mu * n * n) / lambda;
  const root = mu / (1 + 0.5 * w + Math.sqrt(w + 0.25 * w * w));
  return rng.uniform() * (mu + root) <= mu ? root : (mu * mu) / root;
}

/**
 * IG(2b/|z|, b²)/4: the leading term of the left series of the tilted Jacobi density, within
 * total variation {@link pgInverseGaussianTvBound}(b, z) of PG(b, z) for real b (the bound's
 * binomial series holds for real shapes).
 */
function pgInverseGaussian(rng: Rng, b: number, z: number): number {
  const c = 0.5 * Math.abs(z);
  return 0.25 * inverseGaussian(rng, b / c, b * b);
}

/** PG(r, z) for a piece of shape r < 2. */
function pgPiece(rng: Rng, r: number, z: number): number {
  if (pgInverseGaussianTvBound(r, z) <= PG_INVERSE_GAUSSIAN_TV_MAX) return pgInverseGaussian(rng, r, z);
  return pgGammaSeriesTerms(rng, r, z, pgRealPieceTerms(r, z));
}

/** Exact gamma terms of the series for b ≥ 21: 3 + ⌈|z|⌉. */
export function pgLargeShapeTerms(z: number): number {
  return 3 + Math.ceil(Math.abs(z));
}

/**
 * Below this |z| the inverse-Gaussian bound b·e^{−|z|}-ish exceeds {@link PG_INVERSE_GAUSSIAN_TV_MAX}
 * for every b ≥ 1 (it needs |z| ≥ 18.4 + ln b), so the bound need not be computed.
 */
const INVERSE_GAUSSIAN_NEVER_BELOW = 18;

/** PG(b, z) for b ≥ 21: the inverse-Gaussian draw where its bound allows, else the short series. */
export function pgLargeShape(rng: Rng, b: number, z: number): number {
  if (Math.abs(z) >= INVERSE_GAUSSIAN_NEVER_BELOW && pgInverseGaussianTvBound(b, z) <= PG_INVERSE_GAUSSIAN_TV_MAX) {
    return pgInverseGaussian(rng, b, z);
  }
  return pgGammaSeriesTerms(rng, b, z, pgLargeShapeTerms(z));
}

/**
 * One PG(b, z) variate for any real b ≥ 0 (b = 0: the point mass at 0). See the module doc for
 * the method at each b and its measured accuracy.
 * @throws RangeError unless b ≥ 0 and z are finite.
 */
export function pgReal(rng: Rng, b: number, z: number): number {
  if (!(b >= 0 && b < Infinity)) throw new RangeError(`Pólya–Gamma shape b must be finite and ≥ 0, got ${b}`);
  if (!Number.isFinite(z)) throw new RangeError(`Pólya–Gamma tilt z must be finite, got ${z}`);
  const whole = Number.isInteger(b);
  if (b > PG_EXACT_SUM_MAX_B + 1 || (whole && b > PG_EXACT_SUM_MAX_B)) return pgLargeShape(rng, b, z);
  if (whole) return pgInt(rng, b, z);
  if (b < 1) return pgPiece(rng, b, z);
  const exactPart = Math.floor(b) - 1;
  return (exactPart > 0 ? pgInt(rng, exactPart, z) : 0) + pgPiece(rng, b - exactPart, z);
}

/** How {@link pgReal} draws PG(b, z), for a report's appendix. */
export const PG_REAL_METHOD_NOTE =
  `Pólya–Gamma variates PG(b, z), b the (effective) number of trials and z the current logit ` +
  `(Polson, Scott & Windle 2013, JASA 108(504)). Whole b ≤ ${PG_EXACT_SUM_MAX_B}: exact, the sum of b ` +
  `PG(1, z) draws by the alternating-series accept/reject of Polson, Scott & Windle (2013, Algorithm 1, ` +
  `after Devroye), truncation point ${PG_TRUNCATION} on the J* scale. b ≥ ${PG_EXACT_SUM_MAX_B + 1}: approximate ` +
  `with a measured error — one inverse-Gaussian draw IG(2b/|z|, b²)/4 when |z| is so large that its ` +
  `total-variation distance is ≤ ${PG_INVERSE_GAUSSIAN_TV_MAX.toExponential(0)}, otherwise the gamma series of ` +
  `their Definition 1, ω = Σ_k g_k / (2π²(k − ½)² + z²/2) with g_k ~ Gamma(b, 1), kept exactly for 3 + ⌈|z|⌉ ` +
  `terms and the rest replaced by one gamma variate with the remainder's exact mean and variance ` +
  `(Satterthwaite 1946), so every draw has the exact mean and variance. Other b (non-integer effective ` +
  `counts from a design effect): PG(b, z) = PG(w, z) + PG(r, z) with w = ⌊b⌋ − 1 drawn exactly and ` +
  `r in [1, 2) (or r = b when b < 1) by the same series with ${PG_REAL_EXTRA_TERMS} (r ≥ 1) or ` +
  `${PG_REAL_SMALL_SHAPE_EXTRA_TERMS} (r < 1) terms more than 10 + 3⌈|z|/(2π)⌉, or the inverse-Gaussian draw ` +
  `where its bound allows. Largest distribution-function error of the approximate branches, computed by ` +
  `Fourier inversion of the exact and approximate characteristic functions: below ` +
  `${PG_REAL_KS_BOUND.toExponential(0)} for every b ≥ ${PG_REAL_MIN_MEASURED_B} and z.`;
