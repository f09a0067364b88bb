/**
 * The frequentist cross-check of the unit model: the nested-error EBLUP (Battese, Harter &
 * Fuller 1988) with the variance components by REML, from the per-site sufficient statistics.
 *
 * Model: y_ij = x_ijᵀβ + v_i + e_ij, v_i ~ N(0, σ_v²), e_ij ~ N(0, σ_e²). The likelihood splits
 * into the site means, ȳ_i ~ N(x̄_iᵀβ, σ_v² + σ_e²/n_i), and the within-site deviations, which
 * carry σ_e² alone with N − m_s degrees of freedom (Fuller & Battese 1973, JASA 68; recalled).
 * With λ = σ_v²/σ_e² every variance is σ_e² times a function of λ, so σ_e² profiles out in
 * closed form and the restricted log-likelihood becomes a function of λ ≥ 0 alone:
 *
 *   ℓ_R(λ) = −½ [ (N − p) log(Q(λ)/(N − p)) + Σ_i log(λ + 1/n_i) + log|B(λ)| ],
 *   B(λ) = Σ_i x̄_i x̄_iᵀ/(λ + 1/n_i) + W_xx,   Q(λ) = min_β Σ_i (ȳ_i − x̄_iᵀβ)²/(λ + 1/n_i) + W(β),
 *
 * with W the pooled within-site sums of squares and cross-products. ℓ_R is maximised over λ on
 * a log grid, refined by golden-section search, with λ = 0 (σ_v² = 0) checked as the boundary.
 *
 * EBLUP of μ_i = X̄_iᵀβ + v_i: X̄_iᵀβ̂ + γ_i(ȳ_i − x̄_iᵀβ̂), γ_i = σ_v²/(σ_v² + σ_e²/n_i); the
 * regression-synthetic X̄_iᵀβ̂ for unsampled sites. MSE (Prasad & Rao 1990; Rao & Molina 2015
 * §7.2.2, recalled): g1 + g2 + 2 g3 with g1 = γ_i σ_e²/n_i, g2 = (X̄_i − γ_i x̄_i)ᵀ Var(β̂)
 * (X̄_i − γ_i x̄_i), g3 = n_i⁻² (σ_v² + σ_e²/n_i)⁻³ [σ_e⁴ V_vv + σ_v⁴ V_ee − 2 σ_e² σ_v² V_ve],
 * V the inverse of the information of (σ_v², σ_e²); unsampled sites: σ_v² + X̄_iᵀ Var(β̂) X̄_i.
 */
import type { UnitData } from '../data/unit-data.js';
import { UserError } from '../errors.js';
import { cholesky, choleskyInverse, choleskyLogDet, choleskySolve } from '../models/linalg.js';
import type { FrequentistFit } from './frequentist.js';

interface Profile {
  logLikelihood: number;
  q: number;
  beta: Float64Array;
  /** B(λ)⁻¹ (Var(β̂) = σ_e² B⁻¹). */
  bInverse: Float64Array;
}

/** The profiled restricted log-likelihood at λ, with β̂ and B⁻¹ there. */
function profileAt(data: UnitData, lambda: number): Profile | null {
  const { m, p } = data;
  const B = new Float64Array(p * p);
  const b = new Float64Array(p);
  let yy = data.withinYY;
  let logDet = 0;
  for (let j = 0; j < p * p; j++) B[j] = data.withinXX[j];
  for (let j = 0; j < p; j++) b[j] = data.withinXY[j];
  for (let i = 0; i < m; i++) {
    const n = data.n[i];
    if (!(n > 0)) continue;
    const v = lambda + 1 / n;
    logDet += Math.log(v);
    const w = 1 / v;
    const y = data.ybar[i];
    yy += w * y * y;
    for (let j = 0; j < p; j++) {
      const xj = data.xbar[i * p + j];
      b[j] += w * xj * y;
      for (let l = 0; l < p; l++) B[j * p + l] += w * xj * data.xbar[i * p + l];
    }
  }
  const L = new Float64Array(p * p);
  if (!cholesky(B, p, L)) return null;
  const beta = new Float64Array(p);
  choleskySolve(L, p, b, beta);
  let q = yy;
  for (let j = 0; j < p; j++) q -= beta[j] * b[j];
  const dof = data.units - p;
  if (!(q > 0) || dof <= 0) return null;
  const bInverse = new Float64Array(p * p);
  choleskyInverse(L, p, bInverse);
  return {
    logLikelihood: -0.5 * (dof * Math.log(q / dof) + logDet + choleskyLogDet(L, p)),
    q,
    beta,
    bInverse,
  };
}

/** Golden-section search for the maximum of f on [lo, hi] (log λ scale). */
function goldenMax(f: (x: number) => number, lo: number, hi: number, tolerance: number): number {
  const ratio = (Math.sqrt(5) - 1) / 2;
  let a = lo;
  let b = hi;
  let c = b - ratio * (b - a);
  let d = a + ratio * (b - a);
  let fc = f(c);
  let fd = f(d);
  while (b - a > tolerance) {
    if (fc > fd) {
      b = d;
      d = c;
      fd = fc;
      c = b - ratio * (b - a);
      fc = f(c);
    } else {
      a = c;
      c = d;
      fc = fd;
      d = a + ratio * (b - a);
      fd = f(d);
    }
  }
  return (a + b) / 2;
}

/**
 * A few Newton steps on f′ from central differences: golden section alone stalls at about
 * √ε relative precision on a flat maximum, Newton reaches full precision in two or three steps.
 */
function newtonPolish(f: (x: number) => number, x0: number): number {
  const h = 1e-3;
  let x = x0;
  for (let k = 0; k < 4; k++) {
    const up = f(x + h);
    const mid = f(x);
    const down = f(x - h);
    const curvature = (up - 2 * mid + down) / (h * h);
    if (!(curvature < 0)) break;
    const move = -((up - down) / (2 * h)) / curvature;
    if (!Number.isFinite(move) || Math.abs(move) > 10 * h) break;
    x += move;
  }
  return x;
}

/** ½-trace information of (σ_v², σ_e²) for the nested-error model (exact block algebra). */
function varianceComponentCovariance(data: UnitData, sv2: number, se2: number): [number, number, number] {
  let ivv = 0;
  let ive = 0;
  let iee = 0;
  for (let i = 0; i < data.m; i++) {
    const n = data.n[i];
    if (!(n > 0)) continue;
    const d = se2 + n * sv2; // the eigenvalue of V_i along the ones vector
    ivv += (n * n) / (d * d);
    ive += n / (d * d);
    iee += (n - 1) / (se2 * se2) + 1 / (d * d);
  }
  ivv /= 2;
  ive /= 2;
  iee /= 2;
  const det = ivv * iee - ive * ive;
  return [iee / det, -ive / det, ivv / det];
}

const LOG_LAMBDA_MIN = -14;
const LOG_LAMBDA_MAX = 14;
const GRID_POINTS = 57;

/** REML nested-error EBLUP of every site's mean μ_i = X̄_iᵀβ + v_i. */
export function unitEblup(data: UnitData): FrequentistFit {
  const { m, p } = data;
  if (data.units - p <= 0 || data.sampledSites <= 1)
    throw new UserError('data', `the frequentist cross-check needs more sampled units than coefficients and at least 2 sampled sites`);
  const value = (logLambda: number): number => profileAt(data, Math.exp(logLambda))?.logLikelihood ?? -Infinity;
  let bestX = LOG_LAMBDA_MIN;
  let bestValue = -Infinity;
  const step = (LOG_LAMBDA_MAX - LOG_LAMBDA_MIN) / (GRID_POINTS - 1);
  for (let k = 0; k < GRID_POINTS; k++) {
    const x = LOG_LAMBDA_MIN + k * step;
    const v = value(x);
    if (v > bestValue) {
      bestValue = v;
      bestX = x;
    }
  }
  const refined = newtonPolish(value, goldenMax(value, Math.max(bestX - step, LOG_LAMBDA_MIN - step), bestX + step, 1e-8));
  const boundary = profileAt(data, 0);
  let lambda = Math.exp(refined);
  let profile = profileAt(data, lambda);
  if (!profile) throw new UserError('data', 'the frequentist cross-check failed: covariates are collinear on the sampled units');
  const atBoundary = boundary !== null && boundary.logLikelihood >= profile.logLikelihood;
  if (atBoundary) {
    lambda = 0;
    profile = boundary!;
  }
  const se2 = profile.q / (data.units - p);
  const sv2 = lambda * se2;
  const [vvv, vve, vee] = varianceComponentCovariance(data, sv2, se2);
  const eblup = new Float64Array(m);
  const mse = new Float64Array(m);
  const diff = new Float64Array(p);
  for (let i = 0; i < m; i++) {
    const n = data.n[i];
    let synthetic = 0;
    for (let j = 0; j < p; j++) synthetic += data.populationMeans[i * p + j] * profile.beta[j];
    const gamma = n > 0 ? sv2 / (sv2 + se2 / n) : 0;
    let fittedMean = 0;
    for (let j = 0; j < p; j++) fittedMean += data.xbar[i * p + j] * profile.beta[j];
    eblup[i] = n > 0 ? synthetic + gamma * (data.ybar[i] - fittedMean) : synthetic;
    for (let j = 0; j < p; j++) diff[j] = data.populationMeans[i * p + j] - gamma * data.xbar[i * p + j];
    let g2 = 0;
    for (let j = 0; j < p; j++) for (let l = 0; l < p; l++) g2 += diff[j] * se2 * profile.bInverse[j * p + l] * diff[l];
    if (n > 0) {
      const g1 = (gamma * se2) / n;
      const g3 = atBoundary
        ? 0
        : ((se2 * se2 * vvv + sv2 * sv2 * vee - 2 * se2 * sv2 * vve) / (n * n)) / (sv2 + se2 / n) ** 3;
      mse[i] = g1 + g2 + 2 * g3;
    } else {
      mse[i] = sv2 + g2;
    }
  }
  return {
    model: 'unit',
    method: 'REML',
    siteVariance: sv2,
    unitVariance: se2,
    converged: true,
    iterations: 0,
    atBoundary,
    coefficients: data.coefficientNames.map((name, j) => ({
      name,
      estimate: profile!.beta[j],
      se: Math.sqrt(se2 * profile!.bInverse[j * p + j]),
    })),
    siteIds: data.siteIds,
    eblup,
    mse,
    logLikelihood: profile.logLikelihood,
    mseNote:
      'Prasad–Rao second-order MSE g1 + g2 + 2·g3 of the nested-error EBLUP at the REML variance components, ' +
      'with their variances from the inverse information (Prasad & Rao 1990; Rao & Molina 2015 §7.2). ' +
      'Unsampled sites get the regression-synthetic estimate X̄ᵀβ̂ with MSE = between-site variance + its regression variance. ' +
      'The EBLUP is of the site mean X̄ᵀβ + v (not the finite-population mean).',
  };
}
