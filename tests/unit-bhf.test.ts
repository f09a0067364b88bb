/**
 * The corn and soybean data of Battese, Harter & Fuller (1988), "An error-components model for
 * prediction of county crop areas using survey and satellite data", JASA 83(401), 28–36:
 * 12 Iowa counties, 37 segments with survey hectares and satellite pixel counts (Table 1),
 * county population mean pixels; the outlying Hardin segment dropped as the paper did.
 * Check values from ../shared/checks (SOURCES.md §3):
 * - bhf_parameters.csv: REML and ML variance components, GLS coefficients and their standard
 *   errors on the 36 segments — computed from the verified data [C], equal to the published
 *   p. 33 values (σ_v² = 140, σ_e² = 147 for corn; 247, 191 for soybeans) as recalled [M];
 * - bhf_counties.csv: EBLUP predictions X̄ᵀβ̂ + γ_i(ȳ_i − x̄_iᵀβ̂), γ_i and √(g₁ + g₂) at REML
 *   [C]; the paper's Table 2 predictions and standard errors as recalled [M], to be used only
 *   loosely (±1.5 ha).
 */
import { describe, expect, it } from 'vitest';
import { mcseQuantile } from '../src/diagnostics/quantile-mcse.js';
import { createUnitWork, unitCore, unitLogMarginal } from '../src/models/unit.js';
import { unitGivenVariances } from '../src/summaries/exact-unit.js';
import { bhfData, fitUnitInMemory, maximise, readChecks } from './support/unit-fit.js';

const parameters = readChecks('bhf_parameters.csv');
const parameterText = (crop: string, name: string): string => parameters.find((r) => r.crop === crop && r.parameter === name)!.value;
const parameter = (crop: string, name: string): number => Number(parameterText(crop, name));

/** Half a unit in the last printed decimal of a value, plus rounding: the precision it carries. */
function printed(text: string): number {
  const decimals = text.includes('.') ? text.split('.')[1].length : 0;
  return 0.5 * 10 ** -decimals * (1 + 1e-9) + 1e-12;
}

describe('closed forms at the variance estimates (bhf_parameters.csv, bhf_counties.csv, computed [C])', () => {
  for (const crop of ['corn', 'soy'] as const) {
    const { data, counties } = bhfData(crop);
    const flat = { kind: 'flat' as const };
    const core = unitCore(data, flat);
    const work = createUnitWork(core);
    /** log|V|, log|P| and the quadratic form at β̂ (each up to a constant) at (log σ_u², log σ_e²). */
    const parts = (logSu2: number, logSe2: number) => {
      unitLogMarginal(core, Math.exp(logSu2), Math.exp(logSe2), work);
      return { logDetV: work.parts[0], logDetP: work.parts[1], quad: work.parts[2] };
    };

    it(`${crop}: the flat-prior marginal peaks at the REML estimates and its profile at the ML estimates`, () => {
      // With a flat prior on β the marginal of (σ_u², σ_e²) is the restricted likelihood
      // (Harville 1974), so its maximum is REML; dropping log|P| gives the profile likelihood (ML).
      const reml = maximise((a, b) => {
        const g = parts(a, b);
        return -0.5 * (g.logDetV + g.logDetP + g.quad);
      }, Math.log(100), Math.log(100));
      const ml = maximise((a, b) => {
        const g = parts(a, b);
        return -0.5 * (g.logDetV + g.quad);
      }, Math.log(100), Math.log(100));
      // 8 significant digits in the file; the optimum is found to ~1e-10 in log scale.
      expect(Math.exp(reml[0]) / parameter(crop, 'sigma2_v_REML')).toBeCloseTo(1, 6);
      expect(Math.exp(reml[1]) / parameter(crop, 'sigma2_e_REML')).toBeCloseTo(1, 6);
      expect(Math.exp(ml[0]) / parameter(crop, 'sigma2_v_ML')).toBeCloseTo(1, 6);
      expect(Math.exp(ml[1]) / parameter(crop, 'sigma2_e_ML')).toBeCloseTo(1, 6);
      // Published (p. 33, recalled [M]): the same to 3 significant figures (soy σ_e²: 191 vs 190.5).
      expect(Math.abs(Math.exp(reml[0]) - parameter(crop, 'sigma2_v_published'))).toBeLessThan(1);
      expect(Math.abs(Math.exp(reml[1]) - parameter(crop, 'sigma2_e_published'))).toBeLessThan(1);
    });

    it(`${crop}: GLS coefficients and standard errors, and every county's EBLUP, γ_i and √(g₁ + g₂) at REML`, () => {
      const g = unitGivenVariances(data, flat, parameter(crop, 'sigma2_v_REML'), parameter(crop, 'sigma2_e_REML'));
      const names = ['beta0_GLS_REML', 'beta_cornpix_GLS_REML', 'beta_soypix_GLS_REML'];
      const ses = ['se_beta0', 'se_beta_cornpix', 'se_beta_soypix'];
      // Every value agrees to the precision it is printed with.
      names.forEach((name, j) => {
        expect(Math.abs(g.beta[j] - parameter(crop, name)), name).toBeLessThan(printed(parameterText(crop, name)));
        expect(Math.abs(Math.sqrt(g.betaCov[j * 3 + j]) - parameter(crop, ses[j])), ses[j]).toBeLessThan(printed(parameterText(crop, ses[j])));
      });
      counties.forEach((c, i) => {
        const close = (ours: number, column: string) =>
          expect(Math.abs(ours - Number(c[column])), `${c.county} ${column}`).toBeLessThan(printed(c[column]));
        close(g.siteMean[i], `eblup_${crop}_reml`);
        close(Math.sqrt(g.siteVar[i]), `se_g1g2_${crop}_reml`);
        close(g.gamma[i], `gamma_${crop}`);
      });
    });
  }
});

describe('Gibbs posterior on the corn and soybean data (uniform priors on σ_u and σ_e, flat β)', () => {
  for (const crop of ['corn', 'soy'] as const) {
    it(`${crop}: coefficients, variance components and county means consistent with the paper`, async () => {
      const { data, counties } = bhfData(crop);
      const fit = await fitUnitInMemory(data, { draws: 5000, warmup: 1000, seed: crop === 'corn' ? 1988 : 1989 });
      for (const q of fit.values()) {
        expect(q.rhat, q.name).toBeLessThan(1.01);
        expect(q.essBulk, q.name).toBeGreaterThan(400);
      }
      // Coefficients: the posterior mean averages over the variances, so it sits near, not on,
      // the GLS value at REML: within one GLS standard error.
      const names = ['beta0_GLS_REML', 'beta_cornpix_GLS_REML', 'beta_soypix_GLS_REML'];
      const ses = ['se_beta0', 'se_beta_cornpix', 'se_beta_soypix'];
      data.coefficientNames.forEach((name, j) => {
        const q = fit.get(`coef:${name}`)!;
        expect(Math.abs(q.mean - parameter(crop, names[j])), name).toBeLessThan(parameter(crop, ses[j]));
      });
      // Variance components: the published estimates (σ_v², σ_e² = 140, 147 corn; 247, 191 soy,
      // recalled [M]) lie inside the central 50% posterior intervals of σ_u² and σ_e² (the
      // quartiles of σ² are the squared quartiles of σ), allowing for the quartiles' own MCSE.
      for (const [quantity, published] of [['site_sd', 'sigma2_v_published'], ['unit_sd', 'sigma2_e_published']] as const) {
        const chains = fit.chainsOf(quantity);
        const all = Float64Array.from(chains.flatMap((c) => [...c])).sort();
        const at = (prob: number) => all[Math.round(prob * (all.length - 1))];
        const value = Math.sqrt(parameter(crop, published));
        expect(value, `${quantity} above the lower quartile`).toBeGreaterThan(at(0.25) - 3 * mcseQuantile(chains, 0.25));
        expect(value, `${quantity} below the upper quartile`).toBeLessThan(at(0.75) + 3 * mcseQuantile(chains, 0.75));
      }
      counties.forEach((c, i) => {
        const q = fit.get(`site:${c.county}`)!;
        // Table 2 predictions (recalled [M]): within one published standard error.
        const published = Number(c[`pub_${crop}_pred_recalled`]);
        const publishedSe = Number(c[`pub_${crop}_se_recalled`]);
        expect(Math.abs(q.mean - published), `${c.county} vs Table 2`).toBeLessThan(publishedSe);
        // The Bayesian sd adds the variance parameters' uncertainty to g₁ + g₂ (computed [C]);
        // its Monte Carlo error is about sd/√(2 ESS).
        const leading = Number(c[`se_g1g2_${crop}_reml`]);
        expect(q.sd, `${c.county} sd vs √(g₁ + g₂)`).toBeGreaterThan(leading - (3 * q.sd) / Math.sqrt(2 * q.essBulk));
      });
    });
  }
});
