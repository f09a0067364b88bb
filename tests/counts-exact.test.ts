/**
 * The counts model's Pólya–Gamma Gibbs sampler against the exact posterior by numerical
 * integration.
 *
 * Reference: src/summaries/exact-counts.ts integrates the binomial–logit posterior of an
 * intercept-only model over (β₀, log σ_u) with every site effect integrated out by a
 * one-dimensional quadrature — no augmentation, no sampling, nothing shared with the sampler but
 * the prior densities (whose own closed forms are checked in tests/area-sampler.test.ts through
 * the area model's exact posterior). Its own convergence is checked here by halving every grid
 * spacing. The sampler must agree on every p_i, the intercept and σ_u, for single sites
 * (including 0 and all cases, more than 20 trials and non-integer effective counts) and for a
 * hierarchy under each hyperprior and both samplers, within Monte Carlo error: 4.5 Monte Carlo
 * standard errors (Vehtari et al. 2021) for means, and for sds the delta-method se of a sample
 * sd. About 150 comparisons at 4.5 MCSE keep the family-wise false-alarm rate near 1e-3.
 */
import { describe, expect, it } from 'vitest';
import type { CoefficientPrior, ScalePrior } from '../src/config/types.js';
import { exactCountsPosterior, type ExactCountsPosterior } from '../src/summaries/exact-counts.js';
import { countsData, fitCountsInMemory, mcseOfSd, type CountRow, type InMemoryFit } from './support/counts-fit.js';
import type { CountsData } from '../src/data/counts.js';

const Z = 4.5;

function exactFor(data: CountsData, coefficients: CoefficientPrior, siteSd: ScalePrior, spacingFactor = 1): ExactCountsPosterior {
  return exactCountsPosterior({ cases: data.effectiveCases, trials: data.effectiveTrials, coefficients, siteSd }, { spacingFactor });
}

function expectAgreement(fit: InMemoryFit, data: CountsData, exact: ExactCountsPosterior): void {
  const pairs: Array<[string, { mean: number; sd: number }]> = [
    ['coef:intercept', exact.intercept],
    ['site_sd', exact.siteSd],
    ...data.siteIds.map((id, i) => [`site:${id}`, exact.sites[i]] as [string, { mean: number; sd: number }]),
  ];
  for (const [name, ref] of pairs) {
    const q = fit.get(name)!;
    expect(q.rhat, `${name} R-hat`).toBeLessThan(1.01);
    expect(q.essBulk, `${name} bulk ESS`).toBeGreaterThan(400);
    expect(Math.abs(q.mean - ref.mean), `${name} mean ${q.mean} vs exact ${ref.mean} (mcse ${q.mcseMean})`).toBeLessThan(Z * q.mcseMean);
    expect(Math.abs(q.sd - ref.sd), `${name} sd ${q.sd} vs exact ${ref.sd}`).toBeLessThan(Z * mcseOfSd(fit, name));
  }
}

describe('single site: Gibbs vs exact integration of the binomial–logit posterior', () => {
  // One site cannot tell β₀ from u₁, so both priors must be proper: β₀ ~ N(0, 1.5²), σ_u² ~ IG(2, 0.5).
  const coefficients: CoefficientPrior = { kind: 'normal', mean: 0, sd: 1.5 };
  const siteSd: ScalePrior = { kind: 'inverse_gamma', shape: 2, scale: 0.5 };
  const cases: Array<[string, CountRow, number]> = [
    ['3 of 12', { id: 's', cases: 3, trials: 12 }, 1],
    ['0 of 7 (no cases)', { id: 's', cases: 0, trials: 7 }, 1],
    ['9 of 9 (all cases)', { id: 's', cases: 9, trials: 9 }, 1],
    ['35 of 120 (series branch, b > 20)', { id: 's', cases: 35, trials: 120 }, 1],
    ['7 of 30, design effect 1.6 (effective 4.375 of 18.75)', { id: 's', cases: 7, trials: 30 }, 1.6],
  ];
  for (const [label, row, deff] of cases) {
    it(label, async () => {
      const data = countsData([row], [], deff);
      const exact = exactFor(data, coefficients, siteSd);
      const fit = await fitCountsInMemory(data, { coefficients, siteSd, draws: 4000, warmup: 500, seed: 31 });
      expectAgreement(fit, data, exact);
    });
  }
});

describe('hierarchy with an intercept: Gibbs vs exact integration', () => {
  // Eight sites: small and large samples, one with no cases, one without a sample (synthetic).
  const rows: CountRow[] = [
    { id: 'a', cases: 2, trials: 15 },
    { id: 'b', cases: 0, trials: 9 },
    { id: 'c', cases: 11, trials: 40 },
    { id: 'd', cases: 5, trials: 22 },
    { id: 'e', cases: 30, trials: 64 },
    { id: 'f', cases: 4, trials: 6 },
    { id: 'g', cases: 17, trials: 130 },
    { id: 'none', cases: 0, trials: 0 },
  ];
  const data = countsData(rows);
  const priors: Array<[string, ScalePrior]> = [
    ['uniform on σ_u', { kind: 'uniform' }],
    ['half-Cauchy(1)', { kind: 'half_cauchy', scale: 1 }],
    ['inverse-gamma(2, 0.5) on σ_u²', { kind: 'inverse_gamma', shape: 2, scale: 0.5 }],
  ];
  for (const [label, siteSd] of priors) {
    it(`collapsed sampler, flat intercept, ${label}`, async () => {
      const coefficients: CoefficientPrior = { kind: 'flat' };
      const exact = exactFor(data, coefficients, siteSd);
      const fit = await fitCountsInMemory(data, { coefficients, siteSd, draws: 5000, warmup: 1000, seed: 41 });
      expectAgreement(fit, data, exact);
    });
  }

  it('plain sampler (after the same Pólya–Gamma draws), normal intercept prior, half-Cauchy(1)', async () => {
    const coefficients: CoefficientPrior = { kind: 'normal', mean: -1, sd: 0.7 };
    const siteSd: ScalePrior = { kind: 'half_cauchy', scale: 1 };
    const exact = exactFor(data, coefficients, siteSd);
    const fit = await fitCountsInMemory(data, { coefficients, siteSd, method: 'plain', draws: 10000, warmup: 1000, seed: 43 });
    expectAgreement(fit, data, exact);
  });

  it('the exact reference has converged: halving every grid spacing changes the results by < 1e-6', () => {
    const siteSd: ScalePrior = { kind: 'half_cauchy', scale: 1 };
    const coarse = exactFor(data, { kind: 'flat' }, siteSd);
    const fine = exactFor(data, { kind: 'flat' }, siteSd, 0.5);
    const all = (e: ExactCountsPosterior) => [e.intercept, e.siteSd, ...e.sites].flatMap((s) => [s.mean, s.sd]);
    const a = all(coarse);
    const b = all(fine);
    // Measured: at most 5e-8 (the sd of σ_u, from its heavy right tail), and 1e-12 between the
    // half and the quarter spacing; 1e-6 is still 100 times below the smallest Monte Carlo
    // error in this file.
    a.forEach((v, k) => expect(Math.abs(v - b[k])).toBeLessThan(1e-6));
  });

  it('the exact reference sees the data: no-case site b is shrunk up from 0, small site f down from 4/6', () => {
    const exact = exactFor(data, { kind: 'flat' }, { kind: 'half_cauchy', scale: 1 });
    expect(exact.sites[1].mean).toBeGreaterThan(0.03);
    expect(exact.sites[5].mean).toBeLessThan(4 / 6);
    expect(exact.sites[5].mean).toBeGreaterThan(exact.sites[0].mean);
  });
});
