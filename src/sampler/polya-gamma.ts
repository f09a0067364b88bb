/**
 * Pólya–Gamma random variates for the binomial–logit (counts) model.
 *
 * PG(b, z) is the law of ω = (1/(2π²)) Σ_{k≥1} g_k / ((k − ½)² + z²/(4π²)) with g_k ~ Gamma(b, 1)
 * independent (Polson, Scott & Windle 2013, "Bayesian inference for logistic models using
 * Pólya–Gamma latent variables", JASA 108(504), 1339–1349, Definition 1). Its Laplace transform,
 * from that definition, is E[e^{−sω}] = cosh^b(z/2) / cosh^b(√((z²/2 + s)/2)), so
 * PG(b, z) = J*(b, z/2) / 4 where J*(b, c) is the exponentially tilted Jacobi distribution of
 * the same paper (§4).
 *
 * - {@link pg1}: exact PG(1, z) by the alternating-series accept/reject of Polson, Scott & Windle
 *   (2013, §4 and Algorithm 1), after Devroye (1986, Non-Uniform Random Variate Generation,
 *   Springer, §IV.5; 2009, "On exact simulation algorithms for some distributions related to
 *   Jacobi theta functions", Statistics & Probability Letters 79(21), 2251–2259).
 * - {@link pgInt}: PG(b, z) for integer b: the exact sum of b PG(1, z) draws for b ≤
 *   {@link PG_EXACT_SUM_MAX_B}; above, one inverse-Gaussian draw when |z| is so large that its
 *   error is below 1e-8, else the gamma series of Definition 1 truncated after a few terms plus
 *   one gamma variate matched to the first two moments of the remainder ({@link pgGammaSeries}).
 *   Their accuracy is measured in tests/polya-gamma.test.ts and stated in {@link PG_METHOD_NOTE}.
 * - {@link pgMean}, {@link pgVariance}: exact moments; {@link pgOneDensity}, {@link pgOneCdf}:
 *   exact PG(1, z) density and distribution function as alternating series, for goodness-of-fit.
 */
import { normalCdf, normalUpperTailScaled } from '../maths/normal.js';
import type { Rng } from './rng.js';
import { gamma, normal, normalTail } from './variates.js';

// ---------------------------------------------------------------------------------------------
// Constants

/**
 * Truncation point t of the two-piece proposal on the J* scale (ω = J* / 4), the value chosen by
 * Polson, Scott & Windle (2013, §4.1) as near-optimal; both series below are monotone there.
 */
export const PG_TRUNCATION = 0.64;

/** Largest b for which {@link pgInt} returns the exact sum of b PG(1, z) draws. */
export const PG_EXACT_SUM_MAX_B = 20;

/**
 * Number of gamma terms {@link pgGammaSeries} keeps at z = 0; {@link pgSeriesTerms} adds more as
 * |z| grows.
 */
export const PG_SERIES_BASE_TERMS = 10;

/**
 * Largest total-variation distance accepted for the inverse-Gaussian branch of {@link pgInt}
 * (see {@link pgInverseGaussianTvBound}); below it, that branch replaces the gamma series.
 */
export const PG_INVERSE_GAUSSIAN_TV_MAX = 1e-8;

/**
 * Documented bound on the Kolmogorov distance sup_x |F_approx(x) − F_exact(x)| of {@link pgInt}
 * for b > {@link PG_EXACT_SUM_MAX_B}, for every z. tests/polya-gamma.test.ts recomputes the
 * distance of the gamma series by Fourier inversion of the exact and approximate characteristic
 * functions and checks that it stays below this value.
 */
export const PG_SERIES_KS_BOUND = 1e-6;

/** What {@link pgInt} uses for which b, and how accurate it is, for a report's appendix. */
export const PG_METHOD_NOTE =
  `Pólya–Gamma variates PG(b, z) (Polson, Scott & Windle 2013, JASA 108(504)). ` +
  `b = 1: exact draw by the alternating-series accept/reject of Polson, Scott & Windle (2013, ` +
  `Algorithm 1, after Devroye), truncation point t = ${PG_TRUNCATION} on the J* scale, ` +
  `inverse-Gaussian proposal left of t and exponential proposal right of t. ` +
  `2 ≤ b ≤ ${PG_EXACT_SUM_MAX_B}: exact, the sum of b independent PG(1, z) draws. ` +
  `b > ${PG_EXACT_SUM_MAX_B}, approximate with a measured error: (i) when |z| is large enough that ` +
  `b·e^(−|z|) is negligible (total-variation bound ≤ ${PG_INVERSE_GAUSSIAN_TV_MAX.toExponential(0)}, ` +
  `about |z| ≥ 18.4 + ln b), one inverse-Gaussian draw IG(2b/|z|, b²)/4, the leading term of the ` +
  `left series of the tilted Jacobi density; (ii) otherwise the gamma series of Polson, Scott & ` +
  `Windle (2013, Definition 1), ω = Σ_k g_k / (2π²(k − ½)² + z²/2) with g_k ~ Gamma(b, 1), kept ` +
  `exactly for the first ${PG_SERIES_BASE_TERMS} + 3⌈|z|/(2π)⌉ terms, the infinite remainder ` +
  `replaced by one gamma variate with the remainder's exact mean and variance (a two-moment ` +
  `Satterthwaite 1946 match), so the draw has the exact mean and variance of PG(b, z). The largest ` +
  `distribution-function error of (ii), computed by Fourier inversion of the exact and approximate ` +
  `characteristic functions over b ≥ ${PG_EXACT_SUM_MAX_B + 1} and the |z| where it is used, is ` +
  `below ${PG_SERIES_KS_BOUND.toExponential(0)}: measured 4.7e-10 at b = 21 and 1.3e-10 at ` +
  `b = 200 for z = 0, and at most 2.1e-7 (b = 21, |z| ≈ 18.8). Detecting an error of 1e-6 by ` +
  `simulation would take on the order of 10^12 draws; a normal approximation with the same two ` +
  `moments would be off by about 0.03 at b = 21.`;

const PI = Math.PI;
const PI_SQUARED = PI * PI;
const HALF_PI_SQUARED = 0.5 * PI_SQUARED;
const TWO_PI_SQUARED = 2 * PI_SQUARED;
/** 1/√t: the proposal left of t is 1/N² with N a standard normal beyond this point. */
const LEFT_NORMAL_START = 1 / Math.sqrt(PG_TRUNCATION);
/** Below this |z| the variance uses its Taylor series (the closed form cancels). */
const VARIANCE_SERIES_BELOW = 0.2;

// ---------------------------------------------------------------------------------------------
// Exact PG(1, z) by the alternating-series method

/** Probability of the right (exponential) piece of the proposal for tilt c = |z|/2. */
function rightPieceProbability(c: number): number {
  // Both piece masses of Polson, Scott & Windle (2013, Algorithm 1) multiplied by e^c, so that
  // neither underflows for large c:
  //   p e^c = π/(2K) · exp(c − K t),   K = π²/8 + c²/2,
  //   q e^c = 2 Φ_IG(t; μ = 1/c, λ = 1) = 2 [Φ((tc − 1)/√t) + e^{2c} Φ(−(tc + 1)/√t)],
  // and e^{2c} Φ(−a) with a = (tc + 1)/√t equals exp(c − tc²/2 − 1/(2t)) · [Φ(−a) e^{a²/2}].
  const t = PG_TRUNCATION;
  const rate = PI_SQUARED / 8 + 0.5 * c * c;
  const right = (PI / (2 * rate)) * Math.exp(c - rate * t);
  const rootT = Math.sqrt(t);
  const a = (t * c + 1) / rootT;
  const left =
    2 *
    (normalCdf((t * c - 1) / rootT) +
      Math.exp(c - 0.5 * t * c * c - 0.5 / t) * normalUpperTailScaled(a));
  return right / (right + left);
}

/**
 * Inverse Gaussian IG(μ, λ) (density √(λ/(2πx³)) exp(−λ(x − μ)²/(2μ²x))) by the transformation
 * with multiple roots of Michael, Schucany & Haas (1976, "Generating random variates using
 * transformations with multiple roots", The American Statistician 30(2), 88–90): with
 * y = N², take the smaller root x = μ(1 + w/2 − √(w + w²/4)), w = μy/λ, written as
 * μ/(1 + w/2 + √(w + w²/4)) to avoid cancellation, and return x with probability μ/(μ + x),
 * else μ²/x.
 */
function inverseGaussian(rng: Rng, mu: number, lambda: number): number {
  const n = normal(rng);
  const w = (mu * n * n) / lambda;
  const root = mu / (1 + 0.5 * w + Math.sqrt(w + 0.25 * w * w));
  return rng.uniform() * (mu + root) <= mu ? root : (mu * mu) / root;
}

/**
 * IG(μ, 1) truncated to (0, t) for μ = 1/c ≤ t: {@link inverseGaussian} repeated until the draw
 * is below t (Polson, Scott & Windle 2013, Algorithm 1, case μ ≤ t, where this happens with
 * probability above one half).
 */
function inverseGaussianBelowT(rng: Rng, mu: number): number {
  for (;;) {
    const x = inverseGaussian(rng, mu, 1);
    if (x < PG_TRUNCATION) return x;
  }
}

/**
 * IG(1/c, 1) truncated to (0, t) when its mean 1/c exceeds t: 1/X is a χ²₁ variate truncated to
 * (1/t, ∞), i.e. X = 1/N² with N a standard normal beyond 1/√t, accepted with probability
 * exp(−c²X/2) (Polson, Scott & Windle 2013, Algorithm 1 and appendix; Devroye 2009).
 */
function levyTiltedBelowT(rng: Rng, c: number): number {
  const halfCSquared = 0.5 * c * c;
  for (;;) {
    const n = normalTail(rng, LEFT_NORMAL_START);
    const x = 1 / (n * n);
    if (halfCSquared === 0 || rng.uniform() < Math.exp(-halfCSquared * x)) return x;
  }
}

/** Guard on the alternating series; the terms vanish after a handful of steps in practice. */
const MAX_SERIES_TERMS = 1000;

/**
 * One exact draw of J*(1, c) for c ≥ 0 given the right-piece probability (Polson, Scott &
 * Windle 2013, Algorithm 1). Acceptance compares V·a₀(X) with partial sums of Σ(−1)ⁿ aₙ(X); both
 * sides are divided by a₀(X), so only the ratios aₙ/a₀ appear:
 *   X ≤ t: aₙ/a₀ = (2n + 1) exp(−2n(n + 1)/X),   X > t: aₙ/a₀ = (2n + 1) exp(−n(n + 1)π²X/2),
 * which cannot underflow a₀ into an endless loop when c is large.
 */
function drawJacobiStar(rng: Rng, c: number, rightProbability: number, rate: number): number {
  const t = PG_TRUNCATION;
  const mu = c > 0 ? 1 / c : Infinity;
  for (;;) {
    let x: number;
    if (rng.uniform() < rightProbability) {
      x = t - Math.log(rng.uniform()) / rate;
    } else if (mu > t) {
      x = levyTiltedBelowT(rng, c);
    } else {
      x = inverseGaussianBelowT(rng, mu);
    }
    const y = rng.uniform();
    let s = 1;
    const left = x <= t;
    const step = left ? -2 / x : -HALF_PI_SQUARED * x;
    for (let n = 1; n <= MAX_SERIES_TERMS; n++) {
      const term = (2 * n + 1) * Math.exp(step * n * (n + 1));
      if (n % 2 === 1) {
        s -= term;
        if (y < s) return x;
      } else {
        s += term;
        if (y > s) break;
      }
      if (term === 0) {
        // Remaining terms are below double precision: the partial sum is the limit.
        if (y < s) return x;
        break;
      }
    }
  }
}

function checkTilt(z: number): void {
  if (!Number.isFinite(z)) throw new RangeError(`Pólya–Gamma tilt z must be finite, got ${z}`);
}

/**
 * One exact PG(1, z) variate by the alternating-series accept/reject of Polson, Scott & Windle
 * (2013, JASA 108(504), §4 and Algorithm 1): PG(1, z) = J*(1, |z|/2)/4; the proposal is an
 * exponential right of t = {@link PG_TRUNCATION} and an inverse Gaussian IG(2/|z|, 1) left of it,
 * mixed in proportion to their masses under the envelope a₀. The paper reports an acceptance
 * probability of at least 0.9991 for every z (recalled from memory), so most draws cost one
 * proposal and one or two series terms. PG(1, −z) = PG(1, z) by symmetry of the density in z.
 *
 * @throws RangeError unless z is finite.
 */
export function pg1(rng: Rng, z: number): number {
  checkTilt(z);
  const c = 0.5 * Math.abs(z);
  const rate = PI_SQUARED / 8 + 0.5 * c * c;
  return 0.25 * drawJacobiStar(rng, c, rightPieceProbability(c), rate);
}

// ---------------------------------------------------------------------------------------------
// Integer b

/**
 * Number of exact gamma terms {@link pgGammaSeries} keeps at tilt z:
 * {@link PG_SERIES_BASE_TERMS} + 3⌈|z|/(2π)⌉. The weights 1/((k − ½)² + z²/(4π²)) are nearly flat
 * for k below |z|/(2π) and fall like 1/k² after it; a two-moment match is accurate only for a
 * tail that starts well inside the 1/k² part.
 */
export function pgSeriesTerms(z: number): number {
  return PG_SERIES_BASE_TERMS + 3 * Math.ceil(Math.abs(z) / (2 * PI));
}

/**
 * PG(b, z) by the gamma series of Polson, Scott & Windle (2013, Definition 1) kept for the first
 * K = {@link pgSeriesTerms}(z) terms, ω = Σ_{k≤K} w_k g_k with w_k = 1/(2π²(k − ½)² + z²/2) and
 * g_k ~ Gamma(b, 1), plus the tail Σ_{k>K} w_k g_k replaced by one Gamma(shape α, scale θ) whose
 * mean αθ and variance αθ² equal the tail's exact mean M = E[ω] − bΣ_{k≤K} w_k and variance
 * V = Var[ω] − bΣ_{k≤K} w_k² (Satterthwaite 1946, "An approximate distribution of estimates of
 * variance components", Biometrics Bulletin 2(6), 110–114: a weighted sum of chi-squares
 * matched by one scaled chi-square). The result has the exact mean and variance of PG(b, z). Its
 * distribution-function error where {@link pgInt} uses it is below {@link PG_SERIES_KS_BOUND}
 * (see {@link PG_METHOD_NOTE}). Cost: K + 1 gamma variates whatever b is, and K grows with |z|.
 *
 * @param b shape, any real > 0.
 * @throws RangeError unless b > 0 and z are finite.
 */
export function pgGammaSeries(rng: Rng, b: number, z: number): number {
  if (!(b > 0 && b < Infinity)) {
    throw new RangeError(`Pólya–Gamma shape b must be finite and > 0, got ${b}`);
  }
  checkTilt(z);
  const terms = pgSeriesTerms(z);
  const halfZSquared = 0.5 * z * z;
  let omega = 0;
  let sumWeights = 0;
  let sumSquaredWeights = 0;
  for (let k = 1; k <= terms; k++) {
    const h = k - 0.5;
    const w = 1 / (TWO_PI_SQUARED * h * h + halfZSquared);
    sumWeights += w;
    sumSquaredWeights += w * w;
    omega += w * gamma(rng, b);
  }
  const tailMean = pgMean(b, z) - b * sumWeights;
  const tailVariance = pgVariance(b, z) - b * sumSquaredWeights;
  // Both are positive unless the tail is below rounding, when it is left out.
  if (tailMean > 0 && tailVariance > 0) {
    const scale = tailVariance / tailMean;
    omega += scale * gamma(rng, tailMean / scale);
  }
  return omega;
}

/**
 * Bound on the total-variation distance between PG(b, z) and IG(2b/|z|, b²)/4, the inverse
 * Gaussian used by {@link pgInt} for large |z|. Integrating the left (Lévy) series of the Jacobi
 * density, J*(b, c) with c = |z|/2 is the signed mixture
 * A Σ_{n≥0} (−1)ⁿ C(n + b − 1, n) e^{−2nc} IG((2n + b)/c, (2n + b)²), A = (1 + e^{−2c})^b
 * (Polson, Scott & Windle 2013, §4 and eq. for J*(b) via cosh^{−b}; Devroye 2009), whose n = 0
 * component is IG(b/c, b²). Hence ∫|f − f₀| ≤ (A − 1) + A((1 − e^{−2c})^{−b} − 1), and the
 * total-variation distance (which bounds the Kolmogorov distance) is half of that, about
 * b e^{−|z|}.
 */
export function pgInverseGaussianTvBound(b: number, z: number): number {
  const e = Math.exp(-Math.abs(z));
  const aMinusOne = Math.expm1(b * Math.log1p(e));
  const tail = (aMinusOne + 1) * Math.expm1(-b * Math.log1p(-e));
  return 0.5 * (aMinusOne + tail);
}

/**
 * PG(b, z) for an integer b ≥ 0 (b = 0 gives the point mass at 0, e.g. a site with no trials):
 * - b ≤ {@link PG_EXACT_SUM_MAX_B}: the exact sum of b PG(1, z) draws ({@link pg1}), since
 *   PG(b, z) is the b-fold convolution of PG(1, z) (Polson, Scott & Windle 2013, Definition 1);
 * - larger b with {@link pgInverseGaussianTvBound} ≤ {@link PG_INVERSE_GAUSSIAN_TV_MAX} (|z| above
 *   about 18.4 + ln b): IG(2b/|z|, b²)/4, one inverse-Gaussian draw;
 * - otherwise {@link pgGammaSeries}.
 * {@link PG_METHOD_NOTE} states the accuracy of the two approximate branches.
 *
 * @throws RangeError unless b is a non-negative safe integer and z is finite.
 */
export function pgInt(rng: Rng, b: number, z: number): number {
  if (!Number.isSafeInteger(b) || b < 0) {
    throw new RangeError(`Pólya–Gamma shape b must be a non-negative integer, got ${b}`);
  }
  checkTilt(z);
  const c = 0.5 * Math.abs(z);
  if (b > PG_EXACT_SUM_MAX_B) {
    if (pgInverseGaussianTvBound(b, z) <= PG_INVERSE_GAUSSIAN_TV_MAX) {
      return 0.25 * inverseGaussian(rng, b / c, b * b);
    }
    return pgGammaSeries(rng, b, z);
  }
  const rate = PI_SQUARED / 8 + 0.5 * c * c;
  const rightProbability = rightPieceProbability(c);
  let sum = 0;
  for (let i = 0; i < b; i++) sum += drawJacobiStar(rng, c, rightProbability, rate);
  return 0.25 * sum;
}

// ---------------------------------------------------------------------------------------------
// Exact moments

/**
 * E[ω] for ω ~ PG(b, z): b/(2z) · tanh(z/2), and b/4 at z = 0 (Polson, Scott & Windle 2013, §2.1,
 * from the Laplace transform). tanh(x)/x has no cancellation, so no series is needed near 0.
 */
export function pgMean(b: number, z: number): number {
  const x = 0.5 * Math.abs(z);
  return x === 0 ? 0.25 * b : (0.25 * b * Math.tanh(x)) / x;
}

/**
 * Var[ω] for ω ~ PG(b, z): b/(4z³) · (sinh z − z)/cosh²(z/2), and b/24 at z = 0 (the second
 * derivative of the log Laplace transform of Polson, Scott & Windle 2013; Windle, Polson & Scott
 * 2014, arXiv:1405.0506, §2). Written as b/(4z³) · (2 tanh(z/2) − z sech²(z/2)), which cannot
 * overflow; below |z| = 0.2 the Taylor series in x = z/2 is used instead,
 * b/16 · Σ_n t_n (1 − n) x^{n−3} over the odd Taylor coefficients t_n of tanh (Abramowitz &
 * Stegun 1964, 4.5.64: t_n = 2^{n+1}(2^{n+1} − 1)B_{n+1}/(n + 1)! with Bernoulli numbers B), because
 * the closed form loses digits to cancellation there (about 2e-14 relative at |z| = 0.2).
 */
export function pgVariance(b: number, z: number): number {
  const az = Math.abs(z);
  if (az < VARIANCE_SERIES_BELOW) {
    const x2 = 0.25 * az * az;
    // Σ_n t_n (1 − n) x^{n−3} for n = 3, 5, ..., 17 (Horner in x²); for x ≤ 0.1 the first
    // omitted term is below 1e-17 relative.
    const series =
      2 / 3 +
      x2 *
        (-8 / 15 +
          x2 *
            (34 / 105 +
              x2 *
                (-496 / 2835 +
                  x2 *
                    (2764 / 31185 +
                      x2 *
                        (-87376 / 2027025 +
                          x2 * (1859138 / 91216125 + x2 * (-102473312 / 10854718875)))))));
    return (b / 16) * series;
  }
  const x = 0.5 * az;
  const sech = 1 / Math.cosh(x);
  return (b / (4 * az * az * az)) * (2 * Math.tanh(x) - az * sech * sech);
}

// ---------------------------------------------------------------------------------------------
// Exact PG(1, z) density and distribution function

const MAX_CDF_TERMS = 200;

/**
 * Density of PG(1, z) at x: 4 f_J(4x) with f_J(y) = cosh(c) e^{−c²y/2} Σ_{n≥0} (−1)ⁿ aₙ(y),
 * c = |z|/2, using the left coefficients aₙ(y) = (2n + 1)√(2/π) y^{−3/2} e^{−(2n+1)²/(2y)} for
 * y ≤ t and the right ones aₙ(y) = π(n + ½) e^{−(n+½)²π²y/2} above (Polson, Scott & Windle 2013,
 * §4, eqs. for J*(1, z) and the tilting cosh(z/2) e^{−z²x/2} p(x | 1, 0)).
 */
export function pgOneDensity(x: number, z: number): number {
  if (!(x > 0)) return 0;
  if (x === Infinity) return 0;
  const c = 0.5 * Math.abs(z);
  const y = 4 * x;
  // cosh(c) e^{−c²y/2} as ½(e^{c − c²y/2} + e^{−c − c²y/2}), combined with each term's exponent.
  const tilt = -0.5 * c * c * y;
  let sum = 0;
  for (let n = 0; n < MAX_CDF_TERMS; n++) {
    let exponent: number;
    let factor: number;
    if (y <= PG_TRUNCATION) {
      // y^{−3/2} goes into the exponent so that tiny y gives 0, not ∞ · 0.
      const a = 2 * n + 1;
      exponent = (-a * a) / (2 * y) - 1.5 * Math.log(y);
      factor = a * Math.sqrt(2 / PI);
    } else {
      const h = n + 0.5;
      exponent = -h * h * HALF_PI_SQUARED * y;
      factor = PI * h;
    }
    const term = factor * 0.5 * (Math.exp(c + tilt + exponent) + Math.exp(-c + tilt + exponent));
    sum += n % 2 === 0 ? term : -term;
    if (term <= 1e-17 * Math.abs(sum)) break;
  }
  return 4 * Math.max(0, sum);
}

/**
 * cosh(c) e^{±ac} Φ(·) pieces of the left series of the J*(1, c) distribution function: the
 * integral of the n-th left term from 0 to y, times cosh(c), is
 * cosh(c) · 2[e^{−ac} Φ((yc − a)/√y) + e^{ac} Φ(−(yc + a)/√y)] with a = 2n + 1 (each term is
 * 2e^{∓ac} times an inverse-Gaussian IG(a/c, a²) density, whose distribution function is that of
 * Chhikara & Folks 1989, "The Inverse Gaussian Distribution", eq. 2.7).
 */
function leftCdfTerm(y: number, c: number, a: number): number {
  const rootY = Math.sqrt(y);
  const lowerArgument = (y * c - a) / rootY;
  // cosh(c) e^{−ac} Φ(u): written with exponents that cannot overflow.
  let first: number;
  if (lowerArgument < -0.67448975) {
    // Φ(u) = e^{−u²/2} R(−u) and −ac − u²/2 = −yc²/2 − a²/(2y).
    const e = -0.5 * y * c * c - (a * a) / (2 * y);
    first = 0.5 * (Math.exp(c + e) + Math.exp(-c + e)) * normalUpperTailScaled(-lowerArgument);
  } else {
    first = 0.5 * (Math.exp((1 - a) * c) + Math.exp(-(1 + a) * c)) * normalCdf(lowerArgument);
  }
  // cosh(c) e^{ac} Φ(−v) with v = (yc + a)/√y: ac − v²/2 = −yc²/2 − a²/(2y).
  const upperArgument = (y * c + a) / rootY;
  const e = -0.5 * y * c * c - (a * a) / (2 * y);
  const second = 0.5 * (Math.exp(c + e) + Math.exp(-c + e)) * normalUpperTailScaled(upperArgument);
  return 2 * (first + second);
}

/**
 * Distribution function P(ω ≤ x) of ω ~ PG(1, z): the term-by-term integral of the density
 * series of {@link pgOneDensity}, summed until a term is below 1e-17 of the sum (it agrees with
 * numerical integration of the density to 1e-11 and with Fourier inversion of the Laplace
 * transform to 1e-8 in tests/polya-gamma.test.ts, the accuracy of those references). For 4x ≤ t it sums the left series
 * (see leftCdfTerm); above, 1 − cosh(c) Σ (−1)ⁿ π(n + ½) e^{−Kₙ·4x}/Kₙ with
 * Kₙ = (n + ½)²π²/2 + c²/2, the right series of the upper tail (whose value at 0 is 1). Both
 * series converge fastest near t = 0.64, which is where they are switched.
 */
export function pgOneCdf(x: number, z: number): number {
  if (!(x > 0)) return 0;
  if (x === Infinity) return 1;
  const c = 0.5 * Math.abs(z);
  const y = 4 * x;
  let sum = 0;
  if (y <= PG_TRUNCATION) {
    for (let n = 0; n < MAX_CDF_TERMS; n++) {
      const term = leftCdfTerm(y, c, 2 * n + 1);
      sum += n % 2 === 0 ? term : -term;
      if (term <= 1e-17 * Math.abs(sum)) break;
    }
    return Math.min(1, Math.max(0, sum));
  }
  for (let n = 0; n < MAX_CDF_TERMS; n++) {
    const h = n + 0.5;
    const rate = h * h * HALF_PI_SQUARED + 0.5 * c * c;
    const term =
      ((PI * h) / rate) * 0.5 * (Math.exp(c - rate * y) + Math.exp(-c - rate * y));
    sum += n % 2 === 0 ? term : -term;
    if (term <= 1e-17 * Math.abs(sum)) break;
  }
  return Math.min(1, Math.max(0, 1 - sum));
}
