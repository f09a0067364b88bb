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
 * On t = log σ (density p(t | y) = p(σ² | y) · 2σ²), with the trapezoid rule on a uniform grid
 * around the mode that reaches out to where the log density has dropped by ≥ 40 on both sides.
 * For a smooth integrand decaying at both ends the trapezoid rule converges geometrically in
 * 1/h (Trefethen & Weideman 2014, "The exponentially convergent trapezoidal rule", SIAM Review
 * 56(3), §5): with h ≤ (local posterior scale)/5 and h ≤ 0.05 the error is far below 1e-10, which
 * a test checks by halving h. Partial integrals (the CDF of σ) are not covered by that argument,
 * so σ's quantiles use 4-point Gauss–Legendre on every grid interval. Quantiles of θ_i and β_j
 * invert the normal-mixture CDF by safeguarded Newton (bracketing + bisection) to 1e-10 sd.
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
import { UserError } from '../errors.js';
import { cholesky, choleskyInverse, choleskyLogDet, choleskySolve } from '../models/linalg.js';

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
  /** σ at the grid points and the normalised log density log p(σ | y) there. */
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
const MAX_SPACING = 0.05;
/** Grid spacing as a fraction of the posterior half-width of t at the mode. */
const SPACING_PER_SCALE = 1 / 5;
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
  y: Float64Array;
  psi: Float64Array;
  /** n × p, sites with data only. */
  X: Float64Array;
  /** n × np: x_ij x_il for l ≤ j, packed row by row. */
  XX: Float64Array;
  /** n × p: x_ij y_i. */
  Xy: Float64Array;
  /** Prior precision λ of each coefficient (0 for flat). */
  lambda: number;
  priorMean: number;
  prior: ScalePrior;
  // Scratch, overwritten by every evaluation: P's factor L, β̂, weights.
  packed: Float64Array;
  L: Float64Array;
  b: Float64Array;
  beta: Float64Array;
  w: Float64Array;
}

function prepareMarginal(data: AreaData, priors: AreaPriors): Marginal {
  validatePriors(priors);
  validateData(data);
  const { m, p } = data;
  let n = 0;
  for (let i = 0; i < m; i++) if (data.hasData[i]) n++;
  const np = (p * (p + 1)) / 2;
  const y = new Float64Array(n);
  const psi = new Float64Array(n);
  const X = new Float64Array(n * p);
  const XX = new Float64Array(n * np);
  const Xy = new Float64Array(n * p);
  let k = 0;
  for (let i = 0; i < m; i++) {
    if (!data.hasData[i]) continue;
    y[k] = data.direct[i];
    psi[k] = data.variance[i];
    let c = 0;
    for (let j = 0; j < p; j++) {
      const xij = data.X[i * p + j];
      X[k * p + j] = xij;
      Xy[k * p + j] = xij * y[k];
      for (let l = 0; l <= j; l++) XX[k * np + c++] = xij * data.X[i * p + l];
    }
    k++;
  }
  const coef = priors.coefficients;
  return {
    n,
    p,
    np,
    y,
    psi,
    X,
    XX,
    Xy,
    lambda: coef.kind === 'normal' ? 1 / (coef.sd * coef.sd) : 0,
    priorMean: coef.kind === 'normal' ? coef.mean : 0,
    prior: priors.site_sd,
    packed: new Float64Array(np),
    L: new Float64Array(p * p),
    b: new Float64Array(p),
    beta: new Float64Array(p),
    w: new Float64Array(n),
  };
}

/** log p(σ²) up to a constant, as a density of σ², written in t = log σ (σ² = e^{2t}). */
function logPriorVariance(prior: ScalePrior, t: number): number {
  switch (prior.kind) {
    case 'uniform':
      return -t;
    case 'half_cauchy':
      return -t - Math.log1p(Math.exp(2 * (t - Math.log(prior.scale))));
    case 'inverse_gamma':
      return -2 * (prior.shape + 1) * t - prior.scale * Math.exp(-2 * t);
  }
}

/**
 * −½ Σ log(σ² + ψ_i) − ½ log|P| − ½ Q at σ² = e^{2t}; leaves L (P = LLᵀ) and β̂ in the scratch.
 * One pass over the sites accumulates P and Xᵀ V⁻¹ y, a second forms Q from residuals (no
 * cancellation between yᵀV⁻¹y and β̂ᵀPβ̂). −Infinity if P is not positive definite.
 */
function logIntegratedLikelihood(g: Marginal, sigma2: number): number {
  const { n, p, np, psi, XX, Xy, X, y, packed, L, b, beta, w } = g;
  packed.fill(0);
  b.fill(0);
  let logDetV = 0;
  for (let i = 0; i < n; i++) {
    const v = sigma2 + psi[i];
    const wi = 1 / v;
    w[i] = wi;
    logDetV += Math.log(v);
    const o = i * np;
    for (let c = 0; c < np; c++) packed[c] += wi * XX[o + c];
    const oy = i * p;
    for (let j = 0; j < p; j++) b[j] += wi * Xy[oy + j];
  }
  let c = 0;
  for (let j = 0; j < p; j++) {
    for (let l = 0; l <= j; l++) L[j * p + l] = packed[c++];
    L[j * p + j] += g.lambda;
    b[j] += g.lambda * g.priorMean;
  }
  if (!cholesky(L, p, L)) return -Infinity;
  choleskySolve(L, p, b, beta);
  let q = 0;
  for (let i = 0; i < n; i++) {
    let r = y[i];
    const o = i * p;
    for (let j = 0; j < p; j++) r -= X[o + j] * beta[j];
    q += w[i] * r * r;
  }
  if (g.lambda > 0) {
    for (let j = 0; j < p; j++) {
      const d = beta[j] - g.priorMean;
      q += g.lambda * d * d;
    }
  }
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

interface Grid {
  t0: number;
  h: number;
  /** log p(t | y) − max at t0 + k h. */
  logDensity: Float64Array;
}

/** Golden-section maximisation of a unimodal function on [a, b]. */
function maximiseOn(f: (t: number) => number, a: number, b: number): { t: number; value: number } {
  const r = (Math.sqrt(5) - 1) / 2;
  let x1 = b - r * (b - a);
  let x2 = a + r * (b - a);
  let f1 = f(x1);
  let f2 = f(x2);
  while (b - a > 1e-9 * Math.max(1, Math.abs(a))) {
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
    let lo = Infinity;
    let hi = 0;
    let mean = 0;
    for (let i = 0; i < g.n; i++) {
      lo = Math.min(lo, g.psi[i]);
      hi = Math.max(hi, g.psi[i]);
      mean += g.y[i] / g.n;
    }
    let spread = 0;
    for (let i = 0; i < g.n; i++) spread += (g.y[i] - mean) ** 2 / g.n;
    scales.push(0.5 * Math.log(lo), 0.5 * Math.log(hi));
    if (spread > 0) scales.push(0.5 * Math.log(spread));
  }
  const s = g.prior;
  if (s.kind === 'half_cauchy') scales.push(Math.log(s.scale));
  if (s.kind === 'inverse_gamma') scales.push(0.5 * Math.log(s.scale / (s.shape + 1)));
  if (scales.length === 0) scales.push(0);
  return [Math.max(-T_LIMIT, Math.min(...scales) - 15), Math.min(T_LIMIT, Math.max(...scales) + 15)];
}

function findMode(f: (t: number) => number, window: [number, number], g: Marginal): { t: number; value: number } {
  const step = 0.25;
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

/** Distance from the mode to where the log density has dropped by ½ (≈ one sd if normal). */
function halfWidth(f: (t: number) => number, mode: number, top: number, direction: 1 | -1): number {
  let d = 1e-4;
  while (d < 2 * T_LIMIT && f(mode + direction * d) > top - 0.5) d *= 2;
  let a = d / 2;
  let b = d;
  for (let k = 0; k < 12; k++) {
    const c = 0.5 * (a + b);
    if (f(mode + direction * c) > top - 0.5) a = c;
    else b = c;
  }
  return 0.5 * (a + b);
}

/**
 * Uniform grid through the mode, out to a log-density drop of ≥ LOG_DROP on both sides; on the
 * right also until σ²·density has dropped as far (or 60 units past the mode, where the power-law
 * tail correction takes over), so second moments are covered.
 */
function buildGrid(f: (t: number) => number, mode: number, top: number, h: number, kappa: number, g: Marginal): Grid {
  const right: number[] = [];
  for (let k = 1; ; k++) {
    const t = mode + k * h;
    if (t > T_LIMIT || right.length > MAX_GRID_POINTS) throw heavyTailError(g);
    const v = f(t) - top;
    right.push(v);
    const done = v < -LOG_DROP && (kappa <= 2 || v + 2 * (t - mode) < -LOG_DROP || t - mode > 60);
    if (done) break;
  }
  const left: number[] = [];
  for (let k = 1; ; k++) {
    const t = mode - k * h;
    if (t < -T_LIMIT || left.length > MAX_GRID_POINTS) throw heavyTailError(g);
    const v = f(t) - top;
    left.push(v);
    if (v < -LOG_DROP) break;
  }
  const logDensity = new Float64Array(left.length + 1 + right.length);
  for (let k = 0; k < left.length; k++) logDensity[left.length - 1 - k] = left[k];
  logDensity[left.length] = 0;
  for (let k = 0; k < right.length; k++) logDensity[left.length + 1 + k] = right[k];
  return { t0: mode - left.length * h, h, logDensity };
}

/** Largest h²|ℓ''| over grid points that carry mass: small means the grid resolves the shape. */
function roughness(grid: Grid): number {
  const v = grid.logDensity;
  let worst = 0;
  for (let k = 1; k + 1 < v.length; k++) {
    if (v[k] < -25) continue;
    worst = Math.max(worst, Math.abs(v[k + 1] - 2 * v[k] + v[k - 1]));
  }
  return worst;
}

// ---------------------------------------------------------------------------------------------
// Normal distribution function and mixtures

/**
 * Standard normal distribution function Φ(x), accurate to about 1e-15 relative in both tails.
 * W. J. Cody's rational Chebyshev approximations (Cody 1969, Math. Comp. 23, 631–637; as
 * packaged in Cody 1993, ACM TOMS 19(1), Algorithm 715 — coefficients recalled, verified in the
 * tests against an independent series/continued-fraction evaluation).
 */
export function normalCdf(x: number): number {
  const y = Math.abs(x);
  if (y <= 0.67448975) {
    const xsq = x * x;
    let num = 0.065682337918207449113 * xsq;
    let den = xsq;
    num = (num + 2.2352520354606839287) * xsq;
    den = (den + 47.20258190468824187) * xsq;
    num = (num + 161.02823106855587881) * xsq;
    den = (den + 976.09855173777669322) * xsq;
    num = (num + 1067.6894854603709582) * xsq;
    den = (den + 10260.932208618978205) * xsq;
    return 0.5 + (x * (num + 18154.981253343561249)) / (den + 45507.789335026729956);
  }
  let tail: number;
  if (y <= 5.656854249492380195206754896838) {
    let num = 1.0765576773720192317e-8 * y;
    let den = y;
    num = (num + 0.39894151208813466764) * y;
    den = (den + 22.266688044328115691) * y;
    num = (num + 8.8831497943883759412) * y;
    den = (den + 235.38790178262499861) * y;
    num = (num + 93.506656132177855979) * y;
    den = (den + 1519.377599407554805) * y;
    num = (num + 597.27027639480026226) * y;
    den = (den + 6485.558298266760755) * y;
    num = (num + 2494.5375852903726711) * y;
    den = (den + 18615.571640885098091) * y;
    num = (num + 6848.1904505362823326) * y;
    den = (den + 34900.952721145977266) * y;
    num = (num + 11602.651437647350124) * y;
    den = (den + 38912.003286093271411) * y;
    tail = (num + 9842.7148383839780218) / (den + 19685.429676859990727);
  } else if (y < 38.5) {
    const xsq = 1 / (x * x);
    let num = 0.02307344176494017303 * xsq;
    let den = xsq;
    num = (num + 0.21589853405795699) * xsq;
    den = (den + 1.28426009614491121) * xsq;
    num = (num + 0.1274011611602473639) * xsq;
    den = (den + 0.468238212480865118) * xsq;
    num = (num + 0.022235277870649807) * xsq;
    den = (den + 0.0659881378689285515) * xsq;
    num = (num + 0.001421619193227893466) * xsq;
    den = (den + 0.00378239633202758244) * xsq;
    tail = (0.398942280401432677939946059934 - (xsq * (num + 2.9112874951168792e-5)) / (den + 7.29751555083966205e-5)) / y;
  } else {
    return x > 0 ? 1 : 0;
  }
  // exp(−y²/2) split so that the large part is exact in floating point (Cody's device).
  const ys = Math.trunc(y * 16) / 16;
  const del = (y - ys) * (y + ys);
  const upper = Math.exp(-ys * ys * 0.5) * Math.exp(-del * 0.5) * tail;
  return x > 0 ? 1 - upper : upper;
}

const INV_SQRT_2PI = 0.398942280401432677939946059934;

/**
 * The q-quantile of Σ_k w_k N(μ_k, s_k²) (w summing to 1) by Newton's method on the CDF, kept
 * inside a bracket that tightens at every step and falls back to bisection (or to doubling
 * steps while the bracket is still open), until the step is below 1e-10 · scale.
 */
function mixtureQuantile(
  q: number,
  start: number,
  scale: number,
  count: number,
  w: Float64Array,
  mu: Float64Array,
  sd: Float64Array,
): number {
  const tol = QUANTILE_TOLERANCE * scale;
  let lo = -Infinity;
  let hi = Infinity;
  let x = start;
  let expand = 2 * scale;
  for (let iter = 0; iter < 300; iter++) {
    let cdf = 0;
    let pdf = 0;
    for (let k = 0; k < count; k++) {
      const s = sd[k];
      const z = (x - mu[k]) / s;
      cdf += w[k] * normalCdf(z);
      pdf += (w[k] * Math.exp(-0.5 * z * z)) / s;
    }
    pdf *= INV_SQRT_2PI;
    const diff = cdf - q;
    if (diff === 0) return x;
    if (diff < 0) lo = x;
    else hi = x;
    let next = x - diff / pdf;
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

/** Mean, sd and quantiles of a normal mixture whose components are in (w, mu, sd). */
function summariseMixture(
  count: number,
  w: Float64Array,
  mu: Float64Array,
  sd: Float64Array,
  probs: readonly number[],
  zs: readonly number[],
  tailSecondMoment: number,
): ExactSummary {
  let mean = 0;
  for (let k = 0; k < count; k++) mean += w[k] * mu[k];
  let second = 0;
  for (let k = 0; k < count; k++) {
    const d = mu[k] - mean;
    second += w[k] * (sd[k] * sd[k] + d * d);
  }
  const gridSd = Math.sqrt(second);
  const quantiles = probs.map((q, j) => mixtureQuantile(q, mean + gridSd * zs[j], gridSd, count, w, mu, sd));
  return { mean, sd: Math.sqrt(second + tailSecondMoment), quantiles };
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

  // Mode, scale and grid of t = log σ.
  const f = (t: number) => logPosteriorLogSigma(g, t);
  const mode = findMode(f, scanWindow(g), g);
  const top = mode.value;
  const scale = Math.min(halfWidth(f, mode.t, top, -1), halfWidth(f, mode.t, top, 1));
  let h = Math.min(MAX_SPACING, SPACING_PER_SCALE * scale) * spacingFactor;
  let grid = buildGrid(f, mode.t, top, h, kappa, g);
  for (let refine = 0; refine < 8 && roughness(grid) > 1 / 16; refine++) {
    h /= 2;
    grid = buildGrid(f, mode.t, top, h, kappa, g);
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
  const tailSigma2 = kappa > 2 ? (densityEnd * Math.exp(2 * tEnd)) / (kappa - 2) : Infinity;

  // σ_u
  let meanSigma = 0;
  let meanSigma2 = 0;
  for (let k = 0; k < G; k++) {
    meanSigma += weight[k] * Math.exp(tAt(k));
    meanSigma2 += weight[k] * Math.exp(2 * tAt(k));
  }
  if (kappa > 1) meanSigma += (densityEnd * Math.exp(tEnd)) / (kappa - 1);
  else meanSigma = Infinity;
  meanSigma2 += tailSigma2;
  const siteSd: ExactSummary = {
    mean: meanSigma,
    sd: Number.isFinite(meanSigma2) ? Math.sqrt(Math.max(0, meanSigma2 - meanSigma * meanSigma)) : Infinity,
    quantiles: logSigmaQuantiles((t) => f(t) - top, grid, probs).map(Math.exp),
  };

  // The conditional moments at every grid point that carries mass.
  let maxWeight = 0;
  for (let k = 0; k < G; k++) maxWeight = Math.max(maxWeight, weight[k]);
  const active: number[] = [];
  for (let k = 0; k < G; k++) if (weight[k] > PRUNE_RELATIVE_WEIGHT * maxWeight) active.push(k);
  const K = active.length;
  const w = new Float64Array(K);
  const sigma2 = new Float64Array(K);
  const factors = new Float64Array(K * p * p);
  const betas = new Float64Array(K * p);
  const betaVar = new Float64Array(K * p);
  const inverse = new Float64Array(p * p);
  let wSum = 0;
  for (let a = 0; a < K; a++) {
    const k = active[a];
    w[a] = weight[k];
    wSum += w[a];
    sigma2[a] = Math.exp(2 * tAt(k));
    logIntegratedLikelihood(g, sigma2[a]);
    factors.set(g.L, a * p * p);
    betas.set(g.beta, a * p);
    choleskyInverse(g.L, p, inverse);
    for (let j = 0; j < p; j++) betaVar[a * p + j] = inverse[j * p + j];
  }
  for (let a = 0; a < K; a++) w[a] /= wSum;
  // Var(β_j | σ²) grows like σ² under a flat prior: its tail past the grid, as for σ².
  logIntegratedLikelihood(g, Math.exp(2 * tEnd));
  choleskyInverse(g.L, p, inverse);
  const endBetaVar = Array.from({ length: p }, (_, j) => inverse[j * p + j]);

  const zs = probs.map((q) => normalQuantile(q));
  const mu = new Float64Array(K);
  const sd = new Float64Array(K);

  const coefficients: ExactSummary[] = [];
  for (let j = 0; j < p; j++) {
    for (let a = 0; a < K; a++) {
      mu[a] = betas[a * p + j];
      sd[a] = Math.sqrt(betaVar[a * p + j]);
    }
    const flat = g.lambda === 0;
    const tail = flat ? (kappa > 2 ? (densityEnd * endBetaVar[j]) / (kappa - 2) : Infinity) : 0;
    coefficients.push(summariseMixture(K, w, mu, sd, probs, zs, tail));
  }

  const sites: ExactSummary[] = [];
  const weightDirect = new Float64Array(m);
  const x = new Float64Array(p);
  const z = new Float64Array(p);
  for (let i = 0; i < m; i++) {
    for (let j = 0; j < p; j++) x[j] = data.X[i * p + j];
    const sampled = data.hasData[i] === 1;
    const yi = data.direct[i];
    const psi = data.variance[i];
    let gammaMean = 0;
    for (let a = 0; a < K; a++) {
      const o = a * p * p;
      const ob = a * p;
      let eta = 0;
      let leverage = 0; // x_iᵀ P⁻¹ x_i = ‖L⁻¹ x_i‖²
      for (let r = 0; r < p; r++) {
        eta += x[r] * betas[ob + r];
        let s = x[r];
        for (let c = 0; c < r; c++) s -= factors[o + r * p + c] * z[c];
        z[r] = s / factors[o + r * p + r];
        leverage += z[r] * z[r];
      }
      if (sampled) {
        const gamma = sigma2[a] / (sigma2[a] + psi);
        const shrink = 1 - gamma;
        mu[a] = gamma * yi + shrink * eta;
        sd[a] = Math.sqrt(gamma * psi + shrink * shrink * leverage);
        gammaMean += w[a] * gamma;
      } else {
        mu[a] = eta;
        sd[a] = Math.sqrt(sigma2[a] + leverage);
      }
    }
    weightDirect[i] = sampled ? gammaMean : 0;
    sites.push(summariseMixture(K, w, mu, sd, probs, zs, sampled ? 0 : tailSigma2));
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
