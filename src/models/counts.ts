/**
 * The counts model (binomial–logit with a site effect) and its Gibbs sampler through Pólya–Gamma
 * augmentation.
 *
 *   y_i ~ Binomial(n_i, p_i),  logit p_i = η_i = x_iᵀβ + u_i,  u_i ~ N(0, σ_u²)   (every site)
 *   β ~ fixed prior (flat or normal, on the logit scale), σ_u ~ hyperprior (as the area model).
 * The published target is p_i. Sites with n_i = 0 add nothing to the likelihood (synthetic).
 * With a design effect the likelihood uses the effective counts ỹ_i, ñ_i (src/data/counts.ts).
 *
 * ## Augmentation (Polson, Scott & Windle 2013, JASA 108(504), Theorem 1)
 * With κ_i = y_i − n_i/2, the binomial likelihood of site i is
 *   e^{y_i η_i} / (1 + e^{η_i})^{n_i} = 2^{−n_i} e^{κ_i η_i} ∫₀^∞ e^{−ω_i η_i²/2} p(ω_i | n_i, 0) dω_i,
 * p(ω | b, 0) the PG(b, 0) density. Given ω_i the site's likelihood in η_i is Gaussian:
 *   e^{κ_i η_i − ω_i η_i²/2} ∝ N(z_i; η_i, 1/ω_i),  z_i = κ_i/ω_i,
 * and ω_i | η_i ~ PG(n_i, η_i). Given ω, the model is therefore the area model (Fay & Herriot
 * 1979, src/models/area.ts) with direct estimate z_i and known sampling variance ψ_i = 1/ω_i.
 *
 * ## One sweep (two-block data augmentation: ω, then (σ_u, β, η) jointly)
 * 1. ω_i | η_i ~ PG(ñ_i, η_i) for every sampled site (src/sampler/polya-gamma.ts for whole ñ_i,
 *    src/sampler/polya-gamma-real.ts otherwise); z_i = κ̃_i/ω_i, ψ_i = 1/ω_i.
 * 2. σ_u | ω, y from its marginal with β and η integrated out (the area model's collapsed
 *    update: slice or independence Metropolis–Hastings, chosen in warmup). The marginal changes
 *    with ω, so it is re-evaluated at the current σ_u before the update; each of the updates
 *    leaves the current conditional p(σ_u | ω, y) invariant (the independence proposal is a
 *    fixed density after warmup, and Metropolis–Hastings is valid for any fixed proposal).
 * 3. β | σ_u, ω, y and η_i | β, σ_u, ω, y exactly (Gaussian), as in the area model; sites
 *    without trials get η_i ~ N(x_iᵀβ, σ_u²).
 * Steps 2–3 are an exact draw of (σ_u, β, η) from p(· | ω, y) up to the Markov update of σ_u, so
 * the sweep leaves the joint posterior p(σ_u, β, η, ω | y) invariant. Because σ_u is updated
 * with η integrated out, the chain does not stall when σ_u is near zero (as in the area model).
 * `method: plain` keeps step 1 and replaces 2–3 by the area model's plain three-block Gibbs
 * sampler on the pseudo-data (for the benchmark's comparison).
 */
import type { CoefficientPrior, ScalePrior } from '../config/types.js';
import type { CountsData } from '../data/counts.js';
import type { AreaData } from '../data/types.js';
import type { Kernel } from '../sampler/kernel.js';
import type { Rng } from '../sampler/rng.js';
import { pgReal } from '../sampler/polya-gamma-real.js';
import {
  type AreaSamplerMethod,
  type CollapsedState,
  type Packed,
  type PlainState,
  collapsedSigmaBetaStep,
  drawBetaFromFactor,
  drawTheta,
  initCollapsedState,
  packSites,
  plainAreaKernel,
  refreshLogTarget,
  refreshResponseTerms,
} from './area.js';

export interface CountsModelSpec {
  data: CountsData;
  coefficients: CoefficientPrior;
  siteSd: ScalePrior;
  method: AreaSamplerMethod;
}

/** Monitored quantity names, in recording order: coefficients, site_sd, then every site's p_i. */
export function countsQuantities(data: Pick<CountsData, 'coefficientNames' | 'siteIds'>): string[] {
  return [
    ...data.coefficientNames.map((name) => `coef:${name}`),
    'site_sd',
    ...data.siteIds.map((id) => `site:${id}`),
  ];
}

/** 1/(1 + e^{−η}), the inverse logit. */
export function inverseLogit(eta: number): number {
  return 1 / (1 + Math.exp(-eta));
}

/**
 * Empirical logit log((ỹ + ½)/(ñ − ỹ + ½)) and its approximate variance 1/(ỹ + ½) + 1/(ñ − ỹ + ½)
 * (Cox & Snell 1989, Analysis of Binary Data 2nd ed., §2.1.6 — recalled): finite for 0 and n
 * cases. Used only for the starting point of the chains.
 */
export function empiricalLogit(cases: number, trials: number): { logit: number; variance: number } {
  const a = cases + 0.5;
  const b = trials - cases + 0.5;
  return { logit: Math.log(a / b), variance: 1 / a + 1 / b };
}

/**
 * The area-model view of the counts: direct = pseudo-data z_i, variance = 1/ω_i (overwritten
 * every sweep), first filled with the empirical logits so the chains start from the data.
 */
function pseudoAreaData(data: CountsData): AreaData {
  const direct = new Float64Array(data.m).fill(Number.NaN);
  const variance = new Float64Array(data.m).fill(Number.NaN);
  for (let i = 0; i < data.m; i++) {
    if (!data.hasData[i]) continue;
    const start = empiricalLogit(data.effectiveCases[i], data.effectiveTrials[i]);
    direct[i] = start.logit;
    variance[i] = start.variance;
  }
  return {
    m: data.m,
    p: data.p,
    siteIds: data.siteIds,
    labels: data.labels,
    coefficientNames: data.coefficientNames,
    X: data.X,
    direct,
    variance,
    sampleSize: data.trials,
    hasData: data.hasData,
    varianceNote: 'Pólya–Gamma pseudo-data',
  };
}

/**
 * Rough cost of one Pólya–Gamma draw in units of one site's share of a pass over the marginal
 * (the warmup cost model of src/models/area.ts): a draw takes 10–20 gamma or PG(1) variates.
 */
const PG_DRAW_COST = 30;

/** Per sampled site (packed order): the effective trials ñ_i and κ̃_i = ỹ_i − ñ_i/2. */
interface SiteCounts {
  trials: Float64Array;
  kappa: Float64Array;
}

function siteCounts(data: CountsData, index: Int32Array): SiteCounts {
  const trials = new Float64Array(index.length);
  const kappa = new Float64Array(index.length);
  index.forEach((site, k) => {
    trials[k] = data.effectiveTrials[site];
    kappa[k] = data.effectiveCases[site] - 0.5 * trials[k];
  });
  return { trials, kappa };
}

/**
 * Step 1 of the sweep: ω_i | η_i ~ PG(ñ_i, η_i), written as pseudo-data z_i = κ̃_i/ω_i with
 * variance 1/ω_i into both the packed arrays and the area-model view.
 */
function drawPseudoData(
  eta: Float64Array,
  counts: SiteCounts,
  d: Packed,
  pseudo: AreaData,
  rng: Rng,
): void {
  const { index } = d;
  for (let k = 0; k < index.length; k++) {
    const site = index[k];
    const omega = pgReal(rng, counts.trials[k], eta[site]);
    const psi = 1 / omega;
    const z = counts.kappa[k] * psi;
    d.y[k] = z;
    d.psi[k] = psi;
    pseudo.direct[site] = z;
    pseudo.variance[site] = psi;
  }
}

function recordCounts(
  beta: Float64Array,
  sigma: number,
  eta: Float64Array,
  out: Float64Array,
  stride: number,
  offset: number,
): void {
  let q = 0;
  for (let j = 0; j < beta.length; j++) out[q++ * stride + offset] = beta[j];
  out[q++ * stride + offset] = sigma;
  for (let i = 0; i < eta.length; i++) out[q++ * stride + offset] = inverseLogit(eta[i]);
}

/** The default sampler: Pólya–Gamma draws, then the area model's collapsed updates. */
export function collapsedCountsKernel(spec: CountsModelSpec): Kernel<CollapsedState> {
  const { data, siteSd } = spec;
  const pseudo = pseudoAreaData(data);
  const d = packSites(pseudo, spec.coefficients);
  d.extraSweepCost = PG_DRAW_COST * d.n;
  const counts = siteCounts(data, d.index);
  return {
    quantities: countsQuantities(data),
    init(rng) {
      // Dispersed σ_u from the empirical logits' excess spread; β and η drawn given it, so the
      // first Pólya–Gamma draw has a linear predictor to condition on.
      const state = initCollapsedState(d, siteSd, data.m, rng);
      drawBetaFromFactor(state, d.p, rng);
      drawTheta(state.theta, pseudo, state.beta, state.sigma * state.sigma, rng);
      return state;
    },
    step(state, rng, phase, iteration) {
      drawPseudoData(state.theta, counts, d, pseudo, rng);
      refreshResponseTerms(d);
      refreshLogTarget(state, d, siteSd);
      collapsedSigmaBetaStep(state, d, siteSd, rng, phase, iteration);
      drawTheta(state.theta, pseudo, state.beta, state.sigma * state.sigma, rng);
      return state;
    },
    record(state, out, stride, offset) {
      recordCounts(state.beta, state.sigma, state.theta, out, stride, offset);
    },
  };
}

/** Pólya–Gamma draws, then the plain three-block Gibbs sampler on the pseudo-data (for comparison). */
export function plainCountsKernel(spec: CountsModelSpec): Kernel<PlainState> {
  const { data } = spec;
  const pseudo = pseudoAreaData(data);
  const d = packSites(pseudo, spec.coefficients);
  const counts = siteCounts(data, d.index);
  const plain = plainAreaKernel({ data: pseudo, coefficients: spec.coefficients, siteSd: spec.siteSd, method: 'plain' });
  return {
    quantities: countsQuantities(data),
    init(rng) {
      return plain.init(rng);
    },
    step(state, rng, phase, iteration) {
      drawPseudoData(state.theta, counts, d, pseudo, rng);
      return plain.step(state, rng, phase, iteration);
    },
    record(state, out, stride, offset) {
      recordCounts(state.beta, Math.sqrt(state.sigma2), state.theta, out, stride, offset);
    },
  };
}

export function countsKernel(spec: CountsModelSpec): Kernel<CollapsedState> | Kernel<PlainState> {
  return spec.method === 'plain' ? plainCountsKernel(spec) : collapsedCountsKernel(spec);
}
