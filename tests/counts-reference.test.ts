/**
 * The counts model with a covariate, where no quadrature is at hand: the Pólya–Gamma Gibbs
 * sampler against a long, independent reference run over the same posterior.
 *
 * Reference: random-walk Metropolis (Metropolis et al. 1953; one coordinate at a time, the step
 * of each tuned during burn-in towards the acceptance rate 0.44 of Roberts & Rosenthal 2001,
 * Statistical Science 16(4) — common practice) on the non-centred parametrisation
 * η_i = x_iᵀβ + σ_u v_i, v_i ~ N(0, 1), t = log σ_u, written here from the model's densities
 * alone: no augmentation and no code shared with the sampler (the prior of t is re-derived below).
 * Coordinate moves alone crawl along the ridges where β and the v_i trade off, so each sweep
 * also makes three Metropolis moves that keep every η_i fixed (the likelihood cancels): shift
 * β_j by δ and every v_i by −δ x_ij/σ_u (volume-preserving), and scale σ_u by e^ε with every v_i
 * by e^{−ε} (Jacobian e^{−mε}) — deterministic bijections for a symmetric random δ or ε, so
 * the usual acceptance ratio times the Jacobian keeps the posterior invariant (Liu & Sabatti
 * 2000, "Generalised Gibbs sampler and multigrid Monte Carlo", JASA 95(451) — recalled).
 * Its Monte Carlo error comes from its own effective sample size (the project's ESS of Vehati et
 * al. 2021, tested in tests/diagnostics.test.ts). Each comparison allows 4.5 combined standard
 * errors √(mcse_gibbs² + mcse_reference²); 16 comparisons keep the false-alarm rate near 1e-4.
 */
import { describe, expect, it } from 'vitest';
import type { CoefficientPrior, ScalePrior } from '../src/config/types.js';
import { essOfChains } from '../src/diagnostics/convergence.js';
import { createRng, type Rng } from '../src/sampler/rng.js';
import { normal } from '../src/sampler/variates.js';
import { countsData, fitCountsInMemory, type CountRow } from './support/counts-fit.js';

const Z = 4.5;

/** Twelve sites with a covariate: small and large samples, no cases at one, no sample at one. */
const ROWS: CountRow[] = [
  { id: 'a', x: [-1.4], cases: 1, trials: 12 },
  { id: 'b', x: [-1.0], cases: 0, trials: 8 },
  { id: 'c', x: [-0.7], cases: 6, trials: 35 },
  { id: 'd', x: [-0.3], cases: 4, trials: 14 },
  { id: 'e', x: [-0.1], cases: 13, trials: 60 },
  { id: 'f', x: [0.2], cases: 2, trials: 3 },
  { id: 'g', x: [0.4], cases: 19, trials: 48 },
  { id: 'h', x: [0.7], cases: 9, trials: 21 },
  { id: 'i', x: [0.9], cases: 25, trials: 44 },
  { id: 'j', x: [1.3], cases: 7, trials: 9 },
  { id: 'k', x: [1.6], cases: 30, trials: 52 },
  { id: 'none', x: [0.5], cases: 0, trials: 0 },
];
const COEFFICIENT_SD = 2;
const HALF_CAUCHY_SCALE = 1;

function softplus(x: number): number {
  return x > 0 ? x + Math.log1p(Math.exp(-x)) : Math.log1p(Math.exp(x));
}

/** Site i's log likelihood y·η − n·log(1 + e^η) (binomial coefficient dropped). */
function siteLogLik(i: number, eta: number): number {
  return ROWS[i].cases * eta - ROWS[i].trials * softplus(eta);
}

/**
 * Log prior of t = log σ for σ ~ half-Cauchy(A): p(σ) ∝ 1/(1 + σ²/A²), times the Jacobian
 * dσ/dt = σ, so log p(t) = t − log(1 + e^{2t}/A²).
 */
function logPriorT(t: number): number {
  return t - Math.log1p(Math.exp(2 * t) / (HALF_CAUCHY_SCALE * HALF_CAUCHY_SCALE));
}

interface ReferenceRun {
  /** Per chain, per quantity: thinned draws. Quantities: β₀, β₁, σ, then p_i. */
  chains: Float64Array[][];
}

/** One chain of component-wise random-walk Metropolis. */
function referenceChain(rng: Rng, burnIn: number, sweeps: number, thin: number): Float64Array[] {
  const m = ROWS.length;
  const x = ROWS.map((r) => r.x![0]);
  // State: β₀, β₁, t, v_1..v_m; dispersed start.
  const state = [normal(rng), normal(rng), -1 + normal(rng), ...ROWS.map(() => normal(rng))];
  const steps = state.map(() => 0.5);
  const accepted = new Float64Array(state.length);
  const ridgeSteps = [0.5, 0.5, 0.3];
  const ridgeAccepted = new Float64Array(3);
  const eta = (i: number, s: number[]) => s[0] + s[1] * x[i] + Math.exp(s[2]) * s[3 + i];
  const logPriorBeta = (b: number) => -0.5 * (b / COEFFICIENT_SD) ** 2;
  const globalLogTarget = (s: number[]) => {
    let sum = logPriorBeta(s[0]) + logPriorBeta(s[1]) + logPriorT(s[2]);
    for (let i = 0; i < m; i++) sum += siteLogLik(i, eta(i, s));
    return sum;
  };
  const kept = Math.floor(sweeps / thin);
  const out = Array.from({ length: 3 + m }, () => new Float64Array(kept));
  let current = globalLogTarget(state);
  for (let sweep = 0; sweep < burnIn + sweeps; sweep++) {
    // β₀, β₁, t: each touches every site.
    for (let k = 0; k < 3; k++) {
      const old = state[k];
      state[k] = old + steps[k] * normal(rng);
      const proposal = globalLogTarget(state);
      if (Math.log(rng.uniform()) < proposal - current) {
        current = proposal;
        accepted[k]++;
      } else state[k] = old;
    }
    // v_i: touches site i only.
    for (let i = 0; i < m; i++) {
      const k = 3 + i;
      const old = state[k];
      const before = siteLogLik(i, eta(i, state)) - 0.5 * old * old;
      state[k] = old + steps[k] * normal(rng);
      const after = siteLogLik(i, eta(i, state)) - 0.5 * state[k] * state[k];
      if (Math.log(rng.uniform()) < after - before) {
        current += after - before;
        accepted[k]++;
      } else state[k] = old;
    }
    // Moves that keep every η_i fixed: only the priors of β, t and v change.
    const logPriors = (b0: number, b1: number, t: number, scaleV: number, shift: number[]) => {
      let sum = logPriorBeta(b0) + logPriorBeta(b1) + logPriorT(t);
      for (let i = 0; i < m; i++) {
        const v = state[3 + i] * scaleV + shift[i];
        sum -= 0.5 * v * v;
      }
      return sum;
    };
    const zero = new Array<number>(m).fill(0);
    for (let j = 0; j < 2; j++) {
      // β_j + δ, v_i − δ·x_ij/σ (x_i0 = 1).
      const delta = ridgeSteps[j] * normal(rng);
      const sigma = Math.exp(state[2]);
      const shift = x.map((xi) => (-delta * (j === 0 ? 1 : xi)) / sigma);
      const after = j === 0
        ? logPriors(state[0] + delta, state[1], state[2], 1, shift)
        : logPriors(state[0], state[1] + delta, state[2], 1, shift);
      const base = logPriors(state[0], state[1], state[2], 1, zero);
      if (Math.log(rng.uniform()) < after - base) {
        state[j] += delta;
        for (let i = 0; i < m; i++) state[3 + i] += shift[i];
        current += after - base;
        ridgeAccepted[j]++;
      }
    }
    {
      // σ·e^ε, v_i·e^{−ε}: Jacobian e^{−mε}.
      const epsilon = ridgeSteps[2] * normal(rng);
      const base = logPriors(state[0], state[1], state[2], 1, zero);
      const after = logPriors(state[0], state[1], state[2] + epsilon, Math.exp(-epsilon), zero);
      if (Math.log(rng.uniform()) < after - base - m * epsilon) {
        state[2] += epsilon;
        for (let i = 0; i < m; i++) state[3 + i] *= Math.exp(-epsilon);
        current += after - base;
        ridgeAccepted[2]++;
      }
    }
    // Burn-in: every 100 sweeps move each step towards an acceptance rate of 0.44.
    if (sweep < burnIn && (sweep + 1) % 100 === 0) {
      for (let k = 0; k < state.length; k++) {
        steps[k] *= Math.exp(accepted[k] / 100 - 0.44);
        accepted[k] = 0;
      }
      for (let k = 0; k < 3; k++) {
        ridgeSteps[k] *= Math.exp(ridgeAccepted[k] / 100 - 0.44);
        ridgeAccepted[k] = 0;
      }
    }
    const d = sweep - burnIn;
    if (d >= 0 && d % thin === 0 && d / thin < kept) {
      const j = d / thin;
      out[0][j] = state[0];
      out[1][j] = state[1];
      out[2][j] = Math.exp(state[2]);
      for (let i = 0; i < m; i++) out[3 + i][j] = 1 / (1 + Math.exp(-eta(i, state)));
    }
  }
  return out;
}

function referenceRun(): ReferenceRun {
  const chains = [0, 1, 2, 3].map((c) => referenceChain(createRng(777, c), 10_000, 250_000, 10));
  return { chains };
}

function meanOf(chains: Float64Array[]): number {
  let sum = 0;
  let count = 0;
  for (const c of chains) for (const v of c) {
    sum += v;
    count++;
  }
  return sum / count;
}

function sdOf(chains: Float64Array[], mean: number): number {
  let sum = 0;
  let count = 0;
  for (const c of chains) for (const v of c) {
    sum += (v - mean) ** 2;
    count++;
  }
  return Math.sqrt(sum / (count - 1));
}

describe('counts model with a covariate: Gibbs vs an independent random-walk Metropolis run', () => {
  it('β, σ_u and every p_i agree within combined Monte Carlo error', async () => {
    const reference = referenceRun();
    const data = countsData(ROWS, ['x']);
    const coefficients: CoefficientPrior = { kind: 'normal', mean: 0, sd: COEFFICIENT_SD };
    const siteSd: ScalePrior = { kind: 'half_cauchy', scale: HALF_CAUCHY_SCALE };
    const fit = await fitCountsInMemory(data, { coefficients, siteSd, warmup: 1000, draws: 10_000, seed: 5 });
    const names = ['coef:intercept', 'coef:x', 'site_sd', ...ROWS.map((r) => `site:${r.id}`)];
    names.forEach((name, q) => {
      const chains = reference.chains.map((c) => c[q]);
      const refMean = meanOf(chains);
      const ess = essOfChains(chains);
      // Enough for the reference's own Monte Carlo error to be estimated reliably.
      expect(ess, `${name}: reference ESS`).toBeGreaterThan(1000);
      const refMcse = sdOf(chains, refMean) / Math.sqrt(ess);
      const g = fit.get(name)!;
      const tolerance = Z * Math.hypot(g.mcseMean, refMcse);
      expect(Math.abs(g.mean - refMean), `${name}: Gibbs ${g.mean} vs reference ${refMean} (tolerance ${tolerance})`).toBeLessThan(tolerance);
    });
  });
});
