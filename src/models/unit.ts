/**
 * The unit-level model (nested-error regression; Battese, Harter & Fuller 1988, JASA 83(401))
 * and its collapsed Gibbs sampler, working on per-site sufficient statistics only.
 *
 *   y_ij = x_ijᵀβ + u_i + e_ij,  u_i ~ N(0, σ_u²), e_ij ~ N(0, σ_e²)   (unit j of site i)
 *   target μ_i = X̄_iᵀβ + u_i, X̄_i the population means of the covariates; or, with the finite-
 *   population option, the population mean of y in site i: the sampled units' values plus model
 *   predictions for the N_i − n_i others.
 *   β ~ fixed prior (flat or normal); σ_u, σ_e ~ hyperpriors (uniform on σ, half-Cauchy,
 *   inverse-gamma on σ²), as for the area model.
 *
 * ## The marginal of (σ_u², σ_e²), β and u integrated out
 * For site i the n_i responses are N(X_iβ, V_i) with V_i = σ_e² I + σ_u² 11ᵀ, whose inverse and
 * determinant are closed-form: V_i⁻¹ = σ_e⁻²(I − γ_i/n_i 11ᵀ), γ_i = σ_u²/(σ_u² + σ_e²/n_i),
 * |V_i| = σ_e^{2(n_i−1)} n_i (σ_u² + σ_e²/n_i) (Rao & Molina 2015, Small Area Estimation 2nd ed.,
 * §4.3 and §7.1, recalled). Splitting each site's residuals into their mean and the deviations
 * from it gives
 *   (y_i − X_iβ)ᵀV_i⁻¹(y_i − X_iβ) = R_i(β)/σ_e² + w_i (ȳ_i − x̄_iᵀβ)²,  w_i = 1/(σ_u² + σ_e²/n_i),
 * with R_i(β) = Σ_j ((y_ij − ȳ_i) − (x_ij − x̄_i)ᵀβ)² the within-site residual sum of squares:
 * a quadratic in β whose coefficients are the within-site cross-products of (x, y). So the
 * likelihood depends on the units only through n_i, x̄_i, ȳ_i and the within cross-products
 * pooled over sites (W). Integrating β out as a Gaussian (prior precision Λ, flat: Λ = 0):
 *   log p(σ_u², σ_e² | y) = log p(σ_u) + log p(σ_e) − ½[(N − m_s) log σ_e² + Σ_i log(σ_u² + σ_e²/n_i)
 *                           + log|P| + c − bᵀP⁻¹b] + const,
 *   P = W_xx/σ_e² + Σ_i w_i x̄_i x̄_iᵀ + Λ,  b = W_xy/σ_e² + Σ_i w_i x̄_i ȳ_i + Λβ₀,
 *   c = W_yy/σ_e² + Σ_i w_i ȳ_i² + β₀ᵀΛβ₀,
 * sums over the m_s sampled sites, N = Σ n_i. With a flat prior this is the restricted
 * (REML) likelihood of Patterson & Thompson (1971) / Harville (1974), which the tests use
 * against the published REML values of the corn data. Sites sharing one n_i share one w_i, so
 * each evaluation sums over the distinct sample sizes, not over sites.
 *
 * ## Sampler (collapsed Gibbs, one sweep)
 * 1. σ_e | σ_u, y and 2. σ_u | σ_e, y on the 2-D marginal above — each a step that leaves the
 *    collapsed posterior p(σ_u, σ_e | y) invariant. As for the area model (src/models/area.ts),
 *    four updates are available: univariate slice sampling (Neal 2003, Annals of Statistics
 *    31(3): stepping out and shrinkage) on log σ or on σ, and independence Metropolis–Hastings
 *    (Tierney 1994) with a Student-t proposal fitted in warmup, on log σ or folded on σ. Warmup
 *    tries them in turn and, per parameter, sampling keeps the one that moved log σ farthest per
 *    unit of cost (an evaluation costs one unit per distinct sample size).
 * 3. β | σ's, y ~ N(P⁻¹b, P⁻¹), from the factor left by the last marginal evaluation.
 * 4. u_i | β, σ's, y ~ N(γ_i (ȳ_i − x̄_iᵀβ), γ_i σ_e²/n_i); u_i ~ N(0, σ_u²) where n_i = 0.
 * 5. μ_i = X̄_iᵀβ + u_i, or the finite-population mean
 *    f_i ȳ_i + (1 − f_i)(X̄ʳ_iᵀβ + u_i + ē_i), f_i = n_i/N_i, X̄ʳ_i = (N_i X̄_i − n_i x̄_i)/(N_i − n_i)
 *    the mean covariates of the units not sampled, ē_i ~ N(0, σ_e²/(N_i − n_i)) their mean error
 *    (Battese, Harter & Fuller 1988 §2; Rao & Molina 2015 §7.1.1, recalled).
 * Because σ_u is drawn with β and u integrated out, nothing ties it to the current site effects,
 * and the sweep does not stall when σ_u is near zero, the slow corner of plain Gibbs (Gelman
 * 2006, Bayesian Analysis 1(3); Yu & Meng 2011, JCGS 20(3)). The σ_e marginal is sharp (many
 * units); the slice width tuned in warmup follows it.
 *
 * Numerics: β is sampled in centred and scaled coordinates (covariates minus their unit mean,
 * divided by their sd; the response minus its mean), β = Aβ̃ + a, so P is well conditioned
 * whatever the units of the covariates; the coefficient prior is carried over exactly
 * (Λ̃ = AᵀΛA), and β is mapped back before it is recorded.
 */
import type { CoefficientPrior, ScalePrior } from '../config/types.js';
import type { UnitData } from '../data/unit-data.js';
import type { Kernel, Phase } from '../sampler/kernel.js';
import type { Rng } from '../sampler/rng.js';
import { normal } from '../sampler/variates.js';
import { logPriorLogSigma } from './area.js';
import {
  independenceScaleUpdate,
  PROPOSAL_INFLATION,
  sliceScaleUpdate,
  type SliceScale,
} from '../sampler/scale-updates.js';
import { choleskyLower, solveLowerInPlace, solveUpperTransposedInPlace } from './linalg.js';

export interface UnitModelSpec {
  data: UnitData;
  coefficients: CoefficientPrior;
  siteSd: ScalePrior;
  unitSd: ScalePrior;
}

/** Monitored quantity names, in recording order: coefficients, site_sd, unit_sd, every site. */
export function unitQuantities(data: Pick<UnitData, 'coefficientNames' | 'siteIds'>): string[] {
  return [
    ...data.coefficientNames.map((name) => `coef:${name}`),
    'site_sd',
    'unit_sd',
    ...data.siteIds.map((id) => `site:${id}`),
  ];
}

/** The closed-form pieces of the marginal, in centred coordinates; shared with the exact posterior. */
export interface UnitCore {
  p: number;
  /** Terms per row: packed x̃x̃ᵀ (p(p+1)/2), x̃ỹ (p), ỹ² (1). */
  width: number;
  /** N − m_s: the within-site degrees of freedom of σ_e. */
  withinDf: number;
  /**
   * Distinct sample sizes among sampled sites, their counts, and per size the summed terms of the
   * site means, stored term-major (term c of size g at c·groups + g) so that each term's weighted
   * sum is one tight dot product.
   */
  groups: number;
  groupN: Float64Array;
  groupCount: Float64Array;
  groupTerms: Float64Array;
  /** Each site's index among the distinct sample sizes (−1 for an unsampled site). */
  siteGroup: Int32Array;
  /** Pooled within-site cross-products in the same layout (centred coordinates). */
  within: Float64Array;
  /** Prior precision Λ̃ (p × p), Λ̃b̃₀ (p) and b̃₀ᵀΛ̃b̃₀ in centred coordinates; zero for a flat prior. */
  priorPrecision: Float64Array;
  priorLinear: Float64Array;
  priorConstant: number;
  /** β = A β̃ + a. */
  A: Float64Array;
  a: Float64Array;
  /** Centring of the covariates (unit means), their scales, and of the response. */
  centre: Float64Array;
  scale: Float64Array;
  responseCentre: number;
}

/** Centred, scaled covariate row x̃ of site means: (1, (x̄_j − c_j)/s_j). */
function centredRow(data: UnitData, i: number, core: Pick<UnitCore, 'centre' | 'scale'>, out: Float64Array): void {
  const { p, xbar } = data;
  out[0] = 1;
  for (let j = 1; j < p; j++) out[j] = (xbar[i * p + j] - core.centre[j]) / core.scale[j];
}

/** Builds the closed-form pieces of the marginal from the data (see the module doc). */
export function unitCore(data: UnitData, coefficients: CoefficientPrior): UnitCore {
  const { p, m, n } = data;
  const np = (p * (p + 1)) / 2;
  const width = np + p + 1;
  // Centring and scaling: unit-level means and sds (within plus between spread).
  const centre = new Float64Array(p);
  const scale = new Float64Array(p).fill(1);
  let responseCentre = 0;
  for (let i = 0; i < m; i++) {
    if (n[i] === 0) continue;
    for (let j = 1; j < p; j++) centre[j] += n[i] * data.xbar[i * p + j];
    responseCentre += n[i] * data.ybar[i];
  }
  for (let j = 1; j < p; j++) centre[j] /= data.units;
  responseCentre /= data.units;
  for (let j = 1; j < p; j++) {
    let ss = data.withinXX[j * p + j];
    for (let i = 0; i < m; i++) if (n[i] > 0) ss += n[i] * (data.xbar[i * p + j] - centre[j]) ** 2;
    const sd = Math.sqrt(ss / data.units);
    scale[j] = sd > 0 ? sd : 1;
  }
  const core = { centre, scale };

  // Group the sampled sites by sample size.
  const groupOf = new Map<number, number>();
  const sizes: number[] = [];
  for (let i = 0; i < m; i++) if (n[i] > 0 && !groupOf.has(n[i])) groupOf.set(n[i], sizes.push(n[i]) - 1);
  sizes.sort((x, y) => x - y);
  sizes.forEach((size, g) => groupOf.set(size, g));
  const G = sizes.length;
  const siteGroup = Int32Array.from(n, (ni) => (ni > 0 ? groupOf.get(ni)! : -1));
  const groupCount = new Float64Array(G);
  const groupTerms = new Float64Array(G * width); // term-major: term c of group g at c·G + g
  const x = new Float64Array(p);
  for (let i = 0; i < m; i++) {
    if (n[i] === 0) continue;
    const g = groupOf.get(n[i])!;
    groupCount[g]++;
    centredRow(data, i, core, x);
    const y = data.ybar[i] - responseCentre;
    let c = 0;
    for (let j = 0; j < p; j++) for (let l = 0; l <= j; l++) groupTerms[c++ * G + g] += x[j] * x[l];
    for (let j = 0; j < p; j++) groupTerms[c++ * G + g] += x[j] * y;
    groupTerms[c * G + g] += y * y;
  }

  // Within-site cross-products in centred coordinates (shift-free; only the scaling applies).
  const within = new Float64Array(width);
  let c = 0;
  for (let j = 0; j < p; j++) for (let l = 0; l <= j; l++) within[c++] = data.withinXX[j * p + l] / (scale[j] * scale[l]);
  for (let j = 0; j < p; j++) within[c++] = data.withinXY[j] / scale[j];
  within[c] = data.withinYY;

  // β = Aβ̃ + a: slopes β_j = β̃_j / s_j; intercept β_0 = β̃_0 + ȳ_c − Σ_j c_j β̃_j / s_j.
  const A = new Float64Array(p * p);
  const a = new Float64Array(p);
  A[0] = 1;
  for (let j = 1; j < p; j++) {
    A[j * p + j] = 1 / scale[j];
    A[j] = -centre[j] / scale[j];
  }
  a[0] = responseCentre;

  // Prior λ‖β − μ₀1‖² = λ‖Aβ̃ + a − μ₀1‖²: Λ̃ = λAᵀA, ℓ̃ = λAᵀ(μ₀1 − a), C̃ = λ‖μ₀1 − a‖².
  const priorPrecision = new Float64Array(p * p);
  const priorLinear = new Float64Array(p);
  let priorConstant = 0;
  if (coefficients.kind === 'normal') {
    const lambda = 1 / (coefficients.sd * coefficients.sd);
    const d = new Float64Array(p);
    for (let r = 0; r < p; r++) {
      d[r] = coefficients.mean - a[r];
      priorConstant += lambda * d[r] * d[r];
    }
    for (let j = 0; j < p; j++) {
      for (let l = 0; l < p; l++) {
        let s = 0;
        for (let r = 0; r < p; r++) s += A[r * p + j] * A[r * p + l];
        priorPrecision[j * p + l] = lambda * s;
      }
      let s = 0;
      for (let r = 0; r < p; r++) s += A[r * p + j] * d[r];
      priorLinear[j] = lambda * s;
    }
  }

  return {
    p,
    width,
    withinDf: data.units - data.sampledSites,
    groups: G,
    groupN: Float64Array.from(sizes),
    groupCount,
    groupTerms,
    siteGroup,
    within,
    priorPrecision,
    priorLinear,
    priorConstant,
    A,
    a,
    centre,
    scale,
    responseCentre,
  };
}

/** Work buffers of one marginal evaluation; after it, P holds its Cholesky factor and v = L⁻¹b. */
export interface UnitWork {
  weights: Float64Array;
  sums: Float64Array;
  P: Float64Array;
  v: Float64Array;
  /** log|V| (up to a constant), log|P̃|, and c − bᵀP⁻¹b of the last evaluation. */
  parts: Float64Array;
}

export function createUnitWork(core: UnitCore): UnitWork {
  return {
    weights: new Float64Array(core.groups),
    sums: new Float64Array(core.width),
    P: new Float64Array(core.p * core.p),
    v: new Float64Array(core.p),
    parts: new Float64Array(3),
  };
}

/** Single-site sizes whose variances are multiplied together before one logarithm. */
const LOG_BLOCK = 8;

/**
 * log p(y | σ_u², σ_e²) with β integrated out (module doc), up to a constant that depends on
 * neither variance. Leaves the factor of P̃ and L⁻¹b̃ in `work`. −Infinity if P̃ is not
 * positive definite.
 */
export function unitLogMarginal(core: UnitCore, siteVar: number, unitVar: number, work: UnitWork): number {
  const { p, width, groups, groupN, groupCount, groupTerms, within } = core;
  const { weights, sums, P, v: b, parts } = work;
  let logDet = 0;
  let product = 1;
  let factors = 0;
  // Variances lie in [σ_u², σ_u² + σ_e²]; products of LOG_BLOCK of them stay in range unless extreme.
  const blocked = siteVar + unitVar < 1e30 && siteVar + unitVar / groupN[groups - 1] > 1e-30;
  for (let g = 0; g < groups; g++) {
    const total = siteVar + unitVar / groupN[g];
    weights[g] = 1 / total;
    const count = groupCount[g];
    if (count === 1 && blocked) {
      product *= total;
      if (++factors === LOG_BLOCK) {
        logDet += Math.log(product);
        product = 1;
        factors = 0;
      }
    } else {
      logDet += count * Math.log(total);
    }
  }
  logDet += Math.log(product);
  for (let c = 0; c < width; c++) {
    let s = 0;
    const row = c * groups;
    for (let g = 0; g < groups; g++) s += weights[g] * groupTerms[row + g];
    sums[c] = s;
  }
  const inv = 1 / unitVar;
  let c = 0;
  for (let j = 0; j < p; j++) {
    for (let l = 0; l <= j; l++, c++) P[j * p + l] = sums[c] + inv * within[c] + core.priorPrecision[j * p + l];
  }
  for (let j = 0; j < p; j++, c++) b[j] = sums[c] + inv * within[c] + core.priorLinear[j];
  const yy = sums[c] + inv * within[c] + core.priorConstant;
  const logDetV = core.withinDf * Math.log(unitVar) + logDet;
  const logDetP = choleskyLower(P, p);
  if (!Number.isFinite(logDetP)) return -Infinity;
  solveLowerInPlace(P, p, b);
  let bPb = 0;
  for (let j = 0; j < p; j++) bPb += b[j] * b[j];
  const quad = Math.max(yy - bPb, 0);
  parts[0] = logDetV;
  parts[1] = logDetP;
  parts[2] = quad;
  return -0.5 * (logDetV + logDetP + quad);
}

/** Joint log density of (t_u, t_e) = (log σ_u, log σ_e), Jacobians included, up to a constant. */
function logTargetLog(core: UnitCore, spec: UnitModelSpec, tu: number, te: number, work: UnitWork): number {
  if (!(tu < 350 && te < 350 && tu > -350 && te > -350)) return -Infinity;
  const value = unitLogMarginal(core, Math.exp(2 * tu), Math.exp(2 * te), work);
  return value + logPriorLogSigma(tu, spec.siteSd) + logPriorLogSigma(te, spec.unitSd);
}

// ---------------------------------------------------------------------------------------------
// Collapsed sampler

/** Index of σ_u and σ_e in the state's per-parameter arrays. */
const SITE = 0;
const UNIT = 1;

/**
 * The updates of one standard deviation given the other, each leaving the collapsed posterior
 * invariant: slice sampling on log σ or σ, and independence Metropolis–Hastings with a Student-t
 * proposal fitted in warmup on log σ or (folded at zero) on σ — as for the area model's σ_u.
 */
export const UNIT_SIGMA_UPDATES = ['slice-log', 'slice-linear', 'independence-log', 'independence-linear'] as const;
export type UnitSigmaUpdate = (typeof UNIT_SIGMA_UPDATES)[number];

export interface UnitState {
  /** [σ_u, σ_e]. */
  sigma: Float64Array;
  /** Log density of (log σ_u, log σ_e) at the current point. */
  logTarget: number;
  /** Per parameter, the index (in UNIT_SIGMA_UPDATES) of the update used after warmup. */
  update: Uint8Array;
  widthLog: Float64Array;
  widthLinear: Float64Array;
  /** Independence proposals per parameter and scale, at 2·k + (0 log σ, 1 σ). */
  proposalCentre: Float64Array;
  proposalSpread: Float64Array;
  /** β in centred coordinates, and in the data's own. */
  betaCentred: Float64Array;
  beta: Float64Array;
  u: Float64Array;
  mu: Float64Array;
  /** Per distinct sample size, γ and the conditional sd of u_i at the current σ's. */
  groupShrink: Float64Array;
  groupSd: Float64Array;
  /** Buffers at the current point (P's factor for the β draw), and for proposals. */
  work: UnitWork;
  spare: UnitWork;
  /** Evaluations of the marginal so far (the unit of cost in warmup's choice of update). */
  evaluations: number;
  /** Per parameter, TUNE_FIELDS warmup statistics (see `tuneUpdate`). */
  tune: Float64Array;
}

const TUNE_FIELDS = 5 + 2 * UNIT_SIGMA_UPDATES.length;
/** σ_e first, then σ_u. */
const SWEEP_ORDER = [UNIT, SITE] as const;
/** Fixed cost of a sweep beyond the marginal evaluations, in the cost units of `tuneUpdate`. */
const SWEEP_FIXED_COST = 500;

/** Draws that tune the updates during warmup: after 25, 50, 100, 200, … iterations. */
function isTuningPoint(iteration: number): boolean {
  const k = (iteration + 1) / 25;
  return Number.isInteger(k) && (k & (k - 1)) === 0;
}

/** Log density of t = log σ_k with the other standard deviation fixed (log σ_other = other). */
function logDensityOf(k: number, other: number, core: UnitCore, spec: UnitModelSpec, work: UnitWork): (t: number) => number {
  return (t) => (k === SITE ? logTargetLog(core, spec, t, other, work) : logTargetLog(core, spec, other, t, work));
}

/**
 * One slice-sampling update of σ_u (k = 0) or σ_e (k = 1) with the other fixed, on log σ or σ
 * (src/sampler/scale-updates.ts). Leaves the work buffers at the accepted point.
 */
function sliceUpdate(state: UnitState, k: number, scale: SliceScale, core: UnitCore, spec: UnitModelSpec, rng: Rng): void {
  const density = logDensityOf(k, Math.log(state.sigma[1 - k]), core, spec, state.work);
  const counted = (t: number): number => {
    state.evaluations++;
    return density(t);
  };
  const width = scale === 'log' ? state.widthLog[k] : state.widthLinear[k];
  const move = sliceScaleUpdate(state.sigma[k], state.logTarget, scale, width, counted, rng);
  state.sigma[k] = move.sigma;
  state.logTarget = move.logTarget;
}

/**
 * Independence Metropolis–Hastings update of σ_u or σ_e given the other, a valid
 * Metropolis-within-Gibbs step for any fixed proposal (src/sampler/scale-updates.ts). One
 * evaluation of the marginal, into the spare buffers, which become the current ones on acceptance.
 */
function independenceUpdate(state: UnitState, k: number, scale: SliceScale, core: UnitCore, spec: UnitModelSpec, rng: Rng): void {
  const slot = 2 * k + (scale === 'log' ? 0 : 1);
  const density = logDensityOf(k, Math.log(state.sigma[1 - k]), core, spec, state.spare);
  const counted = (t: number): number => {
    state.evaluations++;
    return density(t);
  };
  const move = independenceScaleUpdate(
    state.sigma[k], state.logTarget, scale, state.proposalCentre[slot], state.proposalSpread[slot], counted, rng,
  );
  if (!move.accepted) return;
  state.sigma[k] = move.sigma;
  state.logTarget = move.logTarget;
  const used = state.work;
  state.work = state.spare;
  state.spare = used;
}

/** Warmup cycles through the updates (an independence one once its proposal exists). */
function updateForSweep(state: UnitState, k: number, phase: Phase, iteration: number): UnitSigmaUpdate {
  if (phase === 'sampling') return UNIT_SIGMA_UPDATES[state.update[k]];
  const update = UNIT_SIGMA_UPDATES[iteration % UNIT_SIGMA_UPDATES.length];
  const ready = state.proposalSpread[2 * k] > 0;
  return update.startsWith('independence') && !ready ? 'slice-log' : update;
}

function runUpdate(state: UnitState, k: number, update: UnitSigmaUpdate, core: UnitCore, spec: UnitModelSpec, rng: Rng): void {
  const scale: SliceScale = update.endsWith('-log') ? 'log' : 'linear';
  if (update.startsWith('independence')) independenceUpdate(state, k, scale, core, spec, rng);
  else sliceUpdate(state, k, scale, core, spec, rng);
}

/**
 * Warmup tuning of parameter k from the window since the last tuning point, as for the area
 * model: slice widths of about three posterior sds on each scale, independence proposals from
 * the window's moments, and for sampling the update with the largest squared jump of log σ per
 * unit of cost — an evaluation of the marginal costs one unit per distinct sample size, and a
 * sweep's other work (site draws, recording) about 2m + SWEEP_FIXED_COST, half charged to each σ.
 */
function tuneUpdate(state: UnitState, k: number, core: UnitCore, m: number, update: UnitSigmaUpdate, previous: number, evaluationsBefore: number, phase: Phase, iteration: number): void {
  if (phase !== 'warmup') return;
  const t = state.tune.subarray(k * TUNE_FIELDS, (k + 1) * TUNE_FIELDS);
  const sigma = state.sigma[k];
  const logSigma = Math.log(sigma);
  t[0] += 1;
  t[1] += sigma;
  t[2] += sigma * sigma;
  t[3] += logSigma;
  t[4] += logSigma * logSigma;
  const slot = 5 + 2 * UNIT_SIGMA_UPDATES.indexOf(update);
  t[slot] += (logSigma - Math.log(previous)) ** 2;
  t[slot + 1] += state.evaluations - evaluationsBefore;
  if (!isTuningPoint(iteration) || t[0] < 20) return;
  const sd = (sum: number, sumSq: number) => Math.sqrt(Math.max(sumSq - (sum * sum) / t[0], 0) / (t[0] - 1));
  const sdSigma = sd(t[1], t[2]);
  const sdLog = sd(t[3], t[4]);
  if (sdSigma > 0) state.widthLinear[k] = 3 * sdSigma;
  if (sdLog > 0) state.widthLog[k] = 3 * sdLog;
  state.proposalCentre[2 * k] = t[3] / t[0];
  state.proposalCentre[2 * k + 1] = t[1] / t[0];
  state.proposalSpread[2 * k] = PROPOSAL_INFLATION * sdLog;
  state.proposalSpread[2 * k + 1] = PROPOSAL_INFLATION * sdSigma;
  let best = -1;
  const sweeps = t[0] / UNIT_SIGMA_UPDATES.length;
  UNIT_SIGMA_UPDATES.forEach((_, u) => {
    const evaluations = t[5 + 2 * u + 1];
    if (evaluations === 0) return;
    const cost = evaluations * core.groups + sweeps * (m + SWEEP_FIXED_COST / 2);
    const efficiency = t[5 + 2 * u] / cost;
    if (efficiency > best) {
      best = efficiency;
      state.update[k] = u;
    }
  });
  t.fill(0);
}

/** β̃ | σ's, y ~ N(P̃⁻¹b̃, P̃⁻¹) from the factor in the work buffers; then β = Aβ̃ + a. */
function drawBeta(state: UnitState, core: UnitCore, rng: Rng): void {
  const { p, A, a } = core;
  const { betaCentred, beta, work } = state;
  for (let j = 0; j < p; j++) betaCentred[j] = work.v[j] + normal(rng);
  solveUpperTransposedInPlace(work.P, p, betaCentred);
  for (let r = 0; r < p; r++) {
    let s = a[r];
    for (let j = 0; j < p; j++) s += A[r * p + j] * betaCentred[j];
    beta[r] = s;
  }
}

/** u_i | β, σ's, y and the site targets μ_i (module doc, steps 4–5). */
function drawSites(state: UnitState, data: UnitData, core: UnitCore, rng: Rng): void {
  const { m, p, n, xbar, ybar, populationMeans, populationSize, finitePopulation } = data;
  const { beta, u, mu, groupShrink, groupSd } = state;
  const siteVar = state.sigma[SITE] * state.sigma[SITE];
  const unitVar = state.sigma[UNIT] * state.sigma[UNIT];
  const siteSd = state.sigma[SITE];
  // γ and the conditional sd of u_i depend on the site only through n_i.
  for (let g = 0; g < core.groups; g++) {
    const errorVar = unitVar / core.groupN[g];
    const shrink = siteVar / (siteVar + errorVar); // γ_i
    groupShrink[g] = shrink;
    groupSd[g] = Math.sqrt(shrink * errorVar);
  }
  const { siteGroup } = core;
  for (let i = 0; i < m; i++) {
    const row = i * p;
    let etaPopulation = 0;
    for (let j = 0; j < p; j++) etaPopulation += populationMeans[row + j] * beta[j];
    const g = siteGroup[i];
    let etaSample = 0;
    if (g >= 0) {
      for (let j = 0; j < p; j++) etaSample += xbar[row + j] * beta[j];
      u[i] = groupShrink[g] * (ybar[i] - etaSample) + groupSd[g] * normal(rng);
    } else {
      u[i] = siteSd * normal(rng);
    }
    if (!finitePopulation) {
      mu[i] = etaPopulation + u[i];
      continue;
    }
    const ni = n[i];
    const N = populationSize[i];
    if (ni >= N) {
      mu[i] = ybar[i]; // the whole site was enumerated
      continue;
    }
    const rest = N - ni;
    const etaRest = (N * etaPopulation - ni * etaSample) / rest;
    const restMean = etaRest + u[i] + Math.sqrt(unitVar / rest) * normal(rng);
    mu[i] = ni > 0 ? (ni * ybar[i] + rest * restMean) / N : restMean;
  }
}

/** Dispersed starting values from the data: σ_e from the within-site spread, σ_u from the spread of site means. */
function startingSigmas(data: UnitData, rng: Rng): [number, number] {
  const unitVar = data.withinYY / Math.max(data.units - data.sampledSites, 1);
  let mean = 0;
  const k = data.sampledSites;
  for (let i = 0; i < data.m; i++) if (data.n[i] > 0) mean += data.ybar[i];
  mean /= k;
  let spread = 0;
  let noise = 0;
  for (let i = 0; i < data.m; i++) {
    if (data.n[i] === 0) continue;
    spread += (data.ybar[i] - mean) ** 2;
    noise += unitVar / data.n[i];
  }
  spread /= Math.max(k - 1, 1);
  noise /= k;
  const excess = Math.max(spread - noise, 0.05 * spread, 1e-12 * unitVar);
  return [Math.exp(0.5 * Math.log(excess) + normal(rng)), Math.exp(0.5 * Math.log(unitVar) + 0.3 * normal(rng))];
}

export function unitKernel(spec: UnitModelSpec): Kernel<UnitState> {
  const { data } = spec;
  const core = unitCore(data, spec.coefficients);
  const { p } = data;
  return {
    quantities: unitQuantities(data),
    init(rng) {
      const work = createUnitWork(core);
      const [siteSd, unitSd] = startingSigmas(data, rng);
      const sigma = Float64Array.of(siteSd, unitSd);
      return {
        sigma,
        logTarget: logTargetLog(core, spec, Math.log(siteSd), Math.log(unitSd), work),
        update: new Uint8Array(2),
        widthLog: Float64Array.of(1, 1),
        widthLinear: Float64Array.of(siteSd, unitSd),
        proposalCentre: new Float64Array(4),
        proposalSpread: new Float64Array(4),
        betaCentred: new Float64Array(p),
        beta: new Float64Array(p),
        u: new Float64Array(data.m),
        mu: new Float64Array(data.m),
        groupShrink: new Float64Array(core.groups),
        groupSd: new Float64Array(core.groups),
        work,
        spare: createUnitWork(core),
        evaluations: 1,
        tune: new Float64Array(2 * TUNE_FIELDS),
      };
    },
    step(state, rng, phase, iteration) {
      // σ_e first, then σ_u; afterwards the current buffers hold P's factor at the current point.
      for (const k of SWEEP_ORDER) {
        const update = updateForSweep(state, k, phase, iteration);
        const previous = state.sigma[k];
        const evaluationsBefore = state.evaluations;
        runUpdate(state, k, update, core, spec, rng);
        tuneUpdate(state, k, core, data.m, update, previous, evaluationsBefore, phase, iteration);
      }
      drawBeta(state, core, rng);
      drawSites(state, data, core, rng);
      return state;
    },
    record(state, out, stride, offset) {
      let q = 0;
      for (let j = 0; j < p; j++) out[q++ * stride + offset] = state.beta[j];
      out[q++ * stride + offset] = state.sigma[SITE];
      out[q++ * stride + offset] = state.sigma[UNIT];
      for (let i = 0; i < data.m; i++) out[q++ * stride + offset] = state.mu[i];
    },
  };
}
