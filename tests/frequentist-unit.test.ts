/**
 * The unit model's frequentist cross-check (nested-error EBLUP with REML variance components)
 * against published and computed reference values in ../shared/checks (SOURCES.md §3, §4).
 */
import { describe, expect, it } from 'vitest';
import { unitEblup } from '../src/summaries/frequentist-unit.js';
import { bhfData, readChecks, unitData } from './support/unit-fit.js';

const parameters = readChecks('bhf_parameters.csv');
const param = (crop: string, name: string): number =>
  Number(parameters.find((r) => r.crop === crop && r.parameter === name)!.value);

describe('Battese, Harter & Fuller (1988), corn and soybeans, outlying segment dropped', () => {
  for (const crop of ['corn', 'soy'] as const) {
    it(`${crop}: REML variance components and GLS coefficients (computed REML, bhf_parameters.csv)`, () => {
      const { data } = bhfData(crop);
      const fit = unitEblup(data);
      // [C] values computed by REML on the 36 segments; equal the published p. 33 values to 3 s.f.
      expect(fit.siteVariance).toBeCloseTo(param(crop, 'sigma2_v_REML'), 2);
      expect(fit.unitVariance!).toBeCloseTo(param(crop, 'sigma2_e_REML'), 2);
      expect(fit.coefficients[0].estimate).toBeCloseTo(param(crop, 'beta0_GLS_REML'), 3);
      expect(fit.coefficients[1].estimate).toBeCloseTo(param(crop, 'beta_cornpix_GLS_REML'), 4);
      expect(fit.coefficients[2].estimate).toBeCloseTo(param(crop, 'beta_soypix_GLS_REML'), 4);
      expect(fit.coefficients[0].se).toBeCloseTo(param(crop, 'se_beta0'), 2);
      expect(fit.coefficients[1].se).toBeCloseTo(param(crop, 'se_beta_cornpix'), 4);
      // Published (BHF 1988, p. 33, recalled from memory): σ_v² ≈ 140 / 247, σ_e² ≈ 147 / 191.
      expect(Math.abs(fit.siteVariance - (crop === 'corn' ? 140 : 247))).toBeLessThan(1);
      expect(Math.abs(fit.unitVariance! - (crop === 'corn' ? 147 : 191))).toBeLessThan(1);
    });

    it(`${crop}: county EBLUPs and leading MSE terms (bhf_counties.csv, computed REML)`, () => {
      const { data, counties } = bhfData(crop);
      const fit = unitEblup(data);
      counties.forEach((c, i) => {
        expect(fit.siteIds[i]).toBe(c.county);
        // eblup_* is rounded to 2 decimals in the file.
        expect(Math.abs(fit.eblup[i] - Number(c[`eblup_${crop}_reml`]))).toBeLessThan(0.006);
        // se_g1g2 = √(g1 + g2) only; our MSE adds 2·g3, so it must be at least that large.
        expect(Math.sqrt(fit.mse[i])).toBeGreaterThanOrEqual(Number(c[`se_g1g2_${crop}_reml`]) - 0.006);
        // and within the published standard errors (recalled, ±1.0 after the g3 term; SOURCES.md §3).
        expect(Math.abs(Math.sqrt(fit.mse[i]) - Number(c[`pub_${crop}_se_recalled`]))).toBeLessThan(1.0);
      });
    });
  }
});

describe('dyestuff, balanced one-way layout (Davies 1947; Box & Tiao 1973; dyestuff_*.csv)', () => {
  it('REML variance components equal the ANOVA closed forms; BLUPs of the batch effects', () => {
    const rows = readChecks('dyestuff_data.csv');
    const estimates = new Map(readChecks('dyestuff_estimates.csv').map((r) => [r.quantity, Number(r.value)]));
    const batches = [...new Set(rows.map((r) => r.batch))];
    const data = unitData(
      batches.map((b) => ({ id: b, means: [] })),
      rows.map((r) => ({ site: r.batch, x: [], y: Number(r.yield) })),
      [],
    );
    const fit = unitEblup(data);
    // For balanced data REML = ANOVA: (MSB − MSW)/5 = 1764.05 and MSW = 2451.25 exactly; the
    // numerical maximisation is good to about 1e-8 relative, so 3 decimals.
    expect(fit.siteVariance).toBeCloseTo(estimates.get('sigma2_between_ANOVA_equals_REML')!, 3);
    expect(fit.unitVariance!).toBeCloseTo(estimates.get('sigma2_within_ANOVA_equals_REML')!, 3);
    expect(fit.coefficients[0].estimate).toBeCloseTo(estimates.get('grand_mean')!, 6);
    expect(fit.coefficients[0].se).toBeCloseTo(estimates.get('se_mean_REML')!, 3);
    batches.forEach((b, i) => {
      expect(fit.eblup[i] - fit.coefficients[0].estimate).toBeCloseTo(estimates.get(`BLUP_REML_${b}`)!, 2);
    });
  });
});
