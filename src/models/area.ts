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
 *   integrated out analytically. Three updates leave that marginal invariant: univariate slice
 *   sampling (Neal 2003, "Slice sampling", Annals of Statistics 31(3), stepping-out and
 *   shrinkage) on log σ or on σ itself, and an independence Metropolis–Hastings step with a
 *   Student-t proposal fitted in warmup. Warmup tries them in turn and sampling keeps the one
 *   that moved σ farthest per evaluation of the marginal (one pass over the sites each). Then β | σ, y and
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
import {
  independenceScaleUpdate,
  PROPOSAL_INFLATION,
  sliceScaleUpdate,
  type SliceScale,
} from '../sampler/scale-updates.js';

export type { SliceScale };
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

/**
 * The sampled sites packed contiguously, so hot loops touch no unsampled rows. Exported for the
 * counts model (src/models/counts.ts), which refills `y` and `psi` with its Pólya–Gamma pseudo-data
 * every sweep and then calls {@link refreshResponseTerms}.
 */
export interface Packed {
  p: number;
  /** Number of sampled sites, and of all sites. */
  n: number;
  m: number;
  X: Float64Array; // n × p
  y: Float64Array;
  psi: Float64Array;
  /**
   * The terms of the marginal's sufficient statistics, stored term-major (`width` columns of n
   * sites each): the lower triangle of x xᵀ (p(p+1)/2 terms), then x·y (p terms), then y². The
   * marginal of σ² needs their weighted sums, i.e. `width` dot products with the weights, which
   * run as tight loops with one accumulator each.
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
  /**
   * Work of a sweep outside the σ_u update and the β, θ draws, in units of one site's share of
   * one pass (0 for the area model; the counts model's Pólya–Gamma draws): only the warmup's
   * choice of σ_u update uses it.
   */
  extraSweepCost: number;
}

function outerProductTerms(X: Float64Array, y: Float64Array, n: number, p: number): Float64Array {
  const width = (p * (p + 1)) / 2 + p + 1;
  const terms = new Float64Array(n * width);
  for (let k = 0; k < n; k++) {
    let c = 0;
    const row = k * p;
    for (let j = 0; j < p; j++) for (let l = 0; l <= j; l++) terms[c++ * n + k] = X[row + j] * X[row + l];
    for (let j = 0; j < p; j++) terms[c++ * n + k] = X[row + j] * y[k];
    terms[c * n + k] = y[k] * y[k];
  }
  return terms;
}

function pack(spec: AreaModelSpec): Packed {
  return packSites(spec.data, spec.coefficients);
}

/** Packs the sites with data (`hasData`) of `data`, with the prior on β, for the collapsed updates. */
export function packSites(data: AreaData, coefficients: CoefficientPrior): Packed {
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
  const prior = coefficients;
  const precision = prior.kind === 'normal' ? 1 / (prior.sd * prior.sd) : 0;
  const mean = prior.kind === 'normal' ? prior.mean : 0;
  return {
    p,
    n,
    m: data.m,
    X,
    y,
    psi,
    terms: outerProductTerms(X, y, n, p),
    width: (p * (p + 1)) / 2 + p + 1,
    index: Int32Array.from(index),
    priorPrecision: precision,
    priorPrecisionMean: precision * mean,
    priorQuad: p * precision * mean * mean,
    extraSweepCost: 0,
  };
}

/**
 * Recomputes the response columns of `d.terms` (x·y and y²) after the caller has overwritten
 * `d.y` (and `d.psi`); the x xᵀ columns do not depend on the response and are kept.
 */
export function refreshResponseTerms(d: Packed): void {
  const { n, p, X, y, terms } = d;
  const first = (p * (p + 1)) / 2;
  for (let j = 0; j < p; j++) {
    const base = (first + j) * n;
    for (let k = 0; k < n; k++) terms[base + k] = X[k * p + j] * y[k];
  }
  const base = (first + p) * n;
  for (let k = 0; k < n; k++) terms[base + k] = y[k] * y[k];
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
  weights: Float64Array; // 1 / (σ² + ψ_k) per sampled site
  sums: Float64Array; // weighted sums of the packed terms
  P: Float64Array; // p × p, then its Cholesky factor (lower)
  v: Float64Array; // b, then L⁻¹b
}

function createMarginalWork(d: Packed): MarginalWork {
  return {
    weights: new Float64Array(d.n),
    sums: new Float64Array(d.width),
    P: new Float64Array(d.p * d.p),
    v: new Float64Array(d.p),
  };
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
  const { sums, weights } = work;
  let logDetV = 0;
  let product = 1;
  for (let k = 0; k < n; k++) {
    const varTotal = s2 + psi[k];
    weights[k] = 1 / varTotal;
    product *= varTotal;
    if ((k + 1) % LOG_BLOCK === 0) {
      logDetV += Math.log(product);
      product = 1;
    }
  }
  logDetV += Math.log(product);
  for (let c = 0; c < width; c++) {
    const base = c * n;
    let acc = 0;
    for (let k = 0; k < n; k++) acc += weights[k] * terms[base + k];
    sums[c] = acc;
  }
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


/**
 * The σ_u updates the collapsed sampler can use; each leaves p(σ_u | y) invariant, so warmup
 * may try them in turn and keep the most efficient one for sampling.
 */
export const SIGMA_UPDATES = ['slice-log', 'slice-linear', 'independence-log', 'independence-linear'] as const;
export type SigmaUpdate = (typeof SIGMA_UPDATES)[number];

export interface CollapsedState {
  /** Current σ_u. */
  sigma: number;
  /** Log density of t = log σ at the current point (on σ itself it is this minus t). */
  logTarget: number;
  /** The σ_u update used after warmup. */
  update: SigmaUpdate;
  /** Slice widths on each scale, tuned during warmup. */
  widthLog: number;
  widthLinear: number;
  /** Independence proposals: Student-t on log σ and on σ, centre and spread from warmup. */
  proposalCentre: Float64Array; // [log scale, linear scale]
  proposalSpread: Float64Array;
  beta: Float64Array;
  theta: Float64Array;
  /** Marginal work buffers at the current σ (the β draw reads them) and a spare. */
  work: MarginalWork;
  spare: MarginalWork;
  /** Evaluations of the marginal so far (for choosing the update by cost). */
  evaluations: number;
  /**
   * Warmup window statistics: [count, Σσ, Σσ², Σlogσ, Σ(logσ)²], then for each update in
   * SIGMA_UPDATES order: summed squared jump of log σ, evaluations spent.
   */
  tune: Float64Array;
}


/** Draws that tune the slice during warmup: after 25, 50, 100, 200, … iterations. */
function isTuningPoint(iteration: number): boolean {
  const k = (iteration + 1) / 25;
  return Number.isInteger(k) && (k & (k - 1)) === 0;
}

/**
 * One slice-sampling update of σ_u on the given scale (src/sampler/scale-updates.ts). Each
 * scale's update leaves the posterior invariant, so warmup may alternate them. The accepted
 * point is the last one evaluated, so the work buffers hold P's factor and L⁻¹b there.
 */
function sliceUpdateSigma(state: CollapsedState, scale: SliceScale, d: Packed, prior: ScalePrior, rng: Rng): void {
  const width = scale === 'log' ? state.widthLog : state.widthLinear;
  const density = (t: number): number => {
    state.evaluations++;
    return logMarginalLogSigma(t, d, prior, state.work);
  };
  const move = sliceScaleUpdate(state.sigma, state.logTarget, scale, width, density, rng);
  state.sigma = move.sigma;
  state.logTarget = move.logTarget;
}

/** β | σ, y ~ N(P⁻¹b, P⁻¹), from the factor L (P = LLᵀ) and v = L⁻¹b left in the work buffers. */
export function drawBetaFromFactor(state: CollapsedState, p: number, rng: Rng): void {
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
export function drawTheta(
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

/**
 * Independence Metropolis–Hastings update of σ_u with a Student-t proposal fitted to the warmup
 * draws on log σ or σ (src/sampler/scale-updates.ts). The proposal is evaluated into the spare
 * buffers, which become the current ones on acceptance, so the β draw always reads the factor
 * at the current σ.
 */
function independenceUpdateSigma(state: CollapsedState, scale: SliceScale, d: Packed, prior: ScalePrior, rng: Rng): void {
  const k = scale === 'log' ? 0 : 1;
  const density = (t: number): number => {
    state.evaluations++;
    return logMarginalLogSigma(t, d, prior, state.spare);
  };
  const move = independenceScaleUpdate(
    state.sigma, state.logTarget, scale, state.proposalCentre[k], state.proposalSpread[k], density, rng,
  );
  if (!move.accepted) return;
  state.sigma = move.sigma;
  state.logTarget = move.logTarget;
  const used = state.work;
  state.work = state.spare;
  state.spare = used;
}

function updateSigma(state: CollapsedState, update: SigmaUpdate, d: Packed, prior: ScalePrior, rng: Rng): void {
  const scale = update.endsWith('-log') ? 'log' : 'linear';
  if (update.startsWith('independence')) independenceUpdateSigma(state, scale, d, prior, rng);
  else sliceUpdateSigma(state, scale, d, prior, rng);
}

/** Warmup cycles through the updates (the independence one once it has a proposal). */
function updateForSweep(state: CollapsedState, phase: Phase, iteration: number): SigmaUpdate {
  if (phase === 'sampling') return state.update;
  const ready = state.proposalSpread[0] > 0;
  const update = SIGMA_UPDATES[iteration % SIGMA_UPDATES.length];
  return update.startsWith('independence') && !ready ? 'slice-log' : update;
}

/**
 * Cost model of a sweep, in units of "one site's share of one pass": an evaluation of the
 * marginal costs n (sampled sites), the β and θ draws and recording about 2m, and the fixed
 * work of a sweep about SWEEP_FIXED_COST. Updates are compared per unit of time, so with few
 * sites (where evaluations are nearly free) the one that moves σ farthest per draw wins.
 */
const SWEEP_FIXED_COST = 500;

/**
 * Warmup tuning from the window of sweeps since the last tuning point: slice widths of about
 * three posterior sds on each scale; the independence proposals from the window's moments on
 * each scale (σ suits posteriors reaching down to zero, where log σ has a long left tail); and,
 * for sampling, the update with the largest squared jump of log σ per evaluation of the
 * marginal — the usual efficiency proxy for a one-dimensional update, divided by its cost.
 */
function tuneSigmaUpdate(
  state: CollapsedState,
  d: Packed,
  update: SigmaUpdate,
  previousSigma: number,
  evaluationsBefore: number,
  phase: Phase,
  iteration: number,
): void {
  if (phase !== 'warmup') return;
  const t = state.tune;
  const logSigma = Math.log(state.sigma);
  t[0] += 1;
  t[1] += state.sigma;
  t[2] += state.sigma * state.sigma;
  t[3] += logSigma;
  t[4] += logSigma * logSigma;
  const slot = 5 + 2 * SIGMA_UPDATES.indexOf(update);
  t[slot] += (logSigma - Math.log(previousSigma)) ** 2;
  t[slot + 1] += state.evaluations - evaluationsBefore;
  if (!isTuningPoint(iteration) || t[0] < 20) return;
  const sd = (sum: number, sumSq: number) => Math.sqrt(Math.max(sumSq - (sum * sum) / t[0], 0) / (t[0] - 1));
  const meanSigma = t[1] / t[0];
  const sdSigma = sd(t[1], t[2]);
  const sdLog = sd(t[3], t[4]);
  if (sdSigma > 0) state.widthLinear = 3 * sdSigma;
  if (sdLog > 0) state.widthLog = 3 * sdLog;
  state.proposalCentre[0] = t[3] / t[0];
  state.proposalCentre[1] = meanSigma;
  state.proposalSpread[0] = PROPOSAL_INFLATION * sdLog;
  state.proposalSpread[1] = PROPOSAL_INFLATION * sdSigma;
  let best = -1;
  SIGMA_UPDATES.forEach((u, k) => {
    const evaluations = t[5 + 2 * k + 1];
    if (evaluations === 0) return;
    const sweeps = t[0] / SIGMA_UPDATES.length;
    const cost = evaluations * d.n + sweeps * (2 * d.m + SWEEP_FIXED_COST + d.extraSweepCost);
    const efficiency = t[5 + 2 * k] / cost;
    if (efficiency > best) {
      best = efficiency;
      state.update = u;
    }
  });
  t.fill(0);
}

/**
 * A collapsed-sampler state at a dispersed start (σ_u from the data's excess spread, jittered;
 * β and θ zero until the first sweep draws them), with the marginal evaluated there.
 */
export function initCollapsedState(d: Packed, prior: ScalePrior, m: number, rng: Rng): CollapsedState {
  const work = createMarginalWork(d);
  const logSigma = startingLogSigma(d, rng);
  const sigma = Math.exp(logSigma);
  return {
    sigma,
    logTarget: logMarginalLogSigma(logSigma, d, prior, work),
    update: 'slice-log',
    widthLog: 1,
    widthLinear: sigma,
    proposalCentre: new Float64Array(2),
    proposalSpread: new Float64Array(2),
    beta: new Float64Array(d.p),
    theta: new Float64Array(m),
    work,
    spare: createMarginalWork(d),
    evaluations: 1,
    tune: new Float64Array(5 + 2 * SIGMA_UPDATES.length),
  };
}

/**
 * Re-evaluates the marginal at the current σ_u after the packed response has changed (the counts
 * model's pseudo-data), so the next σ_u update compares against the current target and the β draw
 * reads the factor of the current data. Counts as one evaluation.
 */
export function refreshLogTarget(state: CollapsedState, d: Packed, prior: ScalePrior): void {
  state.evaluations++;
  state.logTarget = logMarginalLogSigma(Math.log(state.sigma), d, prior, state.work);
}

/**
 * The collapsed sweep without the θ draw: σ_u | y by the update chosen for this sweep, then
 * β | σ_u, y exactly, then (warmup only) the tuning. The caller draws θ | β, σ_u, y.
 */
export function collapsedSigmaBetaStep(
  state: CollapsedState,
  d: Packed,
  prior: ScalePrior,
  rng: Rng,
  phase: Phase,
  iteration: number,
): void {
  const update = updateForSweep(state, phase, iteration);
  const previousSigma = state.sigma;
  const evaluationsBefore = state.evaluations;
  updateSigma(state, update, d, prior, rng);
  drawBetaFromFactor(state, d.p, rng);
  tuneSigmaUpdate(state, d, update, previousSigma, evaluationsBefore, phase, iteration);
}

export function collapsedAreaKernel(spec: AreaModelSpec): Kernel<CollapsedState> {
  const d = pack(spec);
  const { data, siteSd } = spec;
  return {
    quantities: areaQuantities(data),
    init(rng) {
      return initCollapsedState(d, siteSd, data.m, rng);
    },
    step(state, rng, phase, iteration) {
      // The tuning inside collapsedSigmaBetaStep draws nothing, so the θ draw may follow it.
      collapsedSigmaBetaStep(state, d, siteSd, rng, phase, iteration);
      drawTheta(state.theta, data, state.beta, state.sigma * state.sigma, rng);
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
