/**
 * Published worked example: "Surgical: institutional ranking", the random-effects model of
 * cardiac-surgery mortality in 12 hospitals (Spiegelhalter, Thomas, Best & Gilks 1996, BUGS 0.5
 * Examples Volume 1, MRC Biostatistics Unit, Cambridge; the same example in the later
 * WinBUGS/OpenBUGS Examples Vol. I). Data: r_i deaths among n_i operations.
 *
 * Published model: r_i ~ Binomial(p_i, n_i), logit p_i = b_i, b_i ~ N(μ, τ⁻¹), μ ~ N(0, 10⁶)
 * (precision 1e-6), τ ~ Gamma(0.001, 0.001); σ = 1/√τ; pop.mean = expit(μ). Our priors match
 * exactly: coefficients { normal: { mean: 0, sd: 1000 } }, site_sd { inverse_gamma: { shape:
 * 0.001, scale: 0.001 } } on σ_u², since τ ~ Gamma(a, b) ⇔ σ² ~ inverse-gamma(a, b).
 *
 * Published posterior means — RECALLED FROM MEMORY (the examples' results table, 10,000 draws;
 * not re-read): μ −2.558, σ 0.4036, pop.mean 0.07258, p₁ 0.05315, p₂ 0.1033, p₄ 0.05913,
 * p₈ 0.1228, p₁₁ 0.1022, p₁₂ 0.06834. Because they are recalled and carry the published run's own
 * Monte Carlo error, they are checked loosely: within 0.2 posterior sd (the sd from the exact
 * integration). The tight checks are against the exact posterior by numerical integration
 * (src/summaries/exact-counts.ts, under the published priors), within 4.5 Monte Carlo standard
 * errors (16 comparisons: family-wise false-alarm rate about 1e-4).
 */
import { describe, expect, it } from 'vitest';
import type { CoefficientPrior, ScalePrior } from '../src/config/types.js';
import { exactCountsPosterior } from '../src/summaries/exact-counts.js';
import { countsData, fitCountsInMemory } from './support/counts-fit.js';

const Z = 4.5;

/** Operations n_i and deaths r_i, hospitals A–L (BUGS Examples Vol. 1, "Surgical"). */
const OPERATIONS = [47, 148, 119, 810, 211, 196, 148, 215, 207, 97, 256, 360];
const DEATHS = [0, 18, 8, 46, 8, 13, 9, 31, 14, 8, 29, 24];
const HOSPITALS = 'ABCDEFGHIJKL'.split('');

/** Recalled published posterior means (see the header): quantity → value. */
const RECALLED: Record<string, number> = {
  'coef:intercept': -2.558,
  site_sd: 0.4036,
  'site:A': 0.05315,
  'site:B': 0.1033,
  'site:D': 0.05913,
  'site:H': 0.1228,
  'site:K': 0.1022,
  'site:L': 0.06834,
};
const RECALLED_POP_MEAN = 0.07258;

const coefficients: CoefficientPrior = { kind: 'normal', mean: 0, sd: 1000 };
const siteSd: ScalePrior = { kind: 'inverse_gamma', shape: 0.001, scale: 0.001 };

describe('Surgical (BUGS Examples Vol. 1): 12 hospitals, random-effects logistic model', () => {
  const data = countsData(HOSPITALS.map((id, i) => ({ id, cases: DEATHS[i], trials: OPERATIONS[i] })));
  const exact = exactCountsPosterior({ cases: data.effectiveCases, trials: data.effectiveTrials, coefficients, siteSd });
  const exactOf = (name: string) =>
    name === 'coef:intercept' ? exact.intercept : name === 'site_sd' ? exact.siteSd : exact.sites[HOSPITALS.indexOf(name.slice(5))];

  it('exact posterior under the published priors agrees with the recalled published means (loose)', () => {
    for (const [name, value] of Object.entries(RECALLED)) {
      const ref = exactOf(name);
      expect(Math.abs(ref.mean - value), `${name}: exact ${ref.mean} vs recalled ${value}`).toBeLessThan(0.2 * ref.sd);
    }
  });

  it('Gibbs sampler agrees with the exact posterior on μ, σ and all 12 p_i within Monte Carlo error', async () => {
    const fit = await fitCountsInMemory(data, { coefficients, siteSd, warmup: 1000, draws: 5000, seed: 12 });
    const names = ['coef:intercept', 'site_sd', ...HOSPITALS.map((h) => `site:${h}`)];
    for (const name of names) {
      const q = fit.get(name)!;
      expect(q.rhat, `${name} R-hat`).toBeLessThan(1.01);
      expect(Math.abs(q.mean - exactOf(name).mean), `${name}: Gibbs ${q.mean} vs exact ${exactOf(name).mean}`).toBeLessThan(Z * q.mcseMean);
    }
    // pop.mean = expit(μ), from the draws of μ: loose check against the recalled value.
    const mu = fit.chainsOf('coef:intercept').flatMap((c) => Array.from(c));
    const popMean = mu.reduce((a, v) => a + 1 / (1 + Math.exp(-v)), 0) / mu.length;
    // sd of pop.mean ≈ expit'(μ̄)·sd(μ) (delta method): 0.2 of it.
    const slope = RECALLED_POP_MEAN * (1 - RECALLED_POP_MEAN);
    expect(Math.abs(popMean - RECALLED_POP_MEAN)).toBeLessThan(0.2 * slope * exact.intercept.sd);
    // The hospital with no deaths is pulled well above 0, the highest raw rate (H, 31/215) down.
    expect(fit.get('site:A')!.mean).toBeGreaterThan(0.03);
    expect(fit.get('site:H')!.mean).toBeLessThan(31 / 215);
  });
});
