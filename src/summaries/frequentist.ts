/**
 * The frequentist cross-check for the area (Fay–Herriot) model: the empirical best linear
 * unbiased predictor (EBLUP) with the between-site variance estimated by REML (default), ML or
 * the Prasad–Rao moment estimator, and its second-order MSE estimate. Shown in the appendix
 * beside the posterior means; nothing here is random and nothing does I/O.
 *
 * The result type {@link FrequentistFit} is shared by every model's cross-check: the unit
 * (nested-error) model's EBLUP is meant to live in `frequentist-unit.ts`, return the same shape
 * (with `unitVariance` set) and be written by the same builders in `src/output/frequentist.ts`.
 *
 * ## Model and notation (Fay & Herriot 1979, JASA 74, 269–277)
 *   y_i = θ_i + e_i, e_i ~ N(0, D_i), D_i known;  θ_i = x_iᵀβ + u_i, u_i ~ N(0, A),
 * for the n sites with a direct estimate (A = σ_u², D_i = ψ_i). With w_j = 1/(A + D_j):
 *   P(A) = Σ_j w_j x_j x_jᵀ,  β̃(A) = P⁻¹ Σ_j w_j x_j y_j,  r_j = y_j − x_jᵀβ̃,  h_j = x_jᵀP⁻¹x_j,
 *   γ_i = A/(A + D_i),  EBLUP θ̂_i = γ̂_i y_i + (1 − γ̂_i) x_iᵀβ̂   (β̂ = β̃(Â), γ̂_i = γ_i(Â)).
 * The formulas below are those of /work/shared/checks/FORMULAS.md §2, which is itself written
 * from memory ([M]) of Prasad & Rao (1990), Datta & Lahiri (2000) and Rao & Molina (2015);
 * the tests check every one of them against closed forms, brute force and simulation.
 *
 * ## Estimating A (Rao & Molina 2015, *Small Area Estimation* 2nd ed., §6.1.2 — recalled)
 * Log-likelihood (β profiled out) and restricted log-likelihood (Harville 1977, JASA 72,
 * 320–338 — recalled):
 *   ℓ(A)   = −½ [ n log 2π       + Σ log(A + D_j)            + Σ w_j r_j² ]
 *   ℓ_R(A) = −½ [ (n − p) log 2π + Σ log(A + D_j) + log|P| + Σ w_j r_j² ]
 * Scores and expected (Fisher) informations, with Π = V⁻¹ − V⁻¹X P⁻¹ XᵀV⁻¹ (so Πy = W r):
 *   ML:   s = −½ Σ w_j + ½ Σ w_j² r_j²,           I = ½ Σ w_j²
 *   REML: s = −½ tr Π + ½ Σ w_j² r_j²,            I = ½ tr Π²
 *   tr Π  = Σ w_j − Σ w_j² h_j,
 *   tr Π² = Σ w_j² − 2 Σ w_j³ h_j + ‖Σ w_j² z_j z_jᵀ‖²_F,  z_j = L⁻¹x_j (P = LLᵀ).
 * Fisher scoring A ← A + s/I, started from the Prasad–Rao moment estimator
 *   Â_PR = max(0, [Σ u_j² − Σ D_j (1 − h⁰_jj)] / (n − p)),  u = OLS residuals, h⁰ = OLS leverages,
 * with step halving until the (restricted) likelihood does not decrease, and every step
 * projected onto A ≥ 0. At A = 0 with s(0) ≤ 0 the maximum over A ≥ 0 is the boundary itself
 * (the likelihood cannot rise into A > 0 to first order): Â = 0, `atBoundary` is set.
 * Fisher scoring finds a local maximum from the moment start; the tests compare with a
 * brute-force grid over A.
 *
 * ## MSE (Prasad & Rao 1990, JASA 85, 163–171; Datta & Lahiri 2000, Statistica Sinica 10,
 * 613–627; Rao & Molina 2015 §6.2.1 — all recalled, FORMULAS.md §2 [M])
 *   g1_i = γ_i D_i,  g2_i = (1 − γ_i)² h_i,  g3_i = D_i² (A + D_i)⁻³ V̄(A),
 *   V̄_REML = V̄_ML = 2 / Σ_j (A + D_j)⁻²  (inverse Fisher information of A),
 *   V̄_PR = 2 n⁻² Σ_j (A + D_j)²,
 *   mse_i = g1_i(Â) + g2_i(Â) + 2 g3_i(Â)                                (REML, PR)
 *   mse_i = g1_i(Â) + g2_i(Â) + 2 g3_i(Â) − b_ML(Â) ∂g1_i/∂A             (ML)
 * where ∂g1_i/∂A = (1 − γ_i)² and b_ML(A) = −tr(P⁻¹ Σ_j w_j² x_j x_jᵀ) / Σ_j w_j² =
 * −Σ w_j² h_j / Σ w_j² is the O(1/n) bias of Â_ML (ML ignores the p degrees of freedom spent
 * on β; REML's bias is of smaller order, so REML needs no such term). The 2 g3 (rather than g3)
 * and the bias term make the estimator second-order unbiased: E g1(Â) ≈ g1(A) − g3(A) + b g1'(A).
 *
 * ## Sites without a direct estimate (Rao & Molina 2015 §6.2 — recalled)
 * The EBLUP is the regression-synthetic x_iᵀβ̂ and, u_i being independent of all data,
 *   MSE = A + x_iᵀ Var(β̂) x_i,  estimated by Â + x_iᵀP(Â)⁻¹x_i   (− b_ML(Â) for ML).
 * This is the D_i → ∞ limit of the formulas above (γ_i → 0, g1 → A, g2 → h_i, g3 → 0).
 *
 * ## The boundary Â = 0
 * Then γ̂_i = 0 and every EBLUP is the regression-synthetic estimate x_iᵀβ̂, with β̂ the
 * precision-weighted (D⁻¹) regression, exactly as for a site without data; we estimate its MSE
 * the same way too: g1 = 0, g2 = x_iᵀ(Σ x_j x_jᵀ/D_j)⁻¹x_i, and the g3 term is set to 0
 * (ML keeps its bias term −b_ML(0) > 0, as for unsampled sites). So under REML the MSE at the
 * boundary is g2 alone: for one intercept, the variance of the precision-weighted pooled mean.
 * Why not keep 2 g3 = 2 V̄(0)/D_i? The g3 term linearises γ_i(A) = A/(A + D_i) around A, which
 * needs the sd of Â, √V̄, to be small against A + D_i; at Â = 0 with few sites it is not
 * (eight schools: √V̄(0) ≈ 61 against D_E = 81, and 2 g3 for school E would be 92, putting the
 * MSE above the direct estimate's own variance, 81). When the true A is 0, REML depends on the
 * data only through error contrasts, which are independent of the GLS β̂ (V = D), so given
 * Â = 0 the error x_iᵀ(β̂ − β) has MSE exactly g2: the simulation test checks this and that
 * 2 g3 would overstate it many times over. The price: given Â = 0 and a true A > 0 the MSE is
 * about g2 + A, so when A is small but positive the figure is too low. Averaged over all data
 * sets (a development simulation, REML, 10 sites, true A from 0 to D̄/4) the MSE estimate was
 * about 20–60% above the empirical MSE with the term dropped and 40–130% above with it kept:
 * near the boundary the interior estimates' 2 g3 already errs high.
 * The appendix says so, beside the posterior sd, which does allow for a positive A.
 */
import type { AreaData } from '../data/types.js';
import { UserError } from '../errors.js';
import { backSolve, cholesky, choleskyLogDet, forwardSolve, lowerTriangularInverse } from '../models/linalg.js';

/** How the between-site variance was estimated. PR = Prasad–Rao moments (also the REML/ML start). */
export type VarianceMethod = 'REML' | 'ML' | 'PR';

export interface CoefficientEstimate {
  name: string;
  estimate: number;
  /** sqrt of the diagonal of P(Â)⁻¹ = Var(β̂) at the estimated variance (Â treated as known). */
  se: number;
}

/**
 * What every model's frequentist cross-check returns, and what `src/output/frequentist.ts`
 * writes. One entry per site (all m, sampled or not) in the order of the sites file.
 */
export interface FrequentistFit {
  model: 'area' | 'unit';
  method: VarianceMethod;
  /** Between-site variance estimate σ̂_u² (A). */
  siteVariance: number;
  /** Within-site variance σ̂_e² (unit model only). */
  unitVariance?: number;
  converged: boolean;
  /** Fisher-scoring iterations (0 for the moment estimator). */
  iterations: number;
  /** The estimate of the between-site variance is 0 (all estimates are regression-synthetic). */
  atBoundary: boolean;
  coefficients: CoefficientEstimate[];
  siteIds: string[];
  eblup: Float64Array;
  /** Estimated mean squared error of each EBLUP. */
  mse: Float64Array;
  /** Maximised log-likelihood (ML) or restricted log-likelihood (REML); NaN for PR. */
  logLikelihood: number;
  /** How the MSE was estimated, in words for the appendix. */
  mseNote: string;
}

/** The parts of the MSE estimate, per site (all m). mse = g1 + g2 + 2 g3 + biasCorrection. */
export interface AreaMseParts {
  g1: Float64Array;
  g2: Float64Array;
  g3: Float64Array;
  /** −b_ML(Â)(1 − γ_i)² for ML (with (1 − γ_i) = 1 for unsampled sites); 0 for REML and PR. */
  biasCorrection: Float64Array;
  mse: Float64Array;
  /** V̄(Â), the approximate variance of Â used in g3. */
  varianceOfSiteVariance: number;
}

export interface AreaEblup extends FrequentistFit {
  model: 'area';
  /** γ̂_i = Â/(Â + D_i), the weight on the site's own data; 0 for unsampled sites. */
  weightDirect: Float64Array;
  /** Â_PR, the moment estimate Fisher scoring started from. */
  startValue: number;
  parts: AreaMseParts;
}

export interface AreaEblupOptions {
  /** Relative tolerance on the change in A between iterations. Default 1e-10. */
  tolerance?: number;
  /** Default 200. */
  maxIterations?: number;
}

// ---------------------------------------------------------------------------------------------
// The sites with data, packed, and one evaluation at a given A

interface AreaProblem {
  /** Sites with data. */
  n: number;
  p: number;
  /** n × p, row-major. */
  X: Float64Array;
  y: Float64Array;
  D: Float64Array;
  /** Mean of D, the scale for the convergence test on A. */
  scale: number;
}

/** Everything known at one value of A; buffers are reused between evaluations. */
interface Evaluation {
  A: number;
  /** Cholesky factor of P(A). */
  L: Float64Array;
  beta: Float64Array;
  /** w_j = 1/(A + D_j), r_j, h_j for the sites with data. */
  w: Float64Array;
  r: Float64Array;
  h: Float64Array;
  sumLogV: number;
  /** Σ w_j r_j². */
  quad: number;
  logDetP: number;
}

function packProblem(data: AreaData): AreaProblem {
  const { m, p } = data;
  let n = 0;
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
    n++;
  }
  if (n <= p) {
    throw new UserError(
      'data',
      `the frequentist cross-check needs more sites with a direct estimate (${n}) than coefficients (${p}) ` +
        'to estimate the between-site variance',
    );
  }
  const X = new Float64Array(n * p);
  const y = new Float64Array(n);
  const D = new Float64Array(n);
  let k = 0;
  let sumD = 0;
  for (let i = 0; i < m; i++) {
    if (!data.hasData[i]) continue;
    X.set(data.X.subarray(i * p, (i + 1) * p), k * p);
    y[k] = data.direct[i];
    D[k] = data.variance[i];
    sumD += D[k];
    k++;
  }
  return { n, p, X, y, D, scale: sumD / n };
}

function newEvaluation(prob: AreaProblem): Evaluation {
  return {
    A: Number.NaN,
    L: new Float64Array(prob.p * prob.p),
    beta: new Float64Array(prob.p),
    w: new Float64Array(prob.n),
    r: new Float64Array(prob.n),
    h: new Float64Array(prob.n),
    sumLogV: 0,
    quad: 0,
    logDetP: 0,
  };
}

/**
 * Fills `ev` at A: weights, the GLS fit β̃(A), residuals, leverages h_j = ‖L⁻¹x_j‖².
 * Throws a UserError if the covariates are collinear among the sites with data.
 */
function evaluateAt(prob: AreaProblem, data: AreaData, A: number, ev: Evaluation, z: Float64Array): void {
  const { n, p, X, y, D } = prob;
  const { L, beta, w, r, h } = ev;
  L.fill(0);
  beta.fill(0); // holds Σ w x y until solved
  let sumLogV = 0;
  for (let j = 0; j < n; j++) {
    const v = A + D[j];
    w[j] = 1 / v;
    sumLogV += Math.log(v);
    const o = j * p;
    for (let a = 0; a < p; a++) {
      const wxa = w[j] * X[o + a];
      beta[a] += wxa * y[j];
      for (let b = 0; b <= a; b++) L[a * p + b] += wxa * X[o + b];
    }
  }
  if (!cholesky(L, p, L)) {
    throw new UserError(
      'data',
      `the covariates (${data.coefficientNames.join(', ')}) are collinear among the ${n} sites with a direct estimate; ` +
        'the frequentist cross-check cannot separate their coefficients',
    );
  }
  forwardSolve(L, p, beta, beta);
  backSolve(L, p, beta, beta);
  let quad = 0;
  for (let j = 0; j < n; j++) {
    const o = j * p;
    let fit = 0;
    for (let a = 0; a < p; a++) fit += X[o + a] * beta[a];
    r[j] = y[j] - fit;
    quad += w[j] * r[j] * r[j];
    forwardSolve(L, p, X.subarray(o, o + p), z);
    let hj = 0;
    for (let a = 0; a < p; a++) hj += z[a] * z[a];
    h[j] = hj;
  }
  ev.A = A;
  ev.sumLogV = sumLogV;
  ev.quad = quad;
  ev.logDetP = choleskyLogDet(L, p);
}

const LOG_2PI = Math.log(2 * Math.PI);

function logLikelihoodOf(prob: AreaProblem, ev: Evaluation, method: 'REML' | 'ML'): number {
  return method === 'ML'
    ? -0.5 * (prob.n * LOG_2PI + ev.sumLogV + ev.quad)
    : -0.5 * ((prob.n - prob.p) * LOG_2PI + ev.sumLogV + ev.logDetP + ev.quad);
}

/** Score and expected information for A at the evaluation (formulas in the module doc). */
function scoreAndInformation(
  prob: AreaProblem,
  ev: Evaluation,
  method: 'REML' | 'ML',
  z: Float64Array,
  M: Float64Array,
): { score: number; information: number } {
  const { n, p, X } = prob;
  const { w, r, h, L } = ev;
  let sumW = 0;
  let sumW2 = 0;
  let sumW2R2 = 0;
  let sumW2H = 0;
  let sumW3H = 0;
  if (method === 'REML') M.fill(0);
  for (let j = 0; j < n; j++) {
    const wj = w[j];
    const w2 = wj * wj;
    sumW += wj;
    sumW2 += w2;
    sumW2R2 += w2 * r[j] * r[j];
    if (method === 'ML') continue;
    sumW2H += w2 * h[j];
    sumW3H += w2 * wj * h[j];
    // M += w_j² z_j z_jᵀ (lower triangle), z_j = L⁻¹x_j.
    forwardSolve(L, p, X.subarray(j * p, (j + 1) * p), z);
    for (let a = 0; a < p; a++) for (let b = 0; b <= a; b++) M[a * p + b] += w2 * z[a] * z[b];
  }
  if (method === 'ML') return { score: -0.5 * sumW + 0.5 * sumW2R2, information: 0.5 * sumW2 };
  let frob = 0;
  for (let a = 0; a < p; a++) {
    frob += M[a * p + a] * M[a * p + a];
    for (let b = 0; b < a; b++) frob += 2 * M[a * p + b] * M[a * p + b];
  }
  const traceProjection = sumW - sumW2H;
  const traceProjectionSquared = sumW2 - 2 * sumW3H + frob;
  return { score: -0.5 * traceProjection + 0.5 * sumW2R2, information: 0.5 * traceProjectionSquared };
}

// ---------------------------------------------------------------------------------------------
// Estimating A

/**
 * Prasad–Rao (1990) moment estimator of the between-site variance, truncated at 0:
 * Â_PR = max(0, [Σ u_j² − Σ D_j (1 − h⁰_jj)] / (n − p)) with OLS residuals u and leverages h⁰
 * (FORMULAS.md §2 [M]; unbiased before truncation since E Σ u_j² = A(n − p) + Σ D_j(1 − h⁰_jj)).
 */
export function prasadRaoVariance(data: AreaData): number {
  return prasadRaoOf(packProblem(data), data);
}

function prasadRaoOf(prob: AreaProblem, data: AreaData): number {
  // OLS is the GLS fit with equal weights: evaluate at D ≡ 1, A = 0.
  const ols: AreaProblem = { ...prob, D: new Float64Array(prob.n).fill(1) };
  const ev = newEvaluation(prob);
  evaluateAt(ols, data, 0, ev, new Float64Array(prob.p));
  let num = 0;
  for (let j = 0; j < prob.n; j++) num += ev.r[j] * ev.r[j] - prob.D[j] * (1 - ev.h[j]);
  return Math.max(0, num / (prob.n - prob.p));
}

interface VarianceFit {
  A: number;
  converged: boolean;
  iterations: number;
  atBoundary: boolean;
  logLikelihood: number;
  start: number;
}

function fitVariance(
  prob: AreaProblem,
  data: AreaData,
  method: VarianceMethod,
  options: AreaEblupOptions,
): VarianceFit {
  const start = prasadRaoOf(prob, data);
  if (method === 'PR') {
    return { A: start, converged: true, iterations: 0, atBoundary: start === 0, logLikelihood: Number.NaN, start };
  }
  const tolerance = options.tolerance ?? 1e-10;
  const maxIterations = options.maxIterations ?? 200;
  const z = new Float64Array(prob.p);
  const M = new Float64Array(prob.p * prob.p);
  let current = newEvaluation(prob);
  let trial = newEvaluation(prob);
  evaluateAt(prob, data, start, current, z);
  let logLik = logLikelihoodOf(prob, current, method);
  for (let iteration = 1; iteration <= maxIterations; iteration++) {
    const A = current.A;
    const { score, information } = scoreAndInformation(prob, current, method, z, M);
    const step = score / information;
    if (A === 0 && !(step > 0)) {
      // Kuhn–Tucker at the boundary: the likelihood falls into A > 0.
      return { A: 0, converged: true, iterations: iteration, atBoundary: true, logLikelihood: logLik, start };
    }
    // Step halving, each trial projected onto A ≥ 0, until the likelihood does not decrease.
    let factor = 1;
    let next = Math.max(0, A + step);
    let nextLogLik = -Infinity;
    for (let halving = 0; halving < 60; halving++) {
      evaluateAt(prob, data, next, trial, z);
      nextLogLik = logLikelihoodOf(prob, trial, method);
      if (nextLogLik >= logLik - 1e-12 * Math.abs(logLik)) break;
      factor /= 2;
      next = Math.max(0, A + factor * step);
    }
    const change = Math.abs(next - A);
    [current, trial] = [trial, current];
    logLik = nextLogLik;
    if (change <= tolerance * (current.A + prob.scale)) {
      return { A: current.A, converged: true, iterations: iteration, atBoundary: current.A === 0, logLikelihood: logLik, start };
    }
  }
  return { A: current.A, converged: false, iterations: maxIterations, atBoundary: current.A === 0, logLikelihood: logLik, start };
}

/**
 * The maximised criterion's function itself: log-likelihood (ML) or restricted log-likelihood
 * (REML) of the area model at between-site variance A ≥ 0, β profiled out (module doc).
 */
export function areaLogLikelihood(data: AreaData, A: number, method: 'REML' | 'ML'): number {
  const prob = packProblem(data);
  const ev = newEvaluation(prob);
  evaluateAt(prob, data, A, ev, new Float64Array(prob.p));
  return logLikelihoodOf(prob, ev, method);
}

// ---------------------------------------------------------------------------------------------
// EBLUP and MSE at a given A

interface SiteFigures {
  eblup: Float64Array;
  weightDirect: Float64Array;
  parts: AreaMseParts;
  coefficientSe: Float64Array;
  beta: Float64Array;
}

function siteFigures(prob: AreaProblem, data: AreaData, A: number, method: VarianceMethod): SiteFigures {
  const { m, p } = data;
  const z = new Float64Array(p);
  const ev = newEvaluation(prob);
  evaluateAt(prob, data, A, ev, z);
  let sumW2 = 0;
  let sumW2H = 0;
  let sumV2 = 0;
  for (let j = 0; j < prob.n; j++) {
    const w2 = ev.w[j] * ev.w[j];
    sumW2 += w2;
    sumW2H += w2 * ev.h[j];
    sumV2 += 1 / w2;
  }
  const varianceOfSiteVariance = method === 'PR' ? (2 * sumV2) / (prob.n * prob.n) : 2 / sumW2;
  const biasML = method === 'ML' ? -sumW2H / sumW2 : 0;
  const parts: AreaMseParts = {
    g1: new Float64Array(m),
    g2: new Float64Array(m),
    g3: new Float64Array(m),
    biasCorrection: new Float64Array(m),
    mse: new Float64Array(m),
    varianceOfSiteVariance,
  };
  const eblup = new Float64Array(m);
  const weightDirect = new Float64Array(m);
  for (let i = 0; i < m; i++) {
    const x = data.X.subarray(i * p, (i + 1) * p);
    let synthetic = 0;
    for (let a = 0; a < p; a++) synthetic += x[a] * ev.beta[a];
    forwardSolve(ev.L, p, x, z);
    let leverage = 0;
    for (let a = 0; a < p; a++) leverage += z[a] * z[a];
    if (data.hasData[i]) {
      const Di = data.variance[i];
      const gamma = A / (A + Di);
      const shrink = Di / (A + Di); // 1 − γ, without cancellation
      eblup[i] = gamma * data.direct[i] + shrink * synthetic;
      weightDirect[i] = gamma;
      parts.g1[i] = gamma * Di;
      parts.g2[i] = shrink * shrink * leverage;
      // At the boundary the g3 term is dropped (module doc, "The boundary Â = 0").
      parts.g3[i] = A > 0 ? ((shrink * shrink) / (A + Di)) * varianceOfSiteVariance : 0;
      parts.biasCorrection[i] = -biasML * shrink * shrink;
    } else {
      eblup[i] = synthetic;
      parts.g1[i] = A;
      parts.g2[i] = leverage;
      parts.biasCorrection[i] = -biasML;
    }
    parts.mse[i] = parts.g1[i] + parts.g2[i] + 2 * parts.g3[i] + parts.biasCorrection[i];
  }
  // Var(β̂) = P⁻¹ = L⁻ᵀL⁻¹: diagonal = column sums of squares of L⁻¹.
  const inverse = new Float64Array(p * p);
  lowerTriangularInverse(ev.L, p, inverse);
  const coefficientSe = new Float64Array(p);
  for (let a = 0; a < p; a++) {
    let s = 0;
    for (let k = a; k < p; k++) s += inverse[k * p + a] ** 2;
    coefficientSe[a] = Math.sqrt(s);
  }
  return { eblup, weightDirect, parts, coefficientSe, beta: Float64Array.from(ev.beta) };
}

/**
 * g1, g2, g3, the ML bias correction and the MSE estimate at a given between-site variance A,
 * with V̄ and the bias term of `method` (module doc). For tests and for what-if tables.
 */
export function areaMseParts(data: AreaData, A: number, method: VarianceMethod): AreaMseParts {
  if (!(A >= 0)) throw new RangeError(`areaMseParts: A must be ≥ 0, got ${A}`);
  return siteFigures(packProblem(data), data, A, method).parts;
}

const MSE_NOTES: Record<VarianceMethod, string> = {
  REML:
    'Prasad–Rao second-order MSE estimate g1 + g2 + 2·g3 at the REML estimate, with the variance of the ' +
    'between-site variance taken as 2 / Σ(Â + ψ_j)⁻² (Prasad & Rao 1990; Datta & Lahiri 2000).',
  ML:
    'Prasad–Rao second-order MSE estimate g1 + g2 + 2·g3 at the ML estimate, with the variance of the ' +
    'between-site variance taken as 2 / Σ(Â + ψ_j)⁻², plus the correction for the downward bias of the ML ' +
    'estimate (Datta & Lahiri 2000).',
  PR:
    'Prasad–Rao second-order MSE estimate g1 + g2 + 2·g3 at the moment estimate of the between-site ' +
    'variance (Prasad & Rao 1990).',
};

const UNSAMPLED_NOTE =
  ' Sites without a direct estimate get the regression-synthetic estimate, with MSE = between-site ' +
  'variance + the variance of the fitted regression value there.';

const BOUNDARY_NOTE =
  ' The between-site variance was estimated as 0, so every estimate is the regression-synthetic one and its ' +
  'MSE (g2, without the g3 term) treats that zero as known: it is too low if the true variance is small but positive.';

/**
 * EBLUP of every site's θ_i under the area model, with the between-site variance by REML
 * (default), ML or Prasad–Rao moments, and the Prasad–Rao / Datta–Lahiri MSE estimate.
 * Formulas, boundary handling and unsampled sites: module doc (Rao & Molina 2015 §§6.1–6.2,
 * recalled; FORMULAS.md §2 [M]).
 */
export function areaEblup(data: AreaData, method: VarianceMethod = 'REML', options: AreaEblupOptions = {}): AreaEblup {
  const prob = packProblem(data);
  const fit = fitVariance(prob, data, method, options);
  const figures = siteFigures(prob, data, fit.A, method);
  let mseNote = MSE_NOTES[method];
  if (prob.n < data.m) mseNote += UNSAMPLED_NOTE;
  if (fit.atBoundary) mseNote += BOUNDARY_NOTE;
  return {
    model: 'area',
    method,
    siteVariance: fit.A,
    converged: fit.converged,
    iterations: fit.iterations,
    atBoundary: fit.atBoundary,
    coefficients: data.coefficientNames.map((name, a) => ({
      name,
      estimate: figures.beta[a],
      se: figures.coefficientSe[a],
    })),
    siteIds: [...data.siteIds],
    eblup: figures.eblup,
    mse: figures.parts.mse,
    logLikelihood: fit.logLikelihood,
    mseNote,
    weightDirect: figures.weightDirect,
    startValue: fit.start,
    parts: figures.parts,
  };
}

// ---------------------------------------------------------------------------------------------
// Side by side with the posterior

/** A site's posterior mean and sd (from the sampler or the exact posterior), in site order. */
export interface PosteriorSite {
  mean: number;
  sd: number;
}

export interface FrequentistComparison {
  /** max_i |EBLUP_i − posterior mean_i| / posterior sd_i, and where. */
  largestDifference: { site: string; value: number };
  /** Mean over sites of |EBLUP_i − posterior mean_i| / posterior sd_i. */
  meanDifference: number;
  /** Range over sites of rmse_i / posterior sd_i. */
  rmseOverSd: { min: number; max: number };
  /** A few plain sentences for the appendix. */
  reading: string;
}

/** Below this many posterior sds the two estimates are called practically the same (our wording). */
const NEGLIGIBLE = 0.1;
/** Above this many posterior sds the difference is called material. */
const MATERIAL = 0.5;

function round(x: number, digits = 2): string {
  return Number.isFinite(x) ? x.toFixed(digits) : 'n/a';
}

/**
 * Compares the frequentist cross-check with the posterior, site by site, in posterior sds, and
 * words the result for the appendix. Both estimate the same θ_i under the same model: the EBLUP
 * plugs in one estimate of the between-site variance, the posterior averages over it, so the
 * two agree to O(1/m) as the number of sites m grows (tests/frequentist.test.ts) and differ
 * most with few sites or a variance estimate at or near zero.
 */
export function compareWithPosterior(fit: FrequentistFit, posterior: readonly PosteriorSite[]): FrequentistComparison {
  if (posterior.length !== fit.siteIds.length) {
    throw new RangeError(`compareWithPosterior: ${posterior.length} posterior sites for ${fit.siteIds.length} sites`);
  }
  let largest = { site: '', value: -Infinity };
  let sum = 0;
  let count = 0;
  let min = Infinity;
  let max = -Infinity;
  fit.siteIds.forEach((site, i) => {
    const { mean, sd } = posterior[i];
    const difference = Math.abs(fit.eblup[i] - mean) / sd;
    if (!Number.isFinite(difference)) return;
    if (difference > largest.value) largest = { site, value: difference };
    sum += difference;
    count++;
    const ratio = Math.sqrt(fit.mse[i]) / sd;
    min = Math.min(min, ratio);
    max = Math.max(max, ratio);
  });
  const meanDifference = count > 0 ? sum / count : Number.NaN;
  const sentences: string[] = [];
  if (!fit.converged) {
    sentences.push(
      `The ${fit.method} estimate of the between-site variance did not converge after ${fit.iterations} iterations; ` +
        'the frequentist figures are shown for reference only.',
    );
  }
  const size =
    largest.value < NEGLIGIBLE ? 'practically the same as' : largest.value < MATERIAL ? 'close to' : 'materially different from';
  sentences.push(
    `The frequentist estimates (${fit.method}) are ${size} the model estimates: they differ by at most ` +
      `${round(largest.value)} posterior sd (site ${largest.site}) and by ${round(meanDifference)} posterior sd on average; ` +
      `the frequentist root mean squared error is ${round(min)} to ${round(max)} times the posterior sd.`,
  );
  if (fit.atBoundary) {
    sentences.push(
      'The between-site variance was estimated as zero, so every frequentist estimate is the regression estimate and its ' +
        'error ignores the uncertainty in that variance; the posterior, which allows a positive variance, is the better guide.',
    );
  } else {
    sentences.push(
      'Both rest on the same model. The frequentist version plugs in one estimate of the between-site variance, while the ' +
        'posterior averages over its uncertainty; the two agree more closely the more sites there are.',
    );
  }
  return { largestDifference: largest, meanDifference, rmseOverSd: { min, max }, reading: sentences.join(' ') };
}
