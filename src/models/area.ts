/**
 * The area-level model (Fay & Herriot 1979) and its Gibbs samplers.
 *
 *   y_i = θ_i + e_i,  e_i ~ N(0, ψ_i), ψ_i known          (sites with a sample)
 *   θ_i = x_iᵀβ + u_i, u_i ~ N(0, σ²)                     (every site)
 *   β ~ fixed prior (flat or normal), σ ~ hyperprior (uniform on σ, half-Cauchy, inverse-gamma on σ²)
 *
 * Two samplers share the quantities they record (β, σ, every θ_i):
 *
 * - `collapsed` (default). σ is drawn from its marginal posterior p(σ | y), with β and θ
 *   integrated out analytically, by univariate slice sampling (Neal 2003, "Slice sampling",
 *   Annals of Statistics 31(3), stepping-out and shrinkage) on log σ or on σ itself, whichever
 *   moved farther during warmup (σ suits posteriors reaching down to zero, log σ the others). Then β | σ, y and
 *   θ | β, σ, y are drawn exactly. Because β and θ are never conditioned on in the σ update, the
 *   chain does not stall when σ is near zero — the corner where plain Gibbs mixes slowly
 *   (Gelman 2006, Bayesian Analysis 1(3); Yu & Meng 2011, JCGS 20(3)) — and each sweep is a
 *   near-independent draw.
 * - `plain`. The textbook three-block Gibbs sampler θ | β,σ; β | θ,σ; σ² | θ,β, with the
 *   half-Cauchy prior handled by the inverse-gamma mixture of Huang & Wand (2013, Bayesian
 *   Analysis 8(2)); kept to show, in the benchmark, why the collapsed sampler is the default.
 *
 * Marginal of σ² (β integrated out; V = diag(σ² + ψ_i), prior β ~ N(b0, S) or flat with S⁻¹ = 0):
 *   log p(σ² | y) = log p(σ²) − ½ Σ log(σ² + ψ_i) − ½ log|P| − ½ (c − bᵀP⁻¹b) + const,
 *   P = XᵀV⁻¹X + S⁻¹,  b = XᵀV⁻¹y + S⁻¹b0,  c = yᵀV⁻¹y + b0ᵀS⁻¹b0
 * (Gelman et al. 2013, Bayesian Data Analysis 3rd ed., §5.4 eqs. 5.17–5.21 for the
 * intercept-only case; the same Gaussian integral with a general design).
 */
import type { CoefficientPrior, ScalePrior } from '../config/types.js';
import type { AreaData } from '../data/types.js';
import type { Kernel, Phase } from '../sampler/kernel.js';
import type { Rng } from '../sampler/rng.js';
import { gamma, inverseGamma, normal } from '../sampler/variates.js';
import { choleskyLower, solveLowerInPlace, solveUpperTransposedInPlace } from './linalg.js';

export type AreaSamplerMethod = 'collapsed' | 'plain';

export interface AreaModelSpec {
  data: AreaData;
  coefficients: CoefficientPrior;
  siteSd: ScalePrior;
  method: AreaSamplerMethod;
}

/** Monitored quantity names, in recording order: coefficients, site_sd, then every site. */
export function areaQuantities(data: AreaData): string[] {
  return [
    ...data.coefficientNames.map((name) => `coef:${name}`),
    'site_sd',
    ...data.siteIds.map((id) => `site:${id}`),
  ];
}

/** The sampled sites packed contiguously, so hot loops touch no unsampled rows. */
interface Packed {
  p: number;
  /** Number of sampled sites. */
  n: number;
  X: Float64Array; // n × p
  y: Float64Array;
  psi: Float64Array;
  /**
   * Per sampled site, the terms of the marginal's sufficient statistics, one row of `width`:
   * the lower triangle of x xᵀ (p(p+1)/2 values), then x·y (p values), then y². The marginal
   * of σ² is then one weighted sum of these rows.
   */
  terms: Float64Array;
  width: number;
  /** Position of each sampled site among all sites. */
  index: Int32Array;
  /** Prior precision on each coefficient (0 for flat) and precision × mean. */
  priorPrecision: number;
  priorPrecisionMean: number;
  /** b0ᵀS⁻¹b0 summed over coefficients. */
  priorQuad: number;
}

function outerProductTerms(X: Float64Array, y: Float64Array, n: number, p: number): Float64Array {
  const width = (p * (p + 1)) / 2 + p + 1;
  const terms = new Float64Array(n * width);
  for (let k = 0; k < n; k++) {
    let c = k * width;
    const row = k * p;
    for (let j = 0; j < p; j++) for (let l = 0; l <= j; l++) terms[c++] = X[row + j] * X[row + l];
    for (let j = 0; j < p; j++) terms[c++] = X[row + j] * y[k];
    terms[c] = y[k] * y[k];
  }
  return terms;
}

function pack(spec: AreaModelSpec): Packed {
  const { data } = spec;
  const { p } = data;
  const index: number[] = [];
  for (let i = 0; i < data.m; i++) if (data.hasData[i]) index.push(i);
  const n = index.length;
  const X = new Float64Array(n * p);
  const y = new Float64Array(n);
  const psi = new Float64Array(n);
  index.forEach((site, k) => {
    X.set(data.X.subarray(site * p, site * p + p), k * p);
    y[k] = data.direct[site];
    psi[k] = data.variance[site];
  });
  const prior = spec.coefficients;
  const precision = prior.kind === 'normal' ? 1 / (prior.sd * prior.sd) : 0;
  const mean = prior.kind === 'normal' ? prior.mean : 0;
  return {
    p,
    n,
    X,
    y,
    psi,
    terms: outerProductTerms(X, y, n, p),
    width: (p * (p + 1)) / 2 + p + 1,
    index: Int32Array.from(index),
    priorPrecision: precision,
    priorPrecisionMean: precision * mean,
    priorQuad: p * precision * mean * mean,
  };
}

/**
 * Log prior density of t = log σ (Jacobian included), up to a constant.
 * uniform on σ: p(t) ∝ σ; half-Cauchy(A): ∝ σ / (1 + (σ/A)²); inverse-gamma(a, b) on σ²:
 * p(σ²)·dσ²/dt ∝ (σ²)^(−a) e^(−b/σ²).
 */
export function logPriorLogSigma(t: number, prior: ScalePrior): number {
  switch (prior.kind) {
    case 'uniform':
      return t;
    case 'half_cauchy': {
      const r = Math.exp(t) / prior.scale;
      return t - Math.log1p(r * r);
    }
    case 'inverse_gamma':
      return -2 * prior.shape * t - prior.scale * Math.exp(-2 * t);
  }
}

/** Work buffers for the marginal of σ², reused across evaluations. */
interface MarginalWork {
  sums: Float64Array; // weighted sums of the packed terms
  P: Float64Array; // p × p, then its Cholesky factor (lower)
  v: Float64Array; // b, then L⁻¹b
}

function createMarginalWork(d: Packed): MarginalWork {
  return { sums: new Float64Array(d.width), P: new Float64Array(d.p * d.p), v: new Float64Array(d.p) };
}

/** Sites whose variances are multiplied together before one logarithm (keeps products in range). */
const LOG_BLOCK = 8;

/**
 * log p(t = log σ | y) up to a constant, leaving the Cholesky factor of P and L⁻¹b in `work`
 * so the caller can draw β at the same σ without another pass over the sites.
 */
function logMarginalLogSigma(t: number, d: Packed, prior: ScalePrior, work: MarginalWork): number {
  const { p, n, psi, terms, width } = d;
  const s2 = Math.exp(2 * t);
  const sums = work.sums;
  sums.fill(0);
  let logDetV = 0;
  let product = 1;
  for (let k = 0; k < n; k++) {
    const varTotal = s2 + psi[k];
    const w = 1 / varTotal;
    product *= varTotal;
    if ((k + 1) % LOG_BLOCK === 0) {
      logDetV += Math.log(product);
      product = 1;
    }
    const row = k * width;
    for (let c = 0; c < width; c++) sums[c] += w * terms[row + c];
  }
  logDetV += Math.log(product);
  const { P, v: b } = work;
  let c = 0;
  for (let j = 0; j < p; j++) for (let l = 0; l <= j; l++) P[j * p + l] = sums[c++];
  for (let j = 0; j < p; j++) b[j] = sums[c++];
  const ywy = sums[c];
  for (let j = 0; j < p; j++) {
    P[j * p + j] += d.priorPrecision;
    b[j] += d.priorPrecisionMean;
  }
  const logDetP = choleskyLower(P, p);
  if (!Number.isFinite(logDetP)) return -Infinity;
  solveLowerInPlace(P, p, b);
  let bPb = 0;
  for (let j = 0; j < p; j++) bPb += b[j] * b[j];
  const quad = ywy + d.priorQuad - bPb;
  return -0.5 * (logDetV + logDetP + quad) + logPriorLogSigma(t, prior);
}

// ---------------------------------------------------------------------------------------------
// Collapsed sampler

export type SliceScale = 'log' | 'linear';

export interface CollapsedState {
  /** Current σ_u. */
  sigma: number;
  /** Log density of t = log σ at the current point (on σ itself it is this minus t). */
  logTarget: number;
  /** Scale used after warmup: log σ, or σ itself when that mixes better (mass near zero). */
  scale: SliceScale;
  /** Slice widths on each scale, tuned during warmup. */
  widthLog: number;
  widthLinear: number;
  beta: Float64Array;
  theta: Float64Array;
  work: MarginalWork;
  /**
   * Warmup window statistics: [count, Σσ, Σσ², Σlogσ, Σ(logσ)², and per scale the summed
   * squared jump of log σ and the number of updates on it].
   */
  tune: Float64Array;
}

const STEP_OUT_LIMIT = 32;

/** Draws that tune the slice during warmup: after 25, 50, 100, 200, … iterations. */
function isTuningPoint(iteration: number): boolean {
  const k = (iteration + 1) / 25;
  return Number.isInteger(k) && (k & (k - 1)) === 0;
}

/**
 * Log density of σ_u's marginal posterior on a slice scale: on log σ it is the density of
 * t = log σ; on σ itself the Jacobian e^t is removed, and σ ≤ 0 is outside the support.
 */
function logTargetOnScale(x: number, scale: SliceScale, d: Packed, prior: ScalePrior, work: MarginalWork): number {
  if (scale === 'log') return logMarginalLogSigma(x, d, prior, work);
  if (!(x > 0)) return -Infinity;
  const t = Math.log(x);
  return logMarginalLogSigma(t, d, prior, work) - t;
}

/**
 * One slice-sampling update of σ_u on the given scale (Neal 2003, fig. 3 stepping-out, fig. 5
 * shrinkage). Each scale's update leaves the posterior invariant, so warmup may alternate them.
 */
function sliceUpdateSigma(state: CollapsedState, scale: SliceScale, d: Packed, prior: ScalePrior, rng: Rng): void {
  const { work } = state;
  const t0 = Math.log(state.sigma);
  const x0 = scale === 'log' ? t0 : state.sigma;
  const current = scale === 'log' ? state.logTarget : state.logTarget - t0;
  const target = (x: number): number => logTargetOnScale(x, scale, d, prior, work);
  const level = current + Math.log(rng.uniform()); // log of a uniform height under the density
  const w = scale === 'log' ? state.widthLog : state.widthLinear;
  let lo = x0 - w * rng.uniform();
  let hi = lo + w;
  let leftSteps = Math.floor(STEP_OUT_LIMIT * rng.uniform());
  let rightSteps = STEP_OUT_LIMIT - 1 - leftSteps;
  while (leftSteps > 0 && target(lo) > level) {
    lo -= w;
    leftSteps--;
  }
  while (rightSteps > 0 && target(hi) > level) {
    hi += w;
    rightSteps--;
  }
  for (;;) {
    const x1 = lo + (hi - lo) * rng.uniform();
    const value = target(x1);
    if (value > level) {
      state.sigma = scale === 'log' ? Math.exp(x1) : x1;
      state.logTarget = scale === 'log' ? value : value + Math.log(x1);
      return; // the work buffers now hold P's factor and L⁻¹b at the accepted σ
    }
    if (x1 < x0) lo = x1;
    else hi = x1;
  }
}

/** β | σ, y ~ N(P⁻¹b, P⁻¹), from the factor L (P = LLᵀ) and v = L⁻¹b left in the work buffers. */
function drawBetaFromFactor(state: CollapsedState, p: number, rng: Rng): void {
  const { beta, work } = state;
  for (let j = 0; j < p; j++) beta[j] = work.v[j] + normal(rng);
  solveUpperTransposedInPlace(work.P, p, beta);
}

function linearPredictor(X: Float64Array, p: number, site: number, beta: Float64Array): number {
  let eta = 0;
  const row = site * p;
  for (let j = 0; j < p; j++) eta += X[row + j] * beta[j];
  return eta;
}

/** θ_i | β, σ, y: precision-weighted for sampled sites, synthetic (prior) for the others. */
function drawTheta(
  theta: Float64Array,
  data: AreaData,
  beta: Float64Array,
  sigma2: number,
  rng: Rng,
): void {
  const { X, p, direct, variance, hasData } = data;
  const sigma = Math.sqrt(sigma2);
  for (let i = 0; i < data.m; i++) {
    const eta = linearPredictor(X, p, i, beta);
    if (hasData[i]) {
      const gamma_i = sigma2 / (sigma2 + variance[i]);
      const mean = eta + gamma_i * (direct[i] - eta);
      theta[i] = mean + Math.sqrt(gamma_i * variance[i]) * normal(rng);
    } else {
      theta[i] = eta + sigma * normal(rng);
    }
  }
}

/** A dispersed starting σ from the data: the excess spread of the direct estimates, jittered. */
function startingLogSigma(d: Packed, rng: Rng): number {
  let mean = 0;
  for (let k = 0; k < d.n; k++) mean += d.y[k];
  mean /= d.n;
  let spread = 0;
  let psiMean = 0;
  for (let k = 0; k < d.n; k++) {
    spread += (d.y[k] - mean) ** 2;
    psiMean += d.psi[k];
  }
  spread /= Math.max(d.n - 1, 1);
  psiMean /= d.n;
  const excess = Math.max(spread - psiMean, 0.05 * spread, 1e-12);
  return 0.5 * Math.log(excess) + normal(rng);
}

/** Warmup alternates the two slice scales; sampling keeps the one that moved log σ farther. */
function scaleForSweep(state: CollapsedState, phase: Phase, iteration: number): SliceScale {
  if (phase === 'sampling') return state.scale;
  return iteration % 2 === 0 ? 'log' : 'linear';
}

/**
 * Warmup tuning from the window of sweeps since the last tuning point: a width of about three
 * posterior sds on each scale, and the scale with the larger mean squared jump of log σ (the
 * usual efficiency proxy for a one-dimensional update). Log σ suits posteriors away from zero;
 * σ itself suits posteriors that reach down to zero, where log σ has a long left tail.
 */
function tuneSlice(state: CollapsedState, scale: SliceScale, previousSigma: number, phase: Phase, iteration: number): void {
  if (phase !== 'warmup') return;
  const t = state.tune;
  const logSigma = Math.log(state.sigma);
  t[0] += 1;
  t[1] += state.sigma;
  t[2] += state.sigma * state.sigma;
  t[3] += logSigma;
  t[4] += logSigma * logSigma;
  const jump = (logSigma - Math.log(previousSigma)) ** 2;
  if (scale === 'log') {
    t[5] += jump;
    t[6] += 1;
  } else {
    t[7] += jump;
    t[8] += 1;
  }
  if (!isTuningPoint(iteration) || t[0] < 20) return;
  const sd = (sum: number, sumSq: number) => Math.sqrt(Math.max(sumSq - (sum * sum) / t[0], 0) / (t[0] - 1));
  const widthLinear = 3 * sd(t[1], t[2]);
  const widthLog = 3 * sd(t[3], t[4]);
  if (widthLinear > 0) state.widthLinear = widthLinear;
  if (widthLog > 0) state.widthLog = widthLog;
  state.scale = t[7] / Math.max(t[8], 1) > t[5] / Math.max(t[6], 1) ? 'linear' : 'log';
  t.fill(0);
}

export function collapsedAreaKernel(spec: AreaModelSpec): Kernel<CollapsedState> {
  const d = pack(spec);
  const { data, siteSd } = spec;
  const { p } = data;
  return {
    quantities: areaQuantities(data),
    init(rng) {
      const work = createMarginalWork(d);
      const logSigma = startingLogSigma(d, rng);
      const sigma = Math.exp(logSigma);
      return {
        sigma,
        logTarget: logMarginalLogSigma(logSigma, d, siteSd, work),
        scale: 'log',
        widthLog: 1,
        widthLinear: sigma,
        beta: new Float64Array(p),
        theta: new Float64Array(data.m),
        work,
        tune: new Float64Array(9),
      };
    },
    step(state, rng, phase, iteration) {
      const scale = scaleForSweep(state, phase, iteration);
      const previousSigma = state.sigma;
      sliceUpdateSigma(state, scale, d, siteSd, rng);
      drawBetaFromFactor(state, p, rng);
      drawTheta(state.theta, data, state.beta, state.sigma * state.sigma, rng);
      tuneSlice(state, scale, previousSigma, phase, iteration);
      return state;
    },
    record(state, out, stride, offset) {
      recordQuantities(state.beta, state.sigma, state.theta, out, stride, offset);
    },
  };
}

function recordQuantities(
  beta: Float64Array,
  sigma: number,
  theta: Float64Array,
  out: Float64Array,
  stride: number,
  offset: number,
): void {
  let q = 0;
  for (let j = 0; j < beta.length; j++) out[q++ * stride + offset] = beta[j];
  out[q++ * stride + offset] = sigma;
  for (let i = 0; i < theta.length; i++) out[q++ * stride + offset] = theta[i];
}

// ---------------------------------------------------------------------------------------------
// Plain Gibbs sampler (for comparison)

export interface PlainState {
  beta: Float64Array;
  theta: Float64Array;
  sigma2: number;
  /** Huang & Wand auxiliary variable (half-Cauchy prior only). */
  aux: number;
  P: Float64Array;
  b: Float64Array;
}

/** σ² | θ, β (and the auxiliary variable), conjugate for each hyperprior. */
function drawSigma2Plain(state: PlainState, sumSquares: number, m: number, prior: ScalePrior, rng: Rng): void {
  switch (prior.kind) {
    case 'uniform': // p(σ²) ∝ (σ²)^(−1/2)
      state.sigma2 = inverseGamma(rng, (m - 1) / 2, sumSquares / 2);
      return;
    case 'inverse_gamma':
      state.sigma2 = inverseGamma(rng, prior.shape + m / 2, prior.scale + sumSquares / 2);
      return;
    case 'half_cauchy': {
      // σ² | a ~ IG(1/2, 1/a), a ~ IG(1/2, 1/A²) gives σ ~ half-Cauchy(A) (Huang & Wand 2013).
      state.sigma2 = inverseGamma(rng, (1 + m) / 2, 1 / state.aux + sumSquares / 2);
      state.aux = inverseGamma(rng, 1, 1 / state.sigma2 + 1 / (prior.scale * prior.scale));
      return;
    }
  }
}

export function plainAreaKernel(spec: AreaModelSpec): Kernel<PlainState> {
  const d = pack(spec);
  const { data, siteSd } = spec;
  const { p, m, X } = data;
  const xtx = new Float64Array(p * p);
  for (let i = 0; i < m; i++)
    for (let j = 0; j < p; j++)
      for (let l = 0; l <= j; l++) xtx[j * p + l] += X[i * p + j] * X[i * p + l];
  return {
    quantities: areaQuantities(data),
    init(rng) {
      const sigma2 = Math.exp(2 * startingLogSigma(d, rng));
      const state: PlainState = {
        beta: new Float64Array(p),
        theta: new Float64Array(m),
        sigma2,
        aux: 1 / gamma(rng, 0.5),
        P: new Float64Array(p * p),
        b: new Float64Array(p),
      };
      for (let i = 0; i < m; i++) state.theta[i] = data.hasData[i] ? data.direct[i] : d.y[0];
      return state;
    },
    step(state, rng) {
      // β | θ, σ²: regression of θ on X with variance σ².
      const { P, b, beta, theta } = state;
      for (let j = 0; j < p * p; j++) P[j] = xtx[j] / state.sigma2;
      b.fill(0);
      for (let i = 0; i < m; i++) for (let j = 0; j < p; j++) b[j] += (X[i * p + j] * theta[i]) / state.sigma2;
      for (let j = 0; j < p; j++) {
        P[j * p + j] += d.priorPrecision;
        b[j] += d.priorPrecisionMean;
      }
      choleskyLower(P, p);
      solveLowerInPlace(P, p, b);
      for (let j = 0; j < p; j++) beta[j] = b[j] + normal(rng);
      solveUpperTransposedInPlace(P, p, beta);
      // σ² | θ, β
      let sumSquares = 0;
      for (let i = 0; i < m; i++) sumSquares += (theta[i] - linearPredictor(X, p, i, beta)) ** 2;
      drawSigma2Plain(state, sumSquares, m, siteSd, rng);
      // θ | β, σ², y
      drawTheta(theta, data, beta, state.sigma2, rng);
      return state;
    },
    record(state, out, stride, offset) {
      recordQuantities(state.beta, Math.sqrt(state.sigma2), state.theta, out, stride, offset);
    },
  };
}

export function areaKernel(spec: AreaModelSpec): Kernel<CollapsedState> | Kernel<PlainState> {
  return spec.method === 'plain' ? plainAreaKernel(spec) : collapsedAreaKernel(spec);
}
