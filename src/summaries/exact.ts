/**
 * The exact posterior of the area (Fay–Herriot) model by one-dimensional numerical integration.
 *
 * Used as the auditor's certificate next to every Gibbs fit, and as the oracle in the sampler
 * tests. Nothing here is random.
 *
 * ## Model
 *   y_i = θ_i + e_i,  e_i ~ N(0, ψ_i), ψ_i known          (sites with a direct estimate, i ∈ D)
 *   θ_i = x_iᵀβ + u_i, u_i ~ N(0, σ²)                     (every site i = 1..m)
 *   β ~ flat, or β_j ~ N(μ₀, s₀²) independently (λ = 1/s₀²; λ = 0 for flat)
 *   σ ~ uniform on (0, ∞), or half-Cauchy(A), or σ² ~ inverse-gamma(a, b).
 * Sites without a direct estimate add nothing to the likelihood.
 *
 * ## Marginal posterior of σ² (β and θ integrated out)
 * Given σ², y_D ~ N(X_D β, V) with V = diag(σ² + ψ_i), i ∈ D. Completing the square in β,
 *   Σ_{i∈D} w_i (y_i − x_iᵀβ)² + λ‖β − μ₀1‖² = (β − β̂)ᵀ P (β − β̂) + Q,
 *   w_i = 1/(σ² + ψ_i),  P = Σ w_i x_i x_iᵀ + λI,  β̂ = P⁻¹(Σ w_i y_i x_i + λμ₀1),
 *   Q = Σ w_i (y_i − x_iᵀβ̂)² + λ‖β̂ − μ₀1‖²,
 * and the Gaussian integral over β gives (2π)^{p/2} |P|^{−1/2} e^{−Q/2}, so
 *   p(σ² | y) ∝ p(σ²) · Π_{i∈D} (σ² + ψ_i)^{−1/2} · |P|^{−1/2} · exp(−Q/2).
 * For one intercept and a flat prior this is Gelman, Carlin, Stern, Dunson, Vehtari & Rubin
 * (2013), *Bayesian Data Analysis* 3rd ed., §5.4 eqs. 5.17–5.21 (there P⁻¹ = V_μ, β̂ = μ̂); the
 * general design is the same integral (Rao & Molina 2015, *Small Area Estimation* 2nd ed.,
 * ch. 10, hierarchical Bayes for the basic area model — recalled, not re-read).
 * The hyperprior as a density of σ²: uniform on σ → (σ²)^{−1/2}; half-Cauchy(A) on σ →
 * (σ²)^{−1/2} (1 + σ²/A²)^{−1}; inverse-gamma(a, b) on σ² → (σ²)^{−a−1} e^{−b/σ²}.
 *
 * ## Conditionals given σ² (standard Gaussian results; Rao & Molina 2015 §6.1, recalled)
 *   β | σ², y ~ N(β̂, P⁻¹)
 *   θ_i | σ², y ~ N(γ_i y_i + (1 − γ_i) x_iᵀβ̂,  γ_i ψ_i + (1 − γ_i)² x_iᵀP⁻¹x_i),
 *     γ_i = σ²/(σ² + ψ_i), for i ∈ D  (the second variance term is Prasad & Rao's g₂);
 *   θ_i | σ², y ~ N(x_iᵀβ̂, σ² + x_iᵀP⁻¹x_i) for sites without data (synthetic).
 * Every marginal posterior is therefore a continuous mixture of normals over p(σ² | y).
 *
 * ## Integration
 * On t = log σ (density p(t | y) = p(σ² | y) · 2σ²), by the trapezoid rule on a uniform grid
 * through the mode that reaches out to where the log density has dropped by ≥ 40 (e^{−40} ≈
 * 4e-18) on both sides — on the right also until σ² · density has, so second moments are covered.
 * For a smooth integrand that decays at both ends the trapezoid rule converges geometrically in
 * 1/h: about 2 exp(−2π²s²/h²) for a locally Gaussian shape of sd s (Trefethen & Weideman 2014,
 * "The exponentially convergent trapezoidal rule", SIAM Review 56(3) — recalled). With
 * h = min(0.2, s/2), s the distance from the mode to a drop of ½, that is ≈ e^{−79}; if the log
 * density bends faster anywhere within e^{−10} of the top (h²|ℓ''| > 1) the grid is halved. A test
 * halves h and finds agreement to about 1e-10. Partial integrals (the CDF of σ) are not covered
 * by that argument: σ's quantiles use 4-point Gauss–Legendre on every grid interval and Newton
 * inside the interval holding the target. Quantiles of θ_i and β_j invert the normal-mixture CDF
 * by Halley's method from a Cornish–Fisher start, kept in a bracket with bisection, to 1e-10 sd.
 * Grid points where σ² < 1e-14 · min(ψ_i, ‖x_i‖²/trace P) are merged into one mixture component
 * (no conditional changes there any more), and components whose weight · max(1, σ²/σ²_mode) is
 * below 1e-16 of the heaviest are dropped.
 *
 * ## Tails and propriety
 * As σ → ∞ the density of t decays like e^{−κt} with r = n − p (flat β) or r = n (normal β),
 * n = number of sites with data, and κ = r − 1 (uniform), r + 1 (half-Cauchy), r + 2a
 * (inverse-gamma). The posterior is proper iff κ > 0 (with X_D of full column rank for flat β);
 * E σ is finite iff κ > 1, and E σ², hence the sd of σ, of unsampled sites and of flat-prior
 * coefficients, iff κ > 2 — reported as Infinity otherwise. Beyond the last grid point the
 * second moments get the analytic power-law tail ∫_T^∞ p(T) e^{−(κ−2)(t−T)} dt (common practice).
 */
import type { CoefficientPrior, ScalePrior } from '../config/types.js';
import type { AreaData } from '../data/types.js';
import { normalQuantile } from '../diagnostics/normal-quantile.js';
import { INV_SQRT_2PI, normalCdf, normalCdfGivenExp } from '../maths/normal.js';

export { normalCdf };
import { UserError } from '../errors.js';
import { backSolve, cholesky, choleskyLogDet, forwardSolve, lowerTriangularInverse } from '../models/linalg.js';

/** Priors of the area model: fixed on β, learned hyperprior on σ_u. */
export interface AreaPriors {
  coefficients: CoefficientPrior;
  site_sd: ScalePrior;
}

export interface ExactSummary {
  mean: number;
  sd: number;
  /** At the requested probabilities. */
  quantiles: number[];
}

export interface ExactAreaPosterior {
  probs: number[];
  /** σ_u. */
  siteSd: ExactSummary;
  /** One per column of X. */
  coefficients: ExactSummary[];
  /** θ_i, one per site (all m). */
  sites: ExactSummary[];
  /** Posterior mean of γ_i = σ²/(σ² + ψ_i); 0 for sites without data. */
  weightDirect: Float64Array;
  /** σ at the grid points (uniform in log σ) and the normalised log density log p(σ | y) there. */
  logDensityGrid?: { sigma: Float64Array; logDensity: Float64Array };
}

export interface ExactOptions {
  /** Multiplies the grid spacing (tests halve it to check convergence). Default 1. */
  spacingFactor?: number;
}

export const DEFAULT_PROBS: readonly number[] = [0.025, 0.25, 0.5, 0.75, 0.975];

/** How far (in log density) the grid reaches on both sides of the mode. */
const LOG_DROP = 40;
/** Largest grid spacing in t = log σ. */
const MAX_SPACING = 0.2;
/** Grid spacing as a fraction of the posterior half-width of t at the mode. */
const SPACING_PER_SCALE = 1 / 2;
/** Keeps σ² = e^{2t} well inside double range. */
const T_LIMIT = 340;
const MAX_GRID_POINTS = 400_000;
/** Mixture components lighter than this (relative to the heaviest) are dropped. */
const PRUNE_RELATIVE_WEIGHT = 1e-16;
const QUANTILE_TOLERANCE = 1e-10;

// ---------------------------------------------------------------------------------------------
// The marginal of σ² with its per-evaluation scratch

/** Sites with data packed contiguously, with the cross-products the hot loop needs. */
interface Marginal {
  n: number;
  p: number;
  /** Packed lower-triangle length p(p+1)/2. */
  np: number;
  psi: Float64Array;
  psiMin: number;
  psiMax: number;
  /** n × np: x_ij x_il for l ≤ j, packed row by row. */
  XX: Float64Array;
  /** n × p: x_ij (y_i − shift). */
  Xy: Float64Array;
  /** (y_i − shift)². */
  yy: Float64Array;
  /**
   * y is centred at its precision-weighted mean when column 0 is the intercept, so that
   * Q = c − bᵀP⁻¹b does not cancel; β̂_0 is shifted back after the solve.
   */
  shift: number;
  /** Prior precision λ of each coefficient (0 for flat). */
  lambda: number;
  /** Prior means in the shifted coordinates (intercept: μ₀ − shift). */
  priorMeans: Float64Array;
  /** λ Σ_j priorMeans_j². */
  priorQuad: number;
  prior: ScalePrior;
  // Scratch, overwritten by every evaluation: P's factor L and β̂.
  packed: Float64Array;
  L: Float64Array;
  b: Float64Array;
  beta: Float64Array;
}

function hasInterceptColumn(data: AreaData): boolean {
  for (let i = 0; i < data.m; i++) if (data.X[i * data.p] !== 1) return false;
  return data.p > 0;
}

function prepareMarginal(data: AreaData, priors: AreaPriors): Marginal {
  validatePriors(priors);
  validateData(data);
  const { m, p } = data;
  let n = 0;
  let weightSum = 0;
  let weightedY = 0;
  for (let i = 0; i < m; i++) {
    if (!data.hasData[i]) continue;
    n++;
    weightSum += 1 / data.variance[i];
    weightedY += data.direct[i] / data.variance[i];
  }
  const shift = n > 0 && hasInterceptColumn(data) ? weightedY / weightSum : 0;
  const np = (p * (p + 1)) / 2;
  const psi = new Float64Array(n);
  const XX = new Float64Array(n * np);
  const Xy = new Float64Array(n * p);
  const yy = new Float64Array(n);
  let k = 0;
  for (let i = 0; i < m; i++) {
    if (!data.hasData[i]) continue;
    const y = data.direct[i] - shift;
    psi[k] = data.variance[i];
    yy[k] = y * y;
    let c = 0;
    for (let j = 0; j < p; j++) {
      const xij = data.X[i * p + j];
      Xy[k * p + j] = xij * y;
      for (let l = 0; l <= j; l++) XX[k * np + c++] = xij * data.X[i * p + l];
    }
    k++;
  }
  const coef = priors.coefficients;
  const lambda = coef.kind === 'normal' ? 1 / (coef.sd * coef.sd) : 0;
  const priorMeans = new Float64Array(p);
  let priorQuad = 0;
  if (coef.kind === 'normal') {
    for (let j = 0; j < p; j++) {
      priorMeans[j] = coef.mean - (j === 0 ? shift : 0);
      priorQuad += lambda * priorMeans[j] * priorMeans[j];
    }
  }
  return {
    n,
    p,
    np,
    psi,
    psiMin: psi.reduce((a, v) => Math.min(a, v), Infinity),
    psiMax: psi.reduce((a, v) => Math.max(a, v), 0),
    XX,
    Xy,
    yy,
    shift,
    lambda,
    priorMeans,
    priorQuad,
    prior: priors.site_sd,
    packed: new Float64Array(np),
    L: new Float64Array(p * p),
    b: new Float64Array(p),
    beta: new Float64Array(p),
  };
}

/** log p(σ²) up to a constant, as a density of σ², written in t = log σ (σ² = e^{2t}). */
function logPriorVariance(prior: ScalePrior, t: number): number {
  switch (prior.kind) {
    case 'uniform':
      return -t;
    case 'half_cauchy': {
      const x = 2 * (t - Math.log(prior.scale)); // log(σ²/A²); log(1 + eˣ) without overflow
      return -t - (x > 30 ? x + Math.log1p(Math.exp(-x)) : Math.log1p(Math.exp(x)));
    }
    case 'inverse_gamma':
      return -2 * (prior.shape + 1) * t - prior.scale * Math.exp(-2 * t);
  }
}

/**
 * −½ Σ log(σ² + ψ_i) − ½ log|P| − ½ Q at σ²; leaves L (P = LLᵀ) and β̂ in the scratch.
 * One pass over the sites; logs are taken of products of 8 factors where that cannot over- or
 * underflow. −Infinity if P is not positive definite.
 */
function logIntegratedLikelihood(g: Marginal, sigma2: number): number {
  const { n, p, np, psi, XX, Xy, yy, packed, L, b, beta } = g;
  packed.fill(0);
  b.fill(0);
  let logDetV = 0;
  let c = 0;
  const chunked = sigma2 + g.psiMax < 1e30 && g.psiMin > 1e-30;
  let product = 1;
  for (let i = 0; i < n; i++) {
    const v = sigma2 + psi[i];
    const w = 1 / v;
    if (chunked) {
      product *= v;
      if ((i & 7) === 7) {
        logDetV += Math.log(product);
        product = 1;
      }
    } else logDetV += Math.log(v);
    c += w * yy[i];
    const o = i * np;
    for (let k = 0; k < np; k++) packed[k] += w * XX[o + k];
    const oy = i * p;
    for (let j = 0; j < p; j++) b[j] += w * Xy[oy + j];
  }
  logDetV += Math.log(product);
  let k = 0;
  for (let j = 0; j < p; j++) {
    for (let l = 0; l <= j; l++) L[j * p + l] = packed[k++];
    L[j * p + j] += g.lambda;
    b[j] += g.lambda * g.priorMeans[j];
  }
  if (!cholesky(L, p, L)) return -Infinity;
  // Q = c + λ‖μ₀‖² − bᵀP⁻¹b with bᵀP⁻¹b = ‖L⁻¹b‖².
  forwardSolve(L, p, b, beta);
  let fitted = 0;
  for (let j = 0; j < p; j++) fitted += beta[j] * beta[j];
  backSolve(L, p, beta, beta);
  beta[0] += g.shift;
  const q = Math.max(0, c + g.priorQuad - fitted);
  return -0.5 * (logDetV + choleskyLogDet(L, p) + q);
}

/** log p(t | y) up to a constant, t = log σ: log p(σ² | y) + log(dσ²/dt) − log 2. */
function logPosteriorLogSigma(g: Marginal, t: number): number {
  return logIntegratedLikelihood(g, Math.exp(2 * t)) + logPriorVariance(g.prior, t) + 2 * t;
}

/**
 * log p(σ² | y) up to an additive constant that does not depend on σ² (density with respect to
 * σ²; formula in the module doc). For tests and for samplers that update σ² on its marginal.
 */
export function logMarginalSiteVariance(data: AreaData, priors: AreaPriors, sigma2: number): number {
  return makeLogMarginalSiteVariance(data, priors)(sigma2);
}

/**
 * The same as {@link logMarginalSiteVariance}, with the data prepared once: the returned
 * function costs one pass over the sites with data and allocates nothing.
 */
export function makeLogMarginalSiteVariance(data: AreaData, priors: AreaPriors): (sigma2: number) => number {
  const g = prepareMarginal(data, priors);
  checkIdentified(g, data);
  return (sigma2: number) => {
    if (!(sigma2 >= 0)) return Number.NaN;
    // At σ² = 0 the density of σ² is infinite under the uniform and half-Cauchy priors
    // ((σ²)^{−1/2}) and zero under the inverse-gamma.
    if (sigma2 === 0) return g.prior.kind === 'inverse_gamma' ? -Infinity : Infinity;
    const t = 0.5 * Math.log(sigma2);
    return logIntegratedLikelihood(g, sigma2) + logPriorVariance(g.prior, t);
  };
}

// ---------------------------------------------------------------------------------------------
// Validation and propriety

function validatePriors(priors: AreaPriors): void {
  const positive = (v: number) => Number.isFinite(v) && v > 0;
  const s = priors.site_sd;
  if (s.kind === 'half_cauchy' && !positive(s.scale)) {
    throw new UserError('config', `site_sd half_cauchy scale must be a positive number (got ${s.scale})`);
  }
  if (s.kind === 'inverse_gamma' && (!positive(s.shape) || !positive(s.scale))) {
    throw new UserError(
      'config',
      `site_sd inverse_gamma shape and scale must be positive numbers (got shape ${s.shape}, scale ${s.scale}); ` +
        'a zero scale makes the posterior improper',
    );
  }
  const c = priors.coefficients;
  if (c.kind === 'normal' && (!positive(c.sd) || !Number.isFinite(c.mean))) {
    throw new UserError('config', `coefficients normal prior needs a finite mean and a positive sd (got mean ${c.mean}, sd ${c.sd})`);
  }
}

function validateData(data: AreaData): void {
  const { m, p } = data;
  for (let i = 0; i < m; i++) {
    for (let j = 0; j < p; j++) {
      if (!Number.isFinite(data.X[i * p + j])) {
        throw new UserError('data', `site '${data.siteIds[i]}': covariate '${data.coefficientNames[j]}' is not a finite number`);
      }
    }
    if (!data.hasData[i]) continue;
    if (!Number.isFinite(data.direct[i])) {
      throw new UserError('data', `site '${data.siteIds[i]}': direct estimate is not a finite number`);
    }
    const v = data.variance[i];
    if (!(Number.isFinite(v) && v > 0)) {
      throw new UserError('data', `site '${data.siteIds[i]}': sampling variance must be positive (got ${v})`);
    }
  }
}

/**
 * With a flat coefficient prior, β is identified only if the sites with data give X_D full
 * column rank. Checked on XᵀX scaled to unit diagonal (so covariate units do not matter).
 */
function checkIdentified(g: Marginal, data: AreaData): void {
  if (g.lambda > 0) return;
  const { n, p, np, XX } = g;
  const noun = n === 1 ? 'site' : 'sites';
  if (n < p) {
    throw new UserError(
      'data',
      `a flat coefficient prior needs at least ${p} sites with a direct estimate to identify ${p} coefficients (found ${n}); ` +
        'add sites or use a normal coefficient prior',
    );
  }
  const a = new Float64Array(p * p);
  for (let i = 0; i < n; i++) {
    let c = 0;
    for (let j = 0; j < p; j++) for (let l = 0; l <= j; l++) a[j * p + l] += XX[i * np + c++];
  }
  const scale = new Float64Array(p);
  for (let j = 0; j < p; j++) {
    if (!(a[j * p + j] > 0)) {
      throw new UserError('data', `covariate '${data.coefficientNames[j]}' is zero at all ${n} ${noun} with a direct estimate`);
    }
    scale[j] = 1 / Math.sqrt(a[j * p + j]);
  }
  for (let j = 0; j < p; j++) for (let l = 0; l <= j; l++) a[j * p + l] *= scale[j] * scale[l];
  // Pivots of the unit-diagonal Cholesky are 1 − R²(column j on the earlier columns).
  const ok = cholesky(a, p, a);
  for (let j = 0; j < p; j++) {
    const pivot = ok ? a[j * p + j] * a[j * p + j] : 0;
    if (!(pivot > 1e-10)) {
      throw new UserError(
        'data',
        `covariate '${data.coefficientNames[j]}' is collinear with the earlier columns among the ${n} ${noun} with a direct estimate; ` +
          'drop it or use a normal coefficient prior',
      );
    }
  }
}

/** Tail exponent κ of p(t | y) as t → ∞ (see module doc). */
function tailExponent(g: Marginal): number {
  const r = g.lambda > 0 ? g.n : g.n - g.p;
  switch (g.prior.kind) {
    case 'uniform':
      return r - 1;
    case 'half_cauchy':
      return r + 1;
    case 'inverse_gamma':
      return r + 2 * g.prior.shape;
  }
}

function checkProper(g: Marginal, kappa: number): void {
  if (kappa > 0) return;
  const needed = g.lambda > 0 ? 2 : g.p + 2;
  throw new UserError(
    'data',
    `the posterior of site_sd is improper: a uniform site_sd prior needs at least ${needed} sites with a direct estimate ` +
      `(found ${g.n}); add sites or use a half_cauchy or inverse_gamma site_sd prior`,
  );
}

function heavyTailError(g: Marginal): UserError {
  return new UserError(
    'data',
    `the posterior of site_sd is too diffuse to summarise (${g.n} sites with a direct estimate for ${g.p} coefficients); ` +
      'add sites with data or use a more informative site_sd prior',
  );
}

// ---------------------------------------------------------------------------------------------
// The grid in t = log σ

/** Golden-section maximisation of a unimodal function on [a, b]. */
function maximiseOn(f: (t: number) => number, a: number, b: number): { t: number; value: number } {
  const r = (Math.sqrt(5) - 1) / 2;
  let x1 = b - r * (b - a);
  let x2 = a + r * (b - a);
  let f1 = f(x1);
  let f2 = f(x2);
  while (b - a > 1e-5) {
    if (f1 < f2) {
      a = x1;
      x1 = x2;
      f1 = f2;
      x2 = a + r * (b - a);
      f2 = f(x2);
    } else {
      b = x2;
      x2 = x1;
      f2 = f1;
      x1 = b - r * (b - a);
      f1 = f(x1);
    }
  }
  return f1 >= f2 ? { t: x1, value: f1 } : { t: x2, value: f2 };
}

/** Scan window for the mode: the scales of ψ, of the spread of y and of the prior. */
function scanWindow(g: Marginal): [number, number] {
  const scales: number[] = [];
  if (g.n > 0) {
    let spread = 0;
    for (let i = 0; i < g.n; i++) spread += g.yy[i] / g.n;
    scales.push(0.5 * Math.log(g.psiMin), 0.5 * Math.log(g.psiMax));
    if (spread > 0) scales.push(0.5 * Math.log(spread));
  }
  const s = g.prior;
  if (s.kind === 'half_cauchy') scales.push(Math.log(s.scale));
  if (s.kind === 'inverse_gamma') scales.push(0.5 * Math.log(s.scale / (s.shape + 1)));
  if (scales.length === 0) scales.push(0);
  return [Math.max(-T_LIMIT, Math.min(...scales) - 15), Math.min(T_LIMIT, Math.max(...scales) + 15)];
}

/** Coarse scan (widened while the best point sits on an edge), then golden section. */
function findMode(f: (t: number) => number, window: [number, number], g: Marginal): { t: number; value: number } {
  const step = 0.5;
  let [lo, hi] = window;
  for (let attempt = 0; attempt < 40; attempt++) {
    let best = -Infinity;
    let bestT = Number.NaN;
    for (let t = lo; t <= hi + 1e-12; t += step) {
      const v = f(t);
      if (v > best) {
        best = v;
        bestT = t;
      }
    }
    if (!Number.isFinite(best)) throw new Error('exact area posterior: log density is not finite anywhere on the scan');
    const atLow = bestT - lo < step / 2 && lo > -T_LIMIT;
    const atHigh = hi - bestT < step / 2 && hi < T_LIMIT;
    if (!atLow && !atHigh) return maximiseOn(f, bestT - step, bestT + step);
    if (atLow) lo = Math.max(-T_LIMIT, lo - 20);
    if (atHigh) hi = Math.min(T_LIMIT, hi + 20);
  }
  throw heavyTailError(g);
}

/** Distance from the mode to where the log density has dropped by ½ (≈ one sd if normal), to ±2%. */
function halfWidth(f: (t: number) => number, mode: number, top: number, direction: 1 | -1): number {
  let d = 1e-6;
  while (d < 2 * T_LIMIT && f(mode + direction * d) > top - 0.5) d *= 2;
  let a = d / 2;
  let b = d;
  for (let k = 0; k < 6; k++) {
    const c = 0.5 * (a + b);
    if (f(mode + direction * c) > top - 0.5) a = c;
    else b = c;
  }
  return 0.5 * (a + b);
}

/** The grid of t = log σ with, at every point, the factor of P and β̂ there. */
interface Grid {
  t0: number;
  h: number;
  /** log p(t | y) − max at t0 + k h. */
  logDensity: Float64Array;
  /** G × p × p: Cholesky factor L of P at each point. */
  factors: Float64Array;
  /** G × p: β̂ at each point. */
  betas: Float64Array;
}

/**
 * Uniform grid through the mode, out to a log-density drop of ≥ LOG_DROP on both sides; on the
 * right also until σ²·density has dropped as far (or 60 units past the mode, where the power-law
 * tail correction takes over), so second moments are covered.
 */
function buildGrid(g: Marginal, mode: number, top: number, h: number, kappa: number): Grid {
  const p = g.p;
  const values: number[][] = [[], []];
  const factors: Float64Array[][] = [[], []];
  const betas: Float64Array[][] = [[], []];
  for (const side of [0, 1]) {
    const direction = side === 0 ? -1 : 1;
    for (let k = side === 0 ? 1 : 0; ; k++) {
      const t = mode + direction * k * h;
      if (Math.abs(t) > T_LIMIT || values[side].length > MAX_GRID_POINTS) throw heavyTailError(g);
      const v = logPosteriorLogSigma(g, t) - top;
      values[side].push(v);
      factors[side].push(g.L.slice(0, p * p));
      betas[side].push(g.beta.slice(0, p));
      const farEnough =
        side === 0 || kappa <= 2 || v + 2 * (t - mode) < -LOG_DROP || t - mode > 60;
      if (v < -LOG_DROP && farEnough) break;
    }
  }
  const left = values[0].length;
  const G = left + values[1].length;
  const logDensity = new Float64Array(G);
  const allFactors = new Float64Array(G * p * p);
  const allBetas = new Float64Array(G * p);
  for (let k = 0; k < G; k++) {
    const side = k < left ? 0 : 1;
    const index = k < left ? left - 1 - k : k - left;
    logDensity[k] = values[side][index];
    allFactors.set(factors[side][index], k * p * p);
    allBetas.set(betas[side][index], k * p);
  }
  return { t0: mode - left * h, h, logDensity, factors: allFactors, betas: allBetas };
}

/**
 * Largest h²|ℓ''| over grid points that carry real mass (within e^{-10} of the top): above 1 the
 * log density bends on a scale shorter than the spacing somewhere the mass is — a second, sharper
 * mode — and the grid is refined.
 */
function roughness(grid: Grid): number {
  const v = grid.logDensity;
  let worst = 0;
  for (let k = 1; k + 1 < v.length; k++) {
    if (v[k] < -10) continue;
    worst = Math.max(worst, Math.abs(v[k + 1] - 2 * v[k] + v[k - 1]));
  }
  return worst;
}

// ---------------------------------------------------------------------------------------------
// Normal mixtures

/** Mixture components and weights (w sums to 1) in the first `count` entries. */
interface Mixture {
  count: number;
  w: Float64Array;
  mu: Float64Array;
  sd: Float64Array;
  /** 1/sd, filled by {@link summariseMixture}. */
  precision: Float64Array;
}

/**
 * The q-quantile of Σ_k w_k N(μ_k, s_k²) by Halley's method on the CDF (cubic convergence, so
 * two or three CDF evaluations from a Cornish–Fisher start), kept inside a bracket that tightens
 * at every step with bisection as fallback, until the step is below 1e-10 · scale.
 */
function mixtureQuantile(q: number, start: number, scale: number, mix: Mixture): number {
  const { count, w, mu, precision } = mix;
  const tol = QUANTILE_TOLERANCE * scale;
  let lo = -Infinity;
  let hi = Infinity;
  let x = start;
  let expand = 2 * scale;
  for (let iter = 0; iter < 300; iter++) {
    let cdf = 0;
    let pdf = 0;
    let slope = 0; // derivative of the pdf
    for (let k = 0; k < count; k++) {
      const r = precision[k];
      const z = (x - mu[k]) * r;
      const e = Math.exp(-0.5 * z * z);
      cdf += w[k] * normalCdfGivenExp(z, e);
      const d = w[k] * e * r;
      pdf += d;
      slope -= d * z * r;
    }
    pdf *= INV_SQRT_2PI;
    slope *= INV_SQRT_2PI;
    const diff = cdf - q;
    if (diff === 0) return x;
    if (diff < 0) lo = x;
    else hi = x;
    let step = diff / pdf;
    const halley = 1 - (0.5 * step * slope) / pdf;
    if (halley > 0.5 && halley < 2) step /= halley;
    if (Math.abs(step) <= tol) return x - step;
    let next = x - step;
    if (!(next > lo && next < hi)) {
      if (Number.isFinite(lo) && Number.isFinite(hi)) next = 0.5 * (lo + hi);
      else {
        next = diff < 0 ? x + expand : x - expand;
        expand *= 2;
      }
    }
    if (Math.abs(next - x) <= tol || hi - lo <= tol) return next;
    x = next;
  }
  return x;
}

/**
 * Mean, sd and quantiles of a normal mixture. `tailSecondMoment` is added to the second moment
 * (the part of E[θ²] beyond the grid; Infinity when it diverges).
 */
function summariseMixture(
  mix: Mixture,
  probs: readonly number[],
  zs: readonly number[],
  tailSecondMoment: number,
): ExactSummary {
  const { count, w, mu, sd, precision } = mix;
  for (let k = 0; k < count; k++) precision[k] = 1 / sd[k];
  let mean = 0;
  for (let k = 0; k < count; k++) mean += w[k] * mu[k];
  let m2 = 0;
  let m3 = 0;
  let m4 = 0;
  for (let k = 0; k < count; k++) {
    const d = mu[k] - mean;
    const v = sd[k] * sd[k];
    m2 += w[k] * (v + d * d);
    m3 += w[k] * d * (d * d + 3 * v);
    m4 += w[k] * (d * d * d * d + 6 * d * d * v + 3 * v * v);
  }
  const gridSd = Math.sqrt(m2);
  const skew = m3 / (m2 * gridSd);
  const kurt = m4 / (m2 * m2) - 3;
  const quantiles = probs.map((q, j) => {
    // Cornish–Fisher start (Cornish & Fisher 1937; common practice), ignored if it runs wild.
    const z = zs[j];
    const cf = z + ((z * z - 1) * skew) / 6 + ((z * z * z - 3 * z) * kurt) / 24 - ((2 * z * z * z - 5 * z) * skew * skew) / 36;
    const start = mean + gridSd * (Number.isFinite(cf) && Math.abs(cf - z) < 1 ? cf : z);
    return mixtureQuantile(q, start, gridSd, mix);
  });
  return { mean, sd: Math.sqrt(m2 + tailSecondMoment), quantiles };
}

// ---------------------------------------------------------------------------------------------
// The posterior

const GAUSS_LEGENDRE_4 = {
  x: [-0.8611363115940526, -0.3399810435848563, 0.3399810435848563, 0.8611363115940526],
  w: [0.3478548451374538, 0.6521451548625461, 0.6521451548625461, 0.3478548451374538],
};

/** ∫_a^b e^{f(t)} dt by 4-point Gauss–Legendre. */
function gaussLegendre(f: (t: number) => number, a: number, b: number): number {
  const half = 0.5 * (b - a);
  const mid = 0.5 * (a + b);
  let s = 0;
  for (let k = 0; k < 4; k++) s += GAUSS_LEGENDRE_4.w[k] * Math.exp(f(mid + half * GAUSS_LEGENDRE_4.x[k]));
  return half * s;
}

/**
 * Quantiles of t = log σ: cumulative mass over grid intervals by Gauss–Legendre, then Newton
 * (safeguarded by the interval) inside the interval that holds the target. `f` is the log
 * density relative to its maximum, like `grid.logDensity`.
 */
function logSigmaQuantiles(f: (t: number) => number, grid: Grid, probs: readonly number[]): number[] {
  const { t0, h, logDensity } = grid;
  const intervals = logDensity.length - 1;
  const cumulative = new Float64Array(intervals + 1);
  for (let k = 0; k < intervals; k++) {
    const a = t0 + k * h;
    const negligible = Math.max(logDensity[k], logDensity[k + 1]) < -LOG_DROP;
    const mass = negligible
      ? 0.5 * h * (Math.exp(logDensity[k]) + Math.exp(logDensity[k + 1]))
      : gaussLegendre(f, a, a + h);
    cumulative[k + 1] = cumulative[k] + mass;
  }
  const total = cumulative[intervals];
  return probs.map((q) => {
    const target = q * total;
    let k = 0;
    let hiK = intervals;
    while (hiK - k > 1) {
      const mid = (k + hiK) >> 1;
      if (cumulative[mid] <= target) k = mid;
      else hiK = mid;
    }
    let a = t0 + k * h;
    let b = a + h;
    const base = cumulative[k];
    const left = a;
    let t = a + h * ((target - base) / Math.max(cumulative[k + 1] - base, Number.MIN_VALUE));
    for (let iter = 0; iter < 100; iter++) {
      const diff = base + (t > left ? gaussLegendre(f, left, t) : 0) - target;
      if (diff < 0) a = t;
      else b = t;
      let next = t - diff / Math.exp(f(t));
      if (!(next > a && next < b)) next = 0.5 * (a + b);
      if (Math.abs(next - t) <= 1e-13 * Math.max(1, Math.abs(t)) || b - a <= 1e-13) return next;
      t = next;
    }
    return t;
  });
}

/** Smallest ‖x_i‖² over all sites: with it, x_iᵀP⁻¹x_i ≥ ‖x_i‖²/trace(P). */
function smallestRowNorm(data: AreaData): number {
  let smallest = Infinity;
  for (let i = 0; i < data.m; i++) {
    let s = 0;
    for (let j = 0; j < data.p; j++) s += data.X[i * data.p + j] ** 2;
    smallest = Math.min(smallest, s);
  }
  return smallest;
}

/**
 * The exact posterior of the area model: σ_u, β and every θ_i, with means, sds and quantiles
 * at `probs`, and the posterior mean weight on each site's own data.
 *
 * p(σ² | y) is integrated numerically on t = log σ (module doc); every other marginal is the
 * normal mixture over it (Gelman et al. 2013, BDA3 §5.4; Rao & Molina 2015 ch. 10, recalled).
 *
 * @throws UserError('data') when the posterior is improper (too few sites with data for the
 *   priors, collinear covariates under a flat prior) or too diffuse to integrate;
 *   UserError('config') for prior parameters out of range.
 */
export function exactAreaPosterior(
  data: AreaData,
  priors: AreaPriors,
  probs: readonly number[] = DEFAULT_PROBS,
  options: ExactOptions = {},
): ExactAreaPosterior {
  for (const q of probs) {
    if (!(q > 0 && q < 1)) throw new RangeError(`exactAreaPosterior: probabilities must lie in (0, 1), got ${q}`);
  }
  const spacingFactor = options.spacingFactor ?? 1;
  const g = prepareMarginal(data, priors);
  checkIdentified(g, data);
  const kappa = tailExponent(g);
  checkProper(g, kappa);
  const { m, p } = data;
  const pp = p * p;

  // Mode, scale and grid of t = log σ.
  const f = (t: number) => logPosteriorLogSigma(g, t);
  const mode = findMode(f, scanWindow(g), g);
  const top = mode.value;
  const scale = Math.min(halfWidth(f, mode.t, top, -1), halfWidth(f, mode.t, top, 1));
  let h = Math.min(MAX_SPACING, SPACING_PER_SCALE * scale) * spacingFactor;
  let grid = buildGrid(g, mode.t, top, h, kappa);
  for (let refine = 0; refine < 8 && roughness(grid) > 1; refine++) {
    h /= 2;
    grid = buildGrid(g, mode.t, top, h, kappa);
  }
  const G = grid.logDensity.length;
  const tAt = (k: number) => grid.t0 + k * h;

  // Trapezoid weights (normalised) and the density in t at the last point, for tail terms.
  const weight = new Float64Array(G);
  let sum = 0;
  for (let k = 0; k < G; k++) {
    weight[k] = Math.exp(grid.logDensity[k]) * (k === 0 || k === G - 1 ? 0.5 : 1);
    sum += weight[k];
  }
  for (let k = 0; k < G; k++) weight[k] /= sum;
  const tEnd = tAt(G - 1);
  const densityEnd = Math.exp(grid.logDensity[G - 1]) / (sum * h);
  /** ∫_T^∞ p(t) e^{2t} dt with p ∝ e^{−κ t} past the grid; Infinity when E σ² diverges. */
  const tailSigma2 = kappa <= 2 ? Infinity : densityEnd > 0 ? (densityEnd * Math.exp(2 * tEnd)) / (kappa - 2) : 0;

  // σ_u
  let meanSigma = 0;
  let meanSigma2 = 0;
  for (let k = 0; k < G; k++) {
    meanSigma += weight[k] * Math.exp(tAt(k));
    meanSigma2 += weight[k] * Math.exp(2 * tAt(k));
  }
  meanSigma = kappa > 1 ? meanSigma + (densityEnd * Math.exp(tEnd)) / (kappa - 1) : Infinity;
  meanSigma2 += tailSigma2;
  const siteSd: ExactSummary = {
    mean: meanSigma,
    sd: Number.isFinite(meanSigma2) ? Math.sqrt(Math.max(0, meanSigma2 - meanSigma * meanSigma)) : Infinity,
    quantiles: probs.length > 0 ? logSigmaQuantiles((t) => f(t) - top, grid, probs).map(Math.exp) : [],
  };

  // Mixture nodes: grid points that carry mass, or whose conditional variances (which grow like
  // σ² for sites without data and, under a flat prior, for β) make up for a small weight. Far
  // left, where σ² < 1e-14 of every ψ_i and of every x_iᵀP⁻¹x_i (≥ ‖x_i‖²/trace P), all
  // conditionals equal their σ → 0 limits to 1e-14, so those points are merged into one (this
  // removes most of the long e^t tail of the uniform and half-Cauchy priors).
  let maxWeight = 0;
  for (let k = 0; k < G; k++) maxWeight = Math.max(maxWeight, weight[k]);
  const rowNorm = smallestRowNorm(data);
  const nodes: number[] = [];
  const nodeWeights: number[] = [];
  let merged = 0;
  for (let k = 0; k < G; k++) {
    let trace = 0;
    for (let j = 0; j < p; j++) for (let c = 0; c <= j; c++) trace += grid.factors[k * pp + j * p + c] ** 2;
    const limit = 1e-14 * Math.min(g.psiMin, rowNorm / trace);
    const mergeable = k + 1 < G && Math.exp(2 * tAt(k + 1)) <= limit;
    if (mergeable) {
      merged += weight[k];
      continue;
    }
    const wk = weight[k] + merged;
    merged = 0;
    if (wk * Math.exp(2 * Math.max(0, tAt(k) - mode.t)) > PRUNE_RELATIVE_WEIGHT * maxWeight) {
      nodes.push(k);
      nodeWeights.push(wk);
    }
  }
  const K = nodes.length;
  const mix: Mixture = {
    count: K,
    w: new Float64Array(K),
    mu: new Float64Array(K),
    sd: new Float64Array(K),
    precision: new Float64Array(K),
  };
  const sigma2 = new Float64Array(K);
  const inverseFactors = new Float64Array(K * pp); // L⁻¹, so x_iᵀP⁻¹x_i = ‖L⁻¹x_i‖²
  const betas = new Float64Array(K * p);
  const betaVar = new Float64Array(K * p); // diag P⁻¹ = column sums of squares of L⁻¹
  let wSum = 0;
  for (let a = 0; a < K; a++) wSum += nodeWeights[a];
  for (let a = 0; a < K; a++) {
    const k = nodes[a];
    mix.w[a] = nodeWeights[a] / wSum;
    sigma2[a] = Math.exp(2 * tAt(k));
    const inv = inverseFactors.subarray(a * pp, (a + 1) * pp);
    lowerTriangularInverse(grid.factors.subarray(k * pp, (k + 1) * pp), p, inv);
    betas.set(grid.betas.subarray(k * p, (k + 1) * p), a * p);
    for (let j = 0; j < p; j++) {
      let s = 0;
      for (let r = j; r < p; r++) s += inv[r * p + j] ** 2;
      betaVar[a * p + j] = s;
    }
  }
  // Var(β_j | σ²) grows like σ² under a flat prior: its tail past the grid, as for σ².
  const endInverse = new Float64Array(pp);
  lowerTriangularInverse(grid.factors.subarray((G - 1) * pp, G * pp), p, endInverse);

  const zs = probs.map((q) => normalQuantile(q));
  const coefficients: ExactSummary[] = [];
  for (let j = 0; j < p; j++) {
    for (let a = 0; a < K; a++) {
      mix.mu[a] = betas[a * p + j];
      mix.sd[a] = Math.sqrt(betaVar[a * p + j]);
    }
    let tail = 0;
    if (g.lambda === 0 && densityEnd > 0) {
      let endVar = 0;
      for (let r = j; r < p; r++) endVar += endInverse[r * p + j] ** 2;
      tail = kappa > 2 ? (densityEnd * endVar) / (kappa - 2) : Infinity;
    }
    coefficients.push(summariseMixture(mix, probs, zs, tail));
  }

  const sites: ExactSummary[] = [];
  const weightDirect = new Float64Array(m);
  const x = new Float64Array(p);
  for (let i = 0; i < m; i++) {
    for (let j = 0; j < p; j++) x[j] = data.X[i * p + j];
    const sampled = data.hasData[i] === 1;
    const yi = data.direct[i];
    const psi = data.variance[i];
    let gammaMean = 0;
    for (let a = 0; a < K; a++) {
      const o = a * pp;
      const ob = a * p;
      let eta = 0;
      let leverage = 0; // x_iᵀ P⁻¹ x_i
      for (let r = 0; r < p; r++) {
        eta += x[r] * betas[ob + r];
        let z = 0;
        for (let c = 0; c <= r; c++) z += inverseFactors[o + r * p + c] * x[c];
        leverage += z * z;
      }
      if (sampled) {
        const gamma = sigma2[a] / (sigma2[a] + psi);
        const shrink = 1 - gamma;
        mix.mu[a] = gamma * yi + shrink * eta;
        mix.sd[a] = Math.sqrt(gamma * psi + shrink * shrink * leverage);
        gammaMean += mix.w[a] * gamma;
      } else {
        mix.mu[a] = eta;
        mix.sd[a] = Math.sqrt(sigma2[a] + leverage);
      }
    }
    weightDirect[i] = sampled ? gammaMean : 0;
    sites.push(summariseMixture(mix, probs, zs, sampled ? 0 : tailSigma2));
  }

  const sigmaGrid = new Float64Array(G);
  const logDensity = new Float64Array(G);
  const logNorm = Math.log(sum * h);
  for (let k = 0; k < G; k++) {
    sigmaGrid[k] = Math.exp(tAt(k));
    logDensity[k] = grid.logDensity[k] - logNorm - tAt(k); // p(σ) = p(t)/σ
  }

  return {
    probs: [...probs],
    siteSd,
    coefficients,
    sites,
    weightDirect,
    logDensityGrid: { sigma: sigmaGrid, logDensity },
  };
}
