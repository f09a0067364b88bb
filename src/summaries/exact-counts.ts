/**
 * The exact posterior of the counts (binomial–logit) model with an intercept only, by nested
 * numerical integration. Nothing here is random; it is the oracle of the counts sampler's tests
 * and of its certificate on intercept-only fits.
 *
 * ## Model
 *   ỹ_i | η_i ~ "Binomial"(ñ_i, expit η_i) (effective counts; likelihood e^{ỹη}/(1 + e^η)^ñ),
 *   η_i = β₀ + u_i, u_i ~ N(0, σ²), β₀ ~ flat or N(μ₀, s₀²), σ ~ uniform, half-Cauchy(A), or
 *   σ² ~ inverse-gamma(a, b). Sites with ñ_i = 0 add nothing to the likelihood.
 *
 * ## Integrals
 * The site effects are independent given (β₀, σ), so the posterior of (β₀, t = log σ) is
 *   π(β₀, t) ∝ p(β₀) p(t) Π_i L_i(β₀, σ),  L_i = ∫ e^{ỹ_i η − ñ_i log(1 + e^η)} N(η; β₀, σ²) dη,
 * and E[g(η_i) | y] = ∫∫ π(β₀, t) E[g(η_i) | β₀, σ, y_i] dβ₀ dt with the inner conditional
 * expectation a ratio of two one-dimensional integrals (e.g. Gelman et al. 2013, Bayesian Data
 * Analysis 3rd ed., §5.3, the rat-tumour binomial model, there with a beta prior: the same
 * factorisation given the hyperparameters). Each one-dimensional integral is a trapezoid sum on
 * a uniform grid centred at the integrand's mode and scaled by its curvature there, walked out
 * until the log integrand has dropped by {@link LOG_DROP} on both sides. The inner (η) step is
 * also at most 1: the log likelihood's softplus has poles at ±iπ, so the trapezoid error is about
 * e^{−2π²/h} ≤ 3e-9 relative whatever σ is. A site with 0 (or all) cases has a likelihood that
 * tends to its supremum as η → −∞ (+∞): once it is within 1e-13 of it, the rest of that side is
 * the Gaussian tail, added exactly through Mills' ratio with the Euler–Maclaurin end correction
 * h²f'/12 (e.g. Davis & Rabinowitz 1984, Methods of Numerical Integration, §2.9 — recalled), so
 * the plateau of width ~σ is not walked step by step when σ is large. Every integrand is
 * smooth and log-concave in η (and in β₀: Prékopa's theorem), so the trapezoid rule converges
 * geometrically in 1/h (Trefethen & Weideman 2014, SIAM Review 56(3) — recalled); the tests halve
 * every spacing and find agreement to about 5e-8 (the sd of σ_u under a heavy-tailed prior; most
 * quantities to 1e-10), far below Monte Carlo error. The derivatives of log L_i in β₀
 * come from the same sums: since the Gaussian depends on η − β₀, differentiating under the
 * integral and integrating by parts gives ∂ log L_i/∂β₀ = E[ℓ_i'(η)] = ỹ_i − ñ_i E[p] and
 * ∂² log L_i/∂β₀² = E[ℓ_i''(η)] + Var(ℓ_i'(η)) = −ñ_i E[p(1 − p)] + ñ_i² Var(p), with ℓ_i the
 * site's log likelihood and the moments under the site's conditional given (β₀, σ) — free of
 * the cancellation that the forms in σ⁻² suffer when σ is small. Newton's method uses them for
 * the mode in β₀ at each t.
 */
import type { CoefficientPrior, ScalePrior } from '../config/types.js';
import { normalCdf, normalUpperTailScaled } from '../maths/normal.js';
import { logPriorLogSigma } from '../models/area.js';

export interface ExactCountsInput {
  /** Effective cases and trials per site (ñ_i = 0 for a site without a sample). */
  cases: ArrayLike<number>;
  trials: ArrayLike<number>;
  coefficients: CoefficientPrior;
  siteSd: ScalePrior;
}

export interface ExactMoment {
  mean: number;
  sd: number;
}

export interface ExactCountsPosterior {
  intercept: ExactMoment;
  siteSd: ExactMoment;
  /** p_i = expit(η_i), one per site. */
  sites: ExactMoment[];
}

export interface ExactCountsOptions {
  /** Multiplies every grid spacing (tests halve it to check convergence). Default 1. */
  spacingFactor?: number;
}

/** How far (in log density) each grid reaches on both sides of its mode. */
const LOG_DROP = 32;
/** Spacing of the inner (η) and β₀ grids in units of the local curvature scale. */
const INNER_SPACING = 0.5;
/** Largest spacing of the t = log σ grid, and its fraction of the local scale of log p(t | y). */
const T_SPACING_MAX = 0.2;
const T_SPACING_PER_SCALE = 0.4;
const T_MIN = -20;
const T_MAX = 16;
const LOG_SQRT_2PI = 0.5 * Math.log(2 * Math.PI);
const SQRT_2PI = Math.sqrt(2 * Math.PI);
/** Largest inner step (see the module doc: the poles of softplus at ±iπ). */
const INNER_STEP_MAX = 1;
/** A 0-case (all-case) site's log likelihood within this of 0 counts as saturated. */
const SATURATED = 1e-13;

/**
 * Mills' ratio R(y) = Φ(−y)/φ(y): from Cody's scaled upper tail for y ≥ 0.6745, directly below
 * (no cancellation there: Φ(−y) ≥ 1/4).
 */
function millsRatio(y: number): number {
  if (y >= 0.67448975) return SQRT_2PI * normalUpperTailScaled(y);
  return (normalCdf(-y) * SQRT_2PI) / Math.exp(-0.5 * y * y);
}

/** log(1 + e^x) without overflow. */
function softplus(x: number): number {
  return x > 0 ? x + Math.log1p(Math.exp(-x)) : Math.log1p(Math.exp(x));
}

function expit(x: number): number {
  return 1 / (1 + Math.exp(-x));
}

/** One site's integrals at (β₀, σ): log L_i, and E[p], E[p²] under the site's conditional. */
interface SiteIntegral {
  logL: number;
  meanP: number;
  meanP2: number;
}

/** log integrand f(η) = ỹη − ñ softplus(η) − (η − β₀)²/(2σ²). */
function logIntegrand(eta: number, y: number, n: number, beta0: number, sigma2: number): number {
  const d = eta - beta0;
  return y * eta - n * softplus(eta) - (d * d) / (2 * sigma2);
}

/** Mode of the (strictly concave) log integrand by Newton's method kept inside a bracket. */
function innerMode(y: number, n: number, beta0: number, sigma2: number): { mode: number; curvature: number } {
  // f'(η) = ỹ − ñ expit(η) − (η − β₀)/σ² is decreasing, positive at β₀ − σ²(ñ − ỹ) − … and
  // negative at β₀ + σ²ỹ: the mode lies in [β₀ − σ²(ñ − ỹ), β₀ + σ²ỹ].
  let lo = beta0 - sigma2 * (n - y);
  let hi = beta0 + sigma2 * y;
  let eta = Math.min(Math.max(beta0, lo), hi);
  let curvature = 1 / sigma2;
  for (let iteration = 0; iteration < 200; iteration++) {
    const p = expit(eta);
    const slope = y - n * p - (eta - beta0) / sigma2;
    curvature = n * p * (1 - p) + 1 / sigma2;
    if (slope > 0) lo = eta;
    else hi = eta;
    let next = eta + slope / curvature;
    if (!(next > lo && next < hi)) next = 0.5 * (lo + hi);
    if (Math.abs(next - eta) <= 1e-12 * (1 + Math.abs(eta)) || hi - lo <= 1e-13 * (1 + Math.abs(eta))) {
      eta = next;
      break;
    }
    eta = next;
  }
  const p = expit(eta);
  return { mode: eta, curvature: n * p * (1 - p) + 1 / sigma2 };
}

function siteIntegral(y: number, n: number, beta0: number, sigma: number, spacing: number): SiteIntegral {
  const sigma2 = sigma * sigma;
  const { mode, curvature } = innerMode(y, n, beta0, sigma2);
  const h = spacing * Math.min(INNER_SPACING / Math.sqrt(curvature), INNER_STEP_MAX);
  const top = logIntegrand(mode, y, n, beta0, sigma2);
  let s0 = 0;
  let sp = 0;
  let sp2 = 0;
  const add = (eta: number, w: number) => {
    const p = expit(eta);
    s0 += w;
    sp += w * p;
    sp2 += w * p * p;
  };
  add(mode, 1);
  for (const direction of [-1, 1]) {
    // The side where a 0-case (all-case) site's likelihood tends to its supremum 1.
    // (A site without trials has no likelihood: its integrand is Gaussian and decays anyway.)
    const plateau = n > 0 && ((direction < 0 && y === 0) || (direction > 0 && y === n));
    for (let j = 1; ; j++) {
      const eta = mode + direction * j * h;
      const drop = logIntegrand(eta, y, n, beta0, sigma2) - top;
      const w = Math.exp(drop);
      add(eta, w);
      if (drop < -LOG_DROP) break;
      if (plateau && n * Math.exp(direction * -eta) < SATURATED) {
        // Beyond eta the integrand is w·exp(−((x − β₀)² − (eta − β₀)²)/(2σ²)): its integral is
        // w·σ·R(v) with v = −direction·(eta − β₀)/σ. The trapezoid counted eta with weight 1
        // instead of ½; the end correction is ∓(h²/12) f'(eta) with f' = −(eta − β₀)/σ² · w.
        const sigma = Math.sqrt(sigma2);
        const tail = w * sigma * millsRatio((direction * (eta - beta0)) / sigma);
        const slope = (-(eta - beta0) / sigma2) * w;
        const extra = -0.5 * w + tail / h - (direction * h * slope) / 12;
        // p → 0 on a 0-case plateau and → 1 on an all-case one (within 1e-13).
        s0 += extra;
        if (direction > 0) {
          sp += extra;
          sp2 += extra;
        }
        break;
      }
    }
  }
  return {
    logL: top + Math.log(h * s0) - Math.log(sigma) - LOG_SQRT_2PI,
    meanP: sp / s0,
    meanP2: sp2 / s0,
  };
}

function logPriorIntercept(beta0: number, prior: CoefficientPrior): number {
  if (prior.kind === 'flat') return 0;
  const d = (beta0 - prior.mean) / prior.sd;
  return -0.5 * d * d;
}

/** log π(β₀ | t) up to a constant, with its first two derivatives in β₀ and the site integrals. */
interface BetaSlice {
  logDensity: number;
  gradient: number;
  hessian: number;
  sites: SiteIntegral[];
}

function betaSlice(input: ExactCountsInput, beta0: number, sigma: number, spacing: number): BetaSlice {
  let logDensity = logPriorIntercept(beta0, input.coefficients);
  let gradient = 0;
  let hessian = 0;
  if (input.coefficients.kind === 'normal') {
    const precision = 1 / (input.coefficients.sd * input.coefficients.sd);
    gradient -= (beta0 - input.coefficients.mean) * precision;
    hessian -= precision;
  }
  const sites: SiteIntegral[] = [];
  for (let i = 0; i < input.trials.length; i++) {
    const n = input.trials[i];
    const s = siteIntegral(input.cases[i], n, beta0, sigma, spacing);
    sites.push(s);
    if (n === 0) continue; // the prior integrates to 1: no likelihood
    logDensity += s.logL;
    gradient += input.cases[i] - n * s.meanP;
    hessian += -n * (s.meanP - s.meanP2) + n * n * Math.max(s.meanP2 - s.meanP * s.meanP, 0);
  }
  return { logDensity, gradient, hessian, sites };
}

/** The β₀ integral at one t: log of ∫ π(β₀, t) dβ₀ (prior of t excluded) and conditional moments. */
interface TSlice {
  /** Mode in β₀ (the next t's Newton start). */
  mode: number;
  logMass: number;
  beta: number;
  beta2: number;
  p: Float64Array;
  p2: Float64Array;
}

function tSlice(input: ExactCountsInput, t: number, spacing: number, start: number): TSlice {
  const sigma = Math.exp(t);
  // Newton for the mode in β₀ (log-concave), damped by halving when a step does not go uphill.
  // Far out in σ the density is nearly flat in β₀ and its computed curvature can round to ≥ 0:
  // a floor at a scale of 100(1 + σ) keeps Newton's steps finite there (no mass to speak of).
  const curvatureFloor = 1e-4 / (1 + sigma * sigma);
  const curvatureOf = (at: BetaSlice): number => Math.max(-at.hessian, curvatureFloor);
  let beta0 = start;
  let slice = betaSlice(input, beta0, sigma, spacing);
  for (let iteration = 0; iteration < 100; iteration++) {
    let step = slice.gradient / curvatureOf(slice);
    let next = betaSlice(input, beta0 + step, sigma, spacing);
    while (next.logDensity < slice.logDensity - 1e-12 && Math.abs(step) > 1e-14) {
      step *= 0.5;
      next = betaSlice(input, beta0 + step, sigma, spacing);
    }
    beta0 += step;
    slice = next;
    if (Math.abs(step) < 1e-10 * (1 + Math.abs(beta0))) break;
  }
  const h = (spacing * INNER_SPACING) / Math.sqrt(curvatureOf(slice));
  const m = input.trials.length;
  const p = new Float64Array(m);
  const p2 = new Float64Array(m);
  let s0 = 0;
  let s1 = 0;
  let s2 = 0;
  const top = slice.logDensity;
  const add = (b: number, at: BetaSlice) => {
    const w = Math.exp(at.logDensity - top);
    s0 += w;
    s1 += w * b;
    s2 += w * b * b;
    for (let i = 0; i < m; i++) {
      p[i] += w * at.sites[i].meanP;
      p2[i] += w * at.sites[i].meanP2;
    }
  };
  add(beta0, slice);
  for (const direction of [-1, 1]) {
    for (let j = 1; ; j++) {
      const b = beta0 + direction * j * h;
      const at = betaSlice(input, b, sigma, spacing);
      add(b, at);
      if (at.logDensity - top < -LOG_DROP) break;
    }
  }
  for (let i = 0; i < m; i++) {
    p[i] /= s0;
    p2[i] /= s0;
  }
  return { mode: beta0, logMass: top + Math.log(h * s0), beta: s1 / s0, beta2: s2 / s0, p, p2 };
}

/** log p(t | y) up to a constant, and the slice it came from. */
function logMarginalT(input: ExactCountsInput, t: number, spacing: number, start: number): { value: number; slice: TSlice } {
  const slice = tSlice(input, t, spacing, start);
  return { value: slice.logMass + logPriorLogSigma(t, input.siteSd), slice };
}

/** The mode of log p(t | y): coarse scan, then golden-section refinement. */
function tMode(input: ExactCountsInput, spacing: number, start: number): number {
  let best = -Infinity;
  let bestT = 0;
  for (let t = -7; t <= 3; t += 0.5) {
    const v = logMarginalT(input, t, spacing, start).value;
    if (v > best) {
      best = v;
      bestT = t;
    }
  }
  let a = bestT - 0.5;
  let b = bestT + 0.5;
  const ratio = (Math.sqrt(5) - 1) / 2;
  let c = b - ratio * (b - a);
  let d = a + ratio * (b - a);
  let fc = logMarginalT(input, c, spacing, start).value;
  let fd = logMarginalT(input, d, spacing, start).value;
  while (b - a > 1e-3) {
    if (fc > fd) {
      b = d;
      d = c;
      fd = fc;
      c = b - ratio * (b - a);
      fc = logMarginalT(input, c, spacing, start).value;
    } else {
      a = c;
      c = d;
      fc = fd;
      d = a + ratio * (b - a);
      fd = logMarginalT(input, d, spacing, start).value;
    }
  }
  return 0.5 * (a + b);
}

/**
 * Posterior means and sds of the intercept, σ_u and every p_i of an intercept-only counts model.
 * @throws RangeError when the posterior of σ_u does not decay within log σ ≤ 16 (improper or
 *   nearly so: too few sites with both cases and non-cases for the prior).
 */
export function exactCountsPosterior(input: ExactCountsInput, options: ExactCountsOptions = {}): ExactCountsPosterior {
  const spacing = options.spacingFactor ?? 1;
  const m = input.trials.length;
  // Start β₀ at the pooled logit.
  let cases = 0;
  let trials = 0;
  for (let i = 0; i < m; i++) {
    cases += input.cases[i];
    trials += input.trials[i];
  }
  const start = trials > 0 ? Math.log((cases + 0.5) / (trials - cases + 0.5)) : 0;
  const mode = tMode(input, spacing, start);
  const top = logMarginalT(input, mode, spacing, start).value;
  // Local scale of log p(t | y): distance to a drop of ½ on the steeper side, by doubling.
  let scale = Infinity;
  for (const direction of [-1, 1]) {
    let d = 1e-3;
    while (d < 4 && logMarginalT(input, mode + direction * d, spacing, start).value > top - 0.5) d *= 2;
    scale = Math.min(scale, d);
  }
  const h = spacing * Math.min(T_SPACING_MAX, T_SPACING_PER_SCALE * scale);
  let w0 = 0;
  let beta = 0;
  let beta2 = 0;
  let sd1 = 0;
  let sd2 = 0;
  const p = new Float64Array(m);
  const p2 = new Float64Array(m);
  let previousMode = start;
  const add = (t: number) => {
    const { value, slice } = logMarginalT(input, t, spacing, previousMode);
    previousMode = slice.mode;
    const w = Math.exp(value - top);
    const sigma = Math.exp(t);
    w0 += w;
    beta += w * slice.beta;
    beta2 += w * slice.beta2;
    sd1 += w * sigma;
    sd2 += w * sigma * sigma;
    for (let i = 0; i < m; i++) {
      p[i] += w * slice.p[i];
      p2[i] += w * slice.p2[i];
    }
    return value - top;
  };
  add(mode);
  const modeStart = previousMode;
  for (const direction of [-1, 1]) {
    previousMode = modeStart;
    for (let j = 1; ; j++) {
      const t = mode + direction * j * h;
      if (t < T_MIN) break; // σ_u below e^−20: the pooled limit, no mass left to speak of
      if (t > T_MAX) throw new RangeError(`exact counts posterior: the posterior of σ_u does not decay by log σ = ${T_MAX} (improper or nearly so)`);
      if (add(t) < -LOG_DROP) break;
    }
  }
  const moment = (s1: number, s2: number): ExactMoment => {
    const mean = s1 / w0;
    return { mean, sd: Math.sqrt(Math.max(s2 / w0 - mean * mean, 0)) };
  };
  return {
    intercept: moment(beta, beta2),
    siteSd: moment(sd1, sd2),
    sites: Array.from({ length: m }, (_, i) => moment(p[i], p2[i])),
  };
}
