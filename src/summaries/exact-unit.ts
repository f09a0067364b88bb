/**
 * The exact posterior of the unit-level (nested-error) model by two-dimensional numerical
 * integration over (σ_u, σ_e), with β and the site effects integrated out analytically.
 * The oracle of the unit sampler's tests; nothing here is random.
 *
 * ## Given the variances (closed form; Rao & Molina 2015, Small Area Estimation 2nd ed. §7.1,
 * and Battese, Harter & Fuller 1988 §2, recalled)
 * With σ_u², σ_e² fixed the model is Gaussian: β | σ's, y ~ N(β̂, P⁻¹) with P and β̂ = P⁻¹b as in
 * src/models/unit.ts, and, writing γ_i = σ_u²/(σ_u² + σ_e²/n_i),
 *   μ_i = X̄_iᵀβ + u_i,  u_i | β ~ N(γ_i(ȳ_i − x̄_iᵀβ), γ_i σ_e²/n_i)
 * so μ_i | σ's, y ~ N(γ_i ȳ_i + a_iᵀβ̂, a_iᵀP⁻¹a_i + γ_i σ_e²/n_i) with a_i = X̄_i − γ_i x̄_i.
 * The two variance terms are Prasad & Rao's g₂ and g₁ of the nested-error EBLUP. A site
 * without a sample has μ_i ~ N(X̄_iᵀβ̂, X̄_iᵀP⁻¹X̄_i + σ_u²). The finite-population mean
 * f_i ȳ_i + (1 − f_i)(X̄ʳ_iᵀβ + u_i + ē_i), f_i = n_i/N_i, is linear in β and u_i as well:
 * a_i = X̄_i − f_i x̄_i − (1 − f_i)γ_i x̄_i, mean f_i ȳ_i + (1 − f_i)γ_i ȳ_i + a_iᵀβ̂, variance
 * a_iᵀP⁻¹a_i + (1 − f_i)²(γ_i σ_e²/n_i + σ_e²/(N_i − n_i)) (+ σ_u² + σ_e²/N_i unsampled).
 *
 * ## The integral over (σ_u, σ_e)
 * p(t_u, t_e | y), t = log σ, is the marginal of src/models/unit.ts times the hyperprior
 * densities of log σ. It is integrated by the trapezoid rule on a uniform 2-D grid: spacing a
 * quarter of the conditional posterior sd at the mode (at most 0.1), over a box that reaches
 * until the density — weighted by e^{2(t − t̂)} on the far side, so second moments are covered —
 * has dropped below e^{−30} of its peak on every edge. For smooth integrands that decay at both
 * ends the trapezoid rule converges geometrically in 1/h (Trefethen & Weideman 2014, SIAM Review
 * 56(3)); a test halves the spacing to check. Every marginal of β, μ_i is the normal mixture over
 * the grid, summarised by its mean and sd. Where σ_u² < 1e-10 σ_e²/n_i for every site, all
 * conditionals equal their σ_u → 0 limits and the log density is linear in log σ_u, so that far
 * left tail (long under a uniform or half-Cauchy prior) is added in closed form at the grid's
 * edge (a test compares with the plain grid). Sites with the same sample size share γ_i, so the
 * site moments are assembled from per-size moments of γ, γβ, γ²β, E[ββᵀ | σ's], γ E[ββᵀ | σ's],
 * γ² E[ββᵀ | σ's]: each grid point costs O(sizes × p²) whatever the number of sites.
 */
import type { CoefficientPrior, ScalePrior } from '../config/types.js';
import type { UnitData } from '../data/unit-data.js';
import { UserError } from '../errors.js';
import { logPriorLogSigma } from '../models/area.js';
import { lowerTriangularInverse } from '../models/linalg.js';
import { createUnitWork, unitCore, unitLogMarginal, type UnitCore, type UnitWork } from '../models/unit.js';

/** Priors of the unit model: fixed on β, learned hyperpriors on σ_u and σ_e. */
export interface UnitPriors {
  coefficients: CoefficientPrior;
  site_sd: ScalePrior;
  unit_sd: ScalePrior;
}

export interface MeanSd {
  mean: number;
  sd: number;
}

/** Everything given (σ_u², σ_e²): β's conditional and each site target's. */
export interface UnitGivenVariances {
  /** β̂ = E[β | σ's, y] and its covariance P⁻¹ (p × p), in the data's own coordinates. */
  beta: Float64Array;
  betaCov: Float64Array;
  /** E[μ_i | σ's, y] and Var[μ_i | σ's, y]. */
  siteMean: Float64Array;
  siteVar: Float64Array;
  /** γ_i = σ_u²/(σ_u² + σ_e²/n_i); 0 where n_i = 0. */
  gamma: Float64Array;
  /**
   * Parts of −2 log p(y | σ's) (β integrated under the coefficient prior), each up to a constant:
   * log|V|, log|P| and the quadratic form at β̂. With a flat prior, −½ of their sum is the
   * restricted (REML) log likelihood and −½(logDetV + quad) the profile log likelihood.
   */
  logDetV: number;
  logDetP: number;
  quad: number;
}

/** Scratch for repeated conditionals on one core. */
interface Scratch {
  work: UnitWork;
  inverse: Float64Array;
  betaCentred: Float64Array;
  covCentred: Float64Array;
  row: Float64Array;
  tmp: Float64Array;
}

function createScratch(core: UnitCore): Scratch {
  const { p } = core;
  return {
    work: createUnitWork(core),
    inverse: new Float64Array(p * p),
    betaCentred: new Float64Array(p),
    covCentred: new Float64Array(p * p),
    row: new Float64Array(p),
    tmp: new Float64Array(p),
  };
}

/**
 * β's conditional at (σ_u², σ_e²): fills out.beta, out.betaCov and the likelihood parts.
 * Returns false when P is not positive definite.
 */
function betaAt(core: UnitCore, siteVar: number, unitVar: number, s: Scratch, out: UnitGivenVariances): boolean {
  const { p, A, a } = core;
  const logMarginal = unitLogMarginal(core, siteVar, unitVar, s.work);
  if (!Number.isFinite(logMarginal)) return false;
  out.logDetV = s.work.parts[0];
  out.logDetP = s.work.parts[1];
  out.quad = s.work.parts[2];
  // β̃ = L⁻ᵀ v; P̃⁻¹ = L⁻ᵀL⁻¹; then β = Aβ̃ + a, Cov β = A P̃⁻¹ Aᵀ.
  const { inverse: M, betaCentred, covCentred } = s;
  lowerTriangularInverse(s.work.P, p, M);
  for (let j = 0; j < p; j++) {
    let v = 0;
    for (let r = j; r < p; r++) v += M[r * p + j] * s.work.v[r];
    betaCentred[j] = v;
  }
  for (let j = 0; j < p; j++) {
    for (let l = 0; l <= j; l++) {
      let v = 0;
      for (let r = j; r < p; r++) v += M[r * p + j] * M[r * p + l];
      covCentred[j * p + l] = v;
      covCentred[l * p + j] = v;
    }
  }
  for (let r = 0; r < p; r++) {
    let v = a[r];
    for (let j = 0; j < p; j++) v += A[r * p + j] * betaCentred[j];
    out.beta[r] = v;
  }
  for (let r = 0; r < p; r++) {
    for (let c = 0; c <= r; c++) {
      let v = 0;
      for (let j = 0; j < p; j++) {
        const arj = A[r * p + j];
        if (arj === 0) continue;
        for (let l = 0; l < p; l++) v += arj * covCentred[j * p + l] * A[c * p + l];
      }
      out.betaCov[r * p + c] = v;
      out.betaCov[c * p + r] = v;
    }
  }
  return true;
}

/** A site target as c₀ + c₁γ + (A₀ − γA₁)ᵀβ + noise (module doc); `kind` 0 sampled, 1 unsampled, 2 enumerated. */
interface SiteForm {
  kind: Int8Array;
  c0: Float64Array;
  c1: Float64Array;
  A0: Float64Array; // m × p
  A1: Float64Array; // m × p
  /** Noise variance = σ_e² × (noiseGamma γ + noiseFixed) for sampled sites; σ_u² + σ_e² noiseFixed unsampled. */
  noiseGamma: Float64Array;
  noiseFixed: Float64Array;
}

function siteForms(data: UnitData): SiteForm {
  const { m, p, n, xbar, ybar, populationMeans, populationSize, finitePopulation } = data;
  const form: SiteForm = {
    kind: new Int8Array(m),
    c0: new Float64Array(m),
    c1: new Float64Array(m),
    A0: new Float64Array(m * p),
    A1: new Float64Array(m * p),
    noiseGamma: new Float64Array(m),
    noiseFixed: new Float64Array(m),
  };
  for (let i = 0; i < m; i++) {
    const ni = n[i];
    const N = populationSize[i];
    if (ni > 0 && finitePopulation && ni >= N) {
      form.kind[i] = 2;
      form.c0[i] = ybar[i];
      continue;
    }
    if (ni === 0) {
      form.kind[i] = 1;
      for (let j = 0; j < p; j++) form.A0[i * p + j] = populationMeans[i * p + j];
      form.noiseFixed[i] = finitePopulation ? 1 / N : 0;
      continue;
    }
    const f = finitePopulation ? ni / N : 0;
    form.c0[i] = f * ybar[i];
    form.c1[i] = (1 - f) * ybar[i];
    for (let j = 0; j < p; j++) {
      form.A0[i * p + j] = populationMeans[i * p + j] - f * xbar[i * p + j];
      form.A1[i * p + j] = (1 - f) * xbar[i * p + j];
    }
    form.noiseGamma[i] = (1 - f) ** 2 / ni;
    form.noiseFixed[i] = finitePopulation ? (1 - f) ** 2 / (N - ni) : 0;
  }
  return form;
}

/** The conditionals at (σ_u², σ_e²) of β and every site target (module doc). */
function conditionalAt(data: UnitData, core: UnitCore, siteVar: number, unitVar: number, s: Scratch, out: UnitGivenVariances): boolean {
  if (!betaAt(core, siteVar, unitVar, s, out)) return false;
  const { p } = core;
  const form = siteForms(data);
  const { row, tmp } = s;
  for (let i = 0; i < data.m; i++) {
    const ni = data.n[i];
    const gamma = ni > 0 ? siteVar / (siteVar + unitVar / ni) : 0;
    out.gamma[i] = gamma;
    if (form.kind[i] === 2) {
      out.siteMean[i] = form.c0[i];
      out.siteVar[i] = 0;
      continue;
    }
    for (let j = 0; j < p; j++) row[j] = form.A0[i * p + j] - gamma * form.A1[i * p + j];
    let mean = form.c0[i] + gamma * form.c1[i];
    let quadForm = 0;
    for (let r = 0; r < p; r++) {
      let v = 0;
      for (let c = 0; c < p; c++) v += out.betaCov[r * p + c] * row[c];
      tmp[r] = v;
      quadForm += row[r] * v;
      mean += row[r] * out.beta[r];
    }
    const noise = form.kind[i] === 1 ? siteVar + unitVar * form.noiseFixed[i] : unitVar * (gamma * form.noiseGamma[i] + form.noiseFixed[i]);
    out.siteMean[i] = mean;
    out.siteVar[i] = Math.max(quadForm, 0) + noise;
  }
  return true;
}

function emptyConditional(p: number, m: number): UnitGivenVariances {
  return {
    beta: new Float64Array(p),
    betaCov: new Float64Array(p * p),
    siteMean: new Float64Array(m),
    siteVar: new Float64Array(m),
    gamma: new Float64Array(m),
    logDetV: NaN,
    logDetP: NaN,
    quad: NaN,
  };
}

/**
 * The closed-form conditionals of the unit model at fixed variances (module doc): β̂ and its
 * covariance, each site target's mean and variance, and the parts of the (restricted) likelihood.
 * With a flat coefficient prior and the variances at their REML estimates, siteMean is the
 * nested-error EBLUP and siteVar its g₁ + g₂ (Prasad & Rao 1990, JASA 85(409)).
 */
export function unitGivenVariances(data: UnitData, coefficients: CoefficientPrior, siteVar: number, unitVar: number): UnitGivenVariances {
  const core = unitCore(data, coefficients);
  const out = emptyConditional(data.p, data.m);
  if (!conditionalAt(data, core, siteVar, unitVar, createScratch(core), out)) {
    throw new UserError('data', 'the coefficients are not identified at these variances (collinear covariates under a flat prior)');
  }
  return out;
}

export interface ExactUnitPosterior {
  siteSd: MeanSd;
  unitSd: MeanSd;
  coefficients: MeanSd[];
  /** μ_i, one per site (all m). */
  sites: MeanSd[];
  /** Posterior mean of the weight on own data (γ_i, or f_i + (1 − f_i)γ_i for the finite-population target). */
  weightDirect: Float64Array;
  /** Posterior mode of (log σ_u, log σ_e) and the grid used. */
  mode: { logSiteSd: number; logUnitSd: number };
  /**
   * The trapezoid grid: log σ_u = siteFrom + a·spacingSite, a = 0..siteSteps (likewise σ_e);
   * leftTail: the mass below siteFrom was added analytically at a = 0.
   */
  grid: { siteFrom: number; siteSteps: number; spacingSite: number; unitFrom: number; unitSteps: number; spacingUnit: number; leftTail: boolean };
}

export interface ExactUnitOptions {
  /** Multiplies the grid spacing (tests halve it to check convergence). Default 1. */
  spacingFactor?: number;
  /** Means only (sds are NaN): skips the second moments, for the sampler certificate. */
  meansOnly?: boolean;
  /** Add the far left tail of log σ_u analytically (see MERGE_RATIO). Default true; tests compare. */
  mergeLeftTail?: boolean;
}

/**
 * Where σ_u² is below this fraction of every σ_e²/n_i, γ_i < 1e-10 and every conditional equals
 * its σ_u → 0 limit to that precision; the log density is then linear in log σ_u (slope = the
 * prior's, e.g. 1 for uniform or half-Cauchy), so that tail is added analytically.
 */
const MERGE_RATIO = 1e-10;

const PEAK_DROP = 40;
const EDGE_DROP = 30;
const MAX_SPACING = 0.1;
const MAX_POINTS = 4_000_000;

/** Maximum of a unimodal function on [a, b] by golden-section search (Kiefer 1953). */
function goldenMax(f: (x: number) => number, a: number, b: number, tol: number): number {
  const r = (Math.sqrt(5) - 1) / 2;
  let c = b - r * (b - a);
  let d = a + r * (b - a);
  let fc = f(c);
  let fd = f(d);
  while (b - a > tol) {
    if (fc > fd) {
      b = d;
      d = c;
      fd = fc;
      c = b - r * (b - a);
      fc = f(c);
    } else {
      a = c;
      c = d;
      fc = fd;
      d = a + r * (b - a);
      fd = f(d);
    }
  }
  return 0.5 * (a + b);
}

/** Maximiser of f along one axis from x0: bracket by doubling steps, then golden section. */
function axisMax(f: (x: number) => number, x0: number): number {
  let step = 0.5;
  const f0 = f(x0);
  let lo = x0 - step;
  let hi = x0 + step;
  let guard = 0;
  while (f(lo) > f0 && guard++ < 60) lo -= (step *= 2);
  step = 0.5;
  guard = 0;
  while (f(hi) > f0 && guard++ < 60) hi += (step *= 2);
  return goldenMax(f, lo, hi, 1e-9);
}

/**
 * The exact posterior of the unit model: σ_u, σ_e, β and every site target, as means and sds,
 * and the posterior mean weight on each site's own data (module doc).
 * @throws UserError('data') when the posterior cannot be integrated (no finite mode).
 */
export function exactUnitPosterior(data: UnitData, priors: UnitPriors, options: ExactUnitOptions = {}): ExactUnitPosterior {
  const spacingFactor = options.spacingFactor ?? 1;
  const core = unitCore(data, priors.coefficients);
  const scratch = createScratch(core);
  const f = (tu: number, te: number): number => {
    const value = unitLogMarginal(core, Math.exp(2 * tu), Math.exp(2 * te), scratch.work);
    return value + logPriorLogSigma(tu, priors.site_sd) + logPriorLogSigma(te, priors.unit_sd);
  };

  // Mode by coordinate ascent from a moment guess.
  let te = 0.5 * Math.log(data.withinYY / Math.max(data.units - data.sampledSites, 1));
  let tu = te;
  for (let iter = 0; iter < 200; iter++) {
    const nextE = axisMax((t) => f(tu, t), te);
    const nextU = axisMax((t) => f(t, nextE), tu);
    const moved = Math.abs(nextE - te) + Math.abs(nextU - tu);
    te = nextE;
    tu = nextU;
    if (moved < 1e-8) break;
  }
  const top = f(tu, te);
  if (!Number.isFinite(top)) throw new UserError('data', 'the unit model posterior has no finite mode; it cannot be integrated');
  const curvature = (g: (t: number) => number, t: number): number => {
    const h = 1e-3;
    const second = (g(t + h) - 2 * g(t) + g(t - h)) / (h * h);
    return second < 0 ? 1 / Math.sqrt(-second) : 1;
  };
  const sdU = curvature((t) => f(t, te), tu);
  const sdE = curvature((t) => f(tu, t), te);
  const hU = Math.min(sdU / 4, MAX_SPACING) * spacingFactor;
  const hE = Math.min(sdE / 4, MAX_SPACING) * spacingFactor;

  // Box: step out along each axis until the density has dropped by PEAK_DROP, then grow any
  // edge on which the (moment-weighted) density is still above e^{−EDGE_DROP} of the peak.
  const reach = (g: (t: number) => number, t0: number, step: number): number => {
    let t = t0;
    for (let k = 0; k < 100_000 && g(t) > top - PEAK_DROP; k++) t += step;
    return t;
  };
  let uLo = reach((t) => f(t, te), tu, -sdU);
  let uHi = reach((t) => f(t, te), tu, sdU);
  let eLo = reach((t) => f(tu, t), te, -sdE);
  let eHi = reach((t) => f(tu, t), te, sdE);
  const weighted = (u: number, e: number) => f(u, e) + 2 * Math.max(u - tu, 0) + 2 * Math.max(e - te, 0) - top;
  for (let round = 0; round < 40; round++) {
    const edge = (fixed: number, lo: number, hi: number, alongU: boolean) => {
      let worst = -Infinity;
      const steps = 200;
      for (let k = 0; k <= steps; k++) {
        const x = lo + ((hi - lo) * k) / steps;
        worst = Math.max(worst, alongU ? weighted(x, fixed) : weighted(fixed, x));
      }
      return worst;
    };
    let grown = false;
    const widthU = uHi - uLo;
    const widthE = eHi - eLo;
    if (edge(uLo, eLo, eHi, false) > -EDGE_DROP) (uLo -= 0.25 * widthU), (grown = true);
    if (edge(uHi, eLo, eHi, false) > -EDGE_DROP) (uHi += 0.25 * widthU), (grown = true);
    if (edge(eLo, uLo, uHi, true) > -EDGE_DROP) (eLo -= 0.25 * widthE), (grown = true);
    if (edge(eHi, uLo, uHi, true) > -EDGE_DROP) (eHi += 0.25 * widthE), (grown = true);
    if (!grown) break;
  }
  // The far left tail in log σ_u (σ_u → 0) as one analytic piece (see MERGE_RATIO).
  let largest = 0;
  for (let i = 0; i < data.m; i++) largest = Math.max(largest, data.n[i]);
  const tMerge = 0.5 * Math.log((MERGE_RATIO * Math.exp(2 * eLo)) / largest);
  const leftSlope = (t: number, e: number) => (f(t + hU, e) - f(t, e)) / hU;
  const mergeLeft = options.mergeLeftTail !== false && uLo < tMerge && leftSlope(tMerge, te) > 0.5;
  if (mergeLeft) uLo = tMerge;
  const stepsU = Math.ceil((uHi - uLo) / hU);
  const stepsE = Math.ceil((eHi - eLo) / hE);
  if ((stepsU + 1) * (stepsE + 1) > MAX_POINTS) {
    throw new UserError('data', 'the unit model posterior is too diffuse to integrate on a grid');
  }

  // Log density on the grid.
  const logDensity = new Float64Array((stepsU + 1) * (stepsE + 1));
  let peak = -Infinity;
  for (let a = 0; a <= stepsU; a++) {
    for (let b = 0; b <= stepsE; b++) {
      const v = f(uLo + a * hU, eLo + b * hE);
      logDensity[a * (stepsE + 1) + b] = v;
      if (v > peak) peak = v;
    }
  }

  const { p, m } = data;
  const pp = p * p;
  const cond = emptyConditional(p, m);
  // Moments are taken about the conditional means at the mode (β and every site), so that the
  // second moments do not cancel when a mean is large compared with its sd.
  if (!conditionalAt(data, core, Math.exp(2 * tu), Math.exp(2 * te), scratch, cond)) {
    throw new UserError('data', 'the coefficients are not identified at the posterior mode (collinear covariates under a flat prior)');
  }
  const betaRef = Float64Array.from(cond.beta);
  const siteRef = Float64Array.from(cond.siteMean);

  // Sites sharing a sample size share γ: the site targets' moments follow from per-size moments
  // of γ, γβ, γ²β, D = E[(β − β_ref)(β − β_ref)ᵀ | σ's], γD, γ²D (module doc), so each grid
  // point costs O(sizes × p²), not O(sites × p²).
  const groupOf = new Map<number, number>();
  for (let i = 0; i < m; i++) if (data.n[i] > 0 && !groupOf.has(data.n[i])) groupOf.set(data.n[i], groupOf.size);
  const G = groupOf.size;
  const sizes = new Float64Array(G);
  for (const [size, g] of groupOf) sizes[g] = size;
  const eG = new Float64Array(G);
  const eG2 = new Float64Array(G);
  const eGSe2 = new Float64Array(G);
  const eGB = new Float64Array(G * p);
  const eG2B = new Float64Array(G * p);
  const eGD = new Float64Array(G * pp);
  const eG2D = new Float64Array(G * pp);
  const eB = new Float64Array(p);
  const eD = new Float64Array(pp);
  let eSu2 = 0;
  let eSe2 = 0;
  let total = 0;
  const sigmaU = [0, 0];
  const sigmaE = [0, 0];
  const b = new Float64Array(p);
  const D = new Float64Array(pp);
  const meansOnly = options.meansOnly === true;
  for (let a = 0; a <= stepsU; a++) {
    const tU = uLo + a * hU;
    for (let k = 0; k <= stepsE; k++) {
      const rel = logDensity[a * (stepsE + 1) + k] - peak;
      if (rel < -45) continue; // below e^-45 of the peak: nothing at double precision
      const tE = eLo + k * hE;
      const columnWeight = k === 0 || k === stepsE ? 0.5 : 1;
      const su2 = Math.exp(2 * tU);
      const se2 = Math.exp(2 * tE);
      // Trapezoid weights in units of hU·hE; at a merged left edge, plus the tail's mass
      // ∫ e^{slope (t − t₀)} dt = 1/slope and its σ_u moments e^{j t₀}/(slope + j).
      let w = Math.exp(rel) * columnWeight * (a === 0 || a === stepsU ? 0.5 : 1);
      let wSigma = w * Math.exp(tU);
      let wSigma2 = w * su2;
      if (a === 0 && mergeLeft) {
        const slope = Math.max((logDensity[(stepsE + 1) + k] - logDensity[k]) / hU, 0.5);
        const tail = (Math.exp(rel) * columnWeight) / hU;
        w += tail / slope;
        wSigma += (tail * Math.exp(tU)) / (slope + 1);
        wSigma2 += (tail * su2) / (slope + 2);
      }
      if (!betaAt(core, su2, se2, scratch, cond)) continue;
      total += w;
      sigmaU[0] += wSigma;
      sigmaU[1] += wSigma2;
      sigmaE[0] += w * Math.exp(tE);
      sigmaE[1] += w * se2;
      eSu2 += wSigma2;
      eSe2 += w * se2;
      for (let j = 0; j < p; j++) b[j] = cond.beta[j] - betaRef[j];
      for (let j = 0; j < p; j++) eB[j] += w * b[j];
      if (meansOnly) {
        for (let g = 0; g < G; g++) {
          const w1 = (w * su2) / (su2 + se2 / sizes[g]);
          eG[g] += w1;
          for (let j = 0; j < p; j++) eGB[g * p + j] += w1 * b[j];
        }
        continue;
      }
      for (let j = 0; j < p; j++) for (let l = 0; l < p; l++) D[j * p + l] = cond.betaCov[j * p + l] + b[j] * b[l];
      for (let c = 0; c < pp; c++) eD[c] += w * D[c];
      for (let g = 0; g < G; g++) {
        const gamma = su2 / (su2 + se2 / sizes[g]);
        const w1 = w * gamma;
        const w2 = w1 * gamma;
        eG[g] += w1;
        eG2[g] += w2;
        eGSe2[g] += w1 * se2;
        for (let j = 0; j < p; j++) {
          eGB[g * p + j] += w1 * b[j];
          eG2B[g * p + j] += w2 * b[j];
        }
        for (let c = 0; c < pp; c++) {
          eGD[g * pp + c] += w1 * D[c];
          eG2D[g * pp + c] += w2 * D[c];
        }
      }
    }
  }
  const summary = (m1: number, m2: number): MeanSd => {
    const mean = m1 / total;
    return { mean, sd: meansOnly ? NaN : Math.sqrt(Math.max(m2 / total - mean * mean, 0)) };
  };
  const coefficients = Array.from({ length: p }, (_, j) => {
    const centred = summary(eB[j], eD[j * p + j]);
    return { mean: betaRef[j] + centred.mean, sd: centred.sd };
  });

  const form = siteForms(data);
  const dot = (x: Float64Array, xo: number, y: Float64Array, yo: number) => {
    let v = 0;
    for (let j = 0; j < p; j++) v += x[xo + j] * y[yo + j];
    return v;
  };
  /** xᵀ M y for p-vectors at offsets and a p × p matrix at an offset. */
  const bilinear = (x: Float64Array, xo: number, M: Float64Array, mo: number, y: Float64Array, yo: number) => {
    let v = 0;
    for (let r = 0; r < p; r++) for (let c = 0; c < p; c++) v += x[xo + r] * M[mo + r * p + c] * y[yo + c];
    return v;
  };
  const sites: MeanSd[] = [];
  const weightDirect = new Float64Array(m);
  for (let i = 0; i < m; i++) {
    const o = i * p;
    if (form.kind[i] === 2) {
      sites.push({ mean: form.c0[i], sd: 0 });
      weightDirect[i] = 1;
      continue;
    }
    // μ − ref = c0 + c1γ + (A0 − γA1)ᵀ(β − β_ref) + noise, with the references folded into c0, c1.
    const c0 = form.c0[i] + dot(form.A0, o, betaRef, 0) - siteRef[i];
    if (form.kind[i] === 1) {
      const m1 = c0 * total + dot(form.A0, o, eB, 0);
      const m2 = c0 * c0 * total + 2 * c0 * dot(form.A0, o, eB, 0) + bilinear(form.A0, o, eD, 0, form.A0, o) + eSu2 + form.noiseFixed[i] * eSe2;
      const centred = summary(m1, m2);
      sites.push({ mean: siteRef[i] + centred.mean, sd: centred.sd });
      continue;
    }
    const g = groupOf.get(data.n[i])!;
    const c1 = form.c1[i] - dot(form.A1, o, betaRef, 0);
    const m1 = c0 * total + c1 * eG[g] + dot(form.A0, o, eB, 0) - dot(form.A1, o, eGB, g * p);
    let m2 = c0 * c0 * total + 2 * c0 * c1 * eG[g] + c1 * c1 * eG2[g];
    m2 += 2 * c0 * dot(form.A0, o, eB, 0) + 2 * (c1 * dot(form.A0, o, eGB, g * p) - c0 * dot(form.A1, o, eGB, g * p)) - 2 * c1 * dot(form.A1, o, eG2B, g * p);
    m2 += bilinear(form.A0, o, eD, 0, form.A0, o) - 2 * bilinear(form.A1, o, eGD, g * pp, form.A0, o) + bilinear(form.A1, o, eG2D, g * pp, form.A1, o);
    m2 += form.noiseGamma[i] * eGSe2[g] + form.noiseFixed[i] * eSe2;
    const centred = summary(m1, m2);
    sites.push({ mean: siteRef[i] + centred.mean, sd: centred.sd });
    const fraction = data.finitePopulation ? Math.min(data.n[i] / data.populationSize[i], 1) : 0;
    weightDirect[i] = fraction + (1 - fraction) * (eG[g] / total);
  }
  return {
    siteSd: summary(sigmaU[0], sigmaU[1]),
    unitSd: summary(sigmaE[0], sigmaE[1]),
    coefficients,
    sites,
    weightDirect,
    mode: { logSiteSd: tu, logUnitSd: te },
    grid: { siteFrom: uLo, siteSteps: stepsU, spacingSite: hU, unitFrom: eLo, unitSteps: stepsE, spacingUnit: hE, leftTail: mergeLeft },
  };
}
