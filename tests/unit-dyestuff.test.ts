/**
 * The intercept-only unit model on the Dyestuff data: yield of dyestuff in 6 batches × 5
 * preparations (Davies 1947, Statistical Methods in Research and Production; Box & Tiao 1973,
 * Bayesian Inference in Statistical Analysis §5.1.2), the classic balanced one-way random-effects
 * example. Check values from ../shared/checks/dyestuff_estimates.csv (SOURCES.md §4): REML and
 * ML variance components, the mean and its standard error, and the batch BLUPs — computed [C]
 * from the verified data; the ML deviance 327.3271 also verified against a general-purpose
 * mixed-model package's test [V]; lme4's printed values as recalled [M].
 */
import { describe, expect, it } from 'vitest';
import { createUnitWork, unitCore, unitLogMarginal } from '../src/models/unit.js';
import { exactUnitPosterior, unitGivenVariances } from '../src/summaries/exact-unit.js';
import { fitUnitInMemory, maximise, readChecks, unitData } from './support/unit-fit.js';

const rows = readChecks('dyestuff_data.csv');
const reference = new Map(readChecks('dyestuff_estimates.csv').map((r) => [r.quantity, Number(r.value)]));
const value = (name: string): number => reference.get(name)!;
const batches = [...new Set(rows.map((r) => r.batch))];
const data = unitData(
  batches.map((id) => ({ id, means: [] })),
  rows.map((r) => ({ site: r.batch, x: [], y: Number(r.yield) })),
  [],
);
const N = rows.length;

describe('Dyestuff (Davies 1947; dyestuff_estimates.csv)', () => {
  const flat = { kind: 'flat' as const };
  const core = unitCore(data, flat);
  const work = createUnitWork(core);
  /** −2 log L pieces at (log σ_b², log σ_w²); unitLogMarginal drops Σ log n_i, added back here. */
  const logN = batches.reduce((t, b) => t + Math.log(rows.filter((r) => r.batch === b).length), 0);
  const parts = (a: number, b: number) => {
    unitLogMarginal(core, Math.exp(a), Math.exp(b), work);
    return { logDetV: work.parts[0] + logN, logDetP: work.parts[1], quad: work.parts[2] };
  };
  const restricted = (a: number, b: number) => {
    const g = parts(a, b);
    return (N - 1) * Math.log(2 * Math.PI) + g.logDetV + g.logDetP + g.quad;
  };
  const profile = (a: number, b: number) => {
    const g = parts(a, b);
    return N * Math.log(2 * Math.PI) + g.logDetV + g.quad;
  };

  it('REML and ML estimates, the REML criterion and the ML deviance', () => {
    const reml = maximise((a, b) => -restricted(a, b), Math.log(1000), Math.log(1000));
    const ml = maximise((a, b) => -profile(a, b), Math.log(1000), Math.log(1000));
    expect(Math.exp(reml[0])).toBeCloseTo(value('sigma2_between_ANOVA_equals_REML'), 1);
    expect(Math.exp(reml[1])).toBeCloseTo(value('sigma2_within_ANOVA_equals_REML'), 1);
    expect(Math.exp(ml[0])).toBeCloseTo(value('sigma2_between_ML'), 2);
    expect(Math.exp(ml[1])).toBeCloseTo(value('sigma2_within_ML'), 2);
    // Absolute values (the log n_i and 2π constants restored): 4 decimals as published.
    expect(restricted(reml[0], reml[1])).toBeCloseTo(value('REML_criterion_minus2logRL'), 3);
    expect(profile(ml[0], ml[1])).toBeCloseTo(value('minus2logL_ML'), 3);
  });

  it('grand mean, its standard errors and the batch BLUPs at the REML estimates', () => {
    const atReml = unitGivenVariances(data, flat, value('sigma2_between_ANOVA_equals_REML'), value('sigma2_within_ANOVA_equals_REML'));
    expect(atReml.beta[0]).toBeCloseTo(value('grand_mean'), 6);
    expect(Math.sqrt(atReml.betaCov[0])).toBeCloseTo(value('se_mean_REML'), 3);
    batches.forEach((b, i) => expect(atReml.siteMean[i] - atReml.beta[0], b).toBeCloseTo(value(`BLUP_REML_${b}`), 2));
    const atMl = unitGivenVariances(data, flat, value('sigma2_between_ML'), value('sigma2_within_ML'));
    expect(Math.sqrt(atMl.betaCov[0])).toBeCloseTo(value('se_mean_ML'), 3);
  });

  it('Gibbs agrees with the exact posterior (uniform priors on σ_b and σ_w, flat mean)', async () => {
    const exact = exactUnitPosterior(data, { coefficients: flat, site_sd: { kind: 'uniform' }, unit_sd: { kind: 'uniform' } });
    const fit = await fitUnitInMemory(data, { draws: 5000, warmup: 1000, seed: 1947 });
    const checks: Array<[string, { mean: number }]> = [
      ['coef:intercept', exact.coefficients[0]],
      ['site_sd', exact.siteSd],
      ['unit_sd', exact.unitSd],
      ...data.siteIds.map((id, i) => [`site:${id}`, exact.sites[i]] as [string, { mean: number }]),
    ];
    // 10 comparisons at 4.5 MCSE: family-wise false-alarm rate ≈ 7e-5.
    for (const [name, ref] of checks) {
      const q = fit.get(name)!;
      expect(Math.abs(q.mean - ref.mean), `${name}: ${q.mean} vs ${ref.mean}`).toBeLessThan(4.5 * q.mcseMean);
    }
  });
});
