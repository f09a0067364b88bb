/**
 * Checks of the counts model against the data (Gelman, Meng & Stern 1996, Statistica Sinica 6;
 * Gelman et al. 2013, BDA3 ch. 6), on the count scale:
 *
 *   y_i^rep | p_i ~ Binomial(n_i, p_i)
 *
 * with the counts the likelihood uses: under a design effect deff ≠ 1 the effective counts
 * ỹ_i = y_i/deff, ñ_i = n_i/deff (src/data/counts.ts), rounded to whole numbers for the binomial
 * replicate (`checkCounts`; ñ_i at least 1).
 *
 * - per site, the mid-p value P(y^rep > y | data) + ½ P(y^rep = y | data), the inner
 *   probabilities exact per draw from the binomial distribution function and averaged over the
 *   draws (the mid-p keeps a discrete p-value centred on ½ under the model: Lancaster 1961, JASA
 *   56(294) — recalled);
 * - overall, the realized-discrepancy p-value of the χ²-type discrepancy
 *   T(y, p) = Σ_i (y_i − n_i p_i)²/(n_i p_i(1 − p_i)), with one binomial replicate per draw;
 * - standardized residuals r_i = (y_i/n_i − p̄_i)/√(p̄_i(1 − p̄_i)/n_i + (1 − 1/n_i) v_i), where
 *   p̄_i and v_i are the mean and variance of the share of a site at covariates x_i, p =
 *   expit(x_iᵀβ̄ + u), u ~ N(0, σ̄_u²) (β̄ the posterior mean, σ̄_u² the posterior mean of σ_u²).
 *   The denominator is the exact sd of y/n when p has that mean and variance (law of total
 *   variance: Var(y/n) = E[p(1 − p)]/n + Var p). The moments come from the trapezoid rule on a
 *   normal grid, spectrally accurate for this analytic integrand (Trefethen & Weideman 2014,
 *   SIAM Review 56(3)).
 * - the mean of the model estimates against the mean of the survey shares over sampled sites.
 */
import type { Rng } from '../sampler/rng.js';
import { posteriorMeans, type ModelChecks } from './model-checks.js';

/**
 * Lanczos coefficients for g = 7, n = 9 (Lanczos 1964, SIAM J. Numer. Anal. B1; the set printed
 * in Press et al., Numerical Recipes, and widely reproduced — recalled). Relative error ≈ 1e-15
 * for x ≥ ½.
 */
const LANCZOS = [
  0.99999999999980993, 676.5203681218851, -1259.1392167224028, 771.32342877765313, -176.61502916214059,
  12.507343278686905, -0.13857109526572012, 9.9843695780195716e-6, 1.5056327351493116e-7,
];
const HALF_LOG_2PI = 0.5 * Math.log(2 * Math.PI);

/**
 * ln Γ(x) for x > 0 by the Lanczos approximation (g = 7); below ½ through the reflection
 * Γ(x)Γ(1 − x) = π/sin(πx) (Abramowitz & Stegun 1964, 6.1.17).
 */
export function logGamma(x: number): number {
  if (x < 0.5) return Math.log(Math.PI / Math.sin(Math.PI * x)) - logGamma(1 - x);
  const z = x - 1;
  let a = LANCZOS[0];
  const t = z + 7.5;
  for (let i = 1; i < 9; i++) a += LANCZOS[i] / (z + i);
  return HALF_LOG_2PI + (z + 0.5) * Math.log(t) - t + Math.log(a);
}

/** ln C(n, k) = ln Γ(n + 1) − ln Γ(k + 1) − ln Γ(n − k + 1). */
export function logChoose(n: number, k: number): number {
  return logGamma(n + 1) - logGamma(k + 1) - logGamma(n - k + 1);
}

/** P(X = k) for X ~ Binomial(n, p), n and k whole. */
export function binomialPmf(k: number, n: number, p: number): number {
  if (k < 0 || k > n) return 0;
  if (p <= 0) return k === 0 ? 1 : 0;
  if (p >= 1) return k === n ? 1 : 0;
  return Math.exp(logChoose(n, k) + k * Math.log(p) + (n - k) * Math.log1p(-p));
}

/** Terms below this share of the running sum end a tail sum (below double precision). */
const TAIL_STOP = 1e-17;

/**
 * P(X ≤ k) for X ~ Binomial(n, p). Sums the tail away from the mean, starting next to k and
 * walking outward with the ratio f(j − 1)/f(j) = j(1 − p)/((n − j + 1)p): away from the mean the
 * terms fall, so the sum stops once they are below double precision. Accurate to a few units
 * in the last place of the smaller tail; O(sd) terms.
 */
export function binomialCdf(k: number, n: number, p: number): number {
  if (k < 0) return 0;
  if (k >= n) return 1;
  if (p <= 0) return 1;
  if (p >= 1) return 0;
  const q = 1 - p;
  if (k <= n * p) {
    let term = binomialPmf(k, n, p);
    let sum = term;
    for (let j = k; j > 0 && term > TAIL_STOP * sum; j--) {
      term *= (j * q) / ((n - j + 1) * p);
      sum += term;
    }
    return Math.min(sum, 1);
  }
  let term = binomialPmf(k + 1, n, p);
  let sum = term;
  for (let j = k + 1; j < n && term > TAIL_STOP * sum; j++) {
    term *= ((n - j) * p) / ((j + 1) * q);
    sum += term;
  }
  return Math.max(1 - sum, 0);
}

/** Mid-p value P(X > y) + ½ P(X = y) for X ~ Binomial(n, p). */
export function binomialMidP(y: number, n: number, p: number): number {
  return 1 - binomialCdf(y, n, p) + 0.5 * binomialPmf(y, n, p);
}

/**
 * One Binomial(n, p) variate by inversion (Devroye 1986, Non-Uniform Random Variate Generation,
 * §II.2 and §X.4 — recalled), the search started at the mode ⌊(n + 1)p⌋ and walking up or down
 * with the pmf recurrence (Kemp 1986, Commun. Statist. Theory Meth. 15(3) — recalled): exact up to
 * rounding, O(sd) work per variate, one uniform.
 */
export function binomialVariate(rng: Rng, n: number, p: number): number {
  if (n <= 0 || p <= 0) return 0;
  if (p >= 1) return n;
  const q = 1 - p;
  let k = Math.min(Math.floor((n + 1) * p), n);
  let f = binomialPmf(k, n, p);
  let F = binomialCdf(k, n, p);
  const u = rng.uniform();
  if (u <= F) {
    // smallest k with F(k) ≥ u: step down while F(k − 1) = F(k) − f(k) still reaches u
    while (k > 0 && F - f >= u) {
      F -= f;
      f *= (k * q) / ((n - k + 1) * p);
      k--;
    }
    return k;
  }
  while (F < u && k < n) {
    f *= ((n - k) * p) / ((k + 1) * q);
    k++;
    F += f;
  }
  return k;
}

/**
 * Whole-number counts for the binomial replicate: the effective counts rounded to the nearest
 * whole number, trials at least 1 where the site has any (rounding keeps ỹ ≤ ñ). With deff = 1
 * the counts as given.
 */
export function checkCounts(effectiveCases: Float64Array, effectiveTrials: Float64Array, hasData: Uint8Array): { cases: Float64Array; trials: Float64Array } {
  const m = effectiveTrials.length;
  const cases = new Float64Array(m);
  const trials = new Float64Array(m);
  for (let i = 0; i < m; i++) {
    if (!hasData[i]) continue;
    trials[i] = Math.max(1, Math.round(effectiveTrials[i]));
    cases[i] = Math.min(Math.round(effectiveCases[i]), trials[i]);
  }
  return { cases, trials };
}

/** Grid of the normal moments: step 0.1 on [−9, 9]. */
const GRID_STEP = 0.1;
const GRID_HALF = 90;

/** Mean and variance of expit(η + σZ), Z ~ N(0, 1), by the trapezoid rule on a normal grid. */
export function logitNormalMoments(eta: number, sigma: number): { mean: number; variance: number } {
  if (!(sigma > 0)) {
    const p = 1 / (1 + Math.exp(-eta));
    return { mean: p, variance: 0 };
  }
  let w = 0;
  let m1 = 0;
  let m2 = 0;
  for (let j = -GRID_HALF; j <= GRID_HALF; j++) {
    const z = j * GRID_STEP;
    const weight = Math.exp(-0.5 * z * z);
    const p = 1 / (1 + Math.exp(-(eta + sigma * z)));
    w += weight;
    m1 += weight * p;
    m2 += weight * p * p;
  }
  const mean = m1 / w;
  return { mean, variance: Math.max(m2 / w - mean * mean, 0) };
}

export interface CountsCheckInput {
  siteIds: string[];
  /** Whole-number cases and trials of the replicate (see `checkCounts`); trials 0 = no sample. */
  cases: Float64Array;
  trials: Float64Array;
  /** The survey share y_i/n_i of the counts as given (NaN where no sample), for residuals and means. */
  direct: Float64Array;
  /** Design matrix, m × p row-major. */
  X: Float64Array;
  p: number;
}

/** (y − np)²/(np(1 − p)), infinite when p is 0 or 1 in floating point and y is off it. */
function chiTerm(y: number, n: number, p: number): number {
  const d = y - n * p;
  const v = n * p * (1 - p);
  return v > 0 ? (d * d) / v : d === 0 ? 0 : Infinity;
}

/**
 * `share(i)` returns the pooled draws of p_i (asked for sampled sites only), `beta` and `siteSd`
 * the pooled draws of the coefficients (logit scale) and σ_u; `estimates[i]` the reported share
 * of site i. One binomial replicate per site and draw comes from `rng`.
 */
export function countsModelChecks(
  input: CountsCheckInput,
  share: (site: number) => Float64Array,
  beta: Float64Array[],
  siteSd: Float64Array,
  estimates: ArrayLike<number>,
  rng: Rng,
  extremeLevel = 0.05,
): ModelChecks {
  const S = siteSd.length;
  const means = posteriorMeans(beta, siteSd);
  const betaMean = means.beta;
  const siteSdMean = Math.sqrt(means.variance);
  const realized = new Float64Array(S);
  const replicated = new Float64Array(S);
  let sumDirect = 0;
  let sumModel = 0;
  let sampled = 0;
  const sites = input.siteIds.map((site, i) => {
    const n = input.trials[i];
    if (!(n > 0)) return { site, ppp: NaN, residual: NaN, extreme: false };
    const y = input.cases[i];
    const draws = share(i);
    let upper = 0;
    for (let k = 0; k < S; k++) {
      const p = draws[k];
      upper += binomialMidP(y, n, p);
      realized[k] += chiTerm(y, n, p);
      replicated[k] += chiTerm(binomialVariate(rng, n, p), n, p);
    }
    const ppp = upper / S;
    let eta = 0;
    for (let j = 0; j < input.p; j++) eta += input.X[i * input.p + j] * betaMean[j];
    const { mean, variance } = logitNormalMoments(eta, siteSdMean);
    const direct = input.direct[i];
    sumDirect += direct;
    sumModel += estimates[i];
    sampled++;
    return {
      site,
      ppp,
      residual: (direct - mean) / Math.sqrt((mean * (1 - mean)) / n + (1 - 1 / n) * variance),
      extreme: ppp < extremeLevel / 2 || ppp > 1 - extremeLevel / 2,
    };
  });
  let exceed = 0;
  for (let k = 0; k < S; k++) if (replicated[k] >= realized[k]) exceed++;
  return {
    sites,
    overallPpp: exceed / S,
    extremeLevel,
    meanDirect: sumDirect / sampled,
    meanModel: sumModel / sampled,
  };
}
