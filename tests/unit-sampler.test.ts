/**
 * The unit model's collapsed Gibbs sampler against exact answers.
 *
 * Reference: the exact posterior by 2-D numerical integration over (σ_u, σ_e) with β and the site
 * effects integrated out analytically (src/summaries/exact-unit.ts; its closed forms are checked
 * against a dense brute-force computation and against the published corn data in
 * tests/unit-exact.test.ts and tests/unit-bhf.test.ts). The sampler must agree on every site,
 * every coefficient, σ_u and σ_e, for every hyperprior, within Monte Carlo error: tolerances are
 * multiples of the run's own Monte Carlo standard error (Vehtari et al. 2021).
 */
import { describe, expect, it } from 'vitest';
import type { CoefficientPrior, ScalePrior } from '../src/config/types.js';
import type { UnitData } from '../src/data/unit-data.js';
import { unitQuantities } from '../src/models/unit.js';
import { sampleChains } from '../src/sampler/parallel.js';
import { createRng } from '../src/sampler/rng.js';
import { normal } from '../src/sampler/variates.js';
import { exactUnitPosterior, type MeanSd } from '../src/summaries/exact-unit.js';
import { fitUnitInMemory, unitData, type UnitRow, type UnitSiteRow } from './support/unit-fit.js';

/**
 * z for a two-sided check: about 16 comparisons per fit and 8 fits; 4.5 MCSE keeps the
 * family-wise false-alarm rate near 130 × 6.8e-6 ≈ 1e-3 (normal tails).
 */
const Z = 4.5;

/**
 * A small data set simulated once (seeded) from the model: 10 sites, 2 of them unsampled, sample
 * sizes 1 to 12, one covariate that varies within and between sites.
 */
function smallData(options: { siteSd?: number; finitePopulation?: boolean; seed?: number } = {}): UnitData {
  const rng = createRng(options.seed ?? 2024, 1);
  const sizes = [0, 1, 2, 3, 4, 5, 6, 8, 12, 0];
  const sites: UnitSiteRow[] = [];
  const rows: UnitRow[] = [];
  sizes.forEach((n, i) => {
    const centre = 2 * normal(rng);
    const u = (options.siteSd ?? 0.8) * normal(rng);
    const size = 20 + 5 * i;
    sites.push({ id: `s${i}`, means: [centre + 0.3 * normal(rng)], size });
    for (let j = 0; j < n; j++) {
      const x = centre + normal(rng);
      rows.push({ site: `s${i}`, x: [x], y: 2 + 1.5 * x + u + 1.2 * normal(rng) });
    }
  });
  return unitData(sites, rows, ['x'], { finitePopulation: options.finitePopulation });
}

type Checks = Array<[string, MeanSd]>;

function checksOf(data: UnitData, exact: ReturnType<typeof exactUnitPosterior>): Checks {
  return [
    ...data.siteIds.map((id, i) => [`site:${id}`, exact.sites[i]] as [string, MeanSd]),
    ...data.coefficientNames.map((n, j) => [`coef:${n}`, exact.coefficients[j]] as [string, MeanSd]),
    ['site_sd', exact.siteSd],
    ['unit_sd', exact.unitSd],
  ];
}

async function expectAgreement(data: UnitData, priors: { coefficients: CoefficientPrior; siteSd: ScalePrior; unitSd: ScalePrior }, seed: number) {
  const exact = exactUnitPosterior(data, { coefficients: priors.coefficients, site_sd: priors.siteSd, unit_sd: priors.unitSd });
  const fit = await fitUnitInMemory(data, { ...priors, draws: 5000, warmup: 1000, seed });
  for (const [name, ref] of checksOf(data, exact)) {
    const q = fit.get(name)!;
    expect(q.essBulk, `${name} bulk ESS`).toBeGreaterThan(400);
    expect(Math.abs(q.mean - ref.mean), `${name} mean ${q.mean} vs exact ${ref.mean}`).toBeLessThan(Z * q.mcseMean);
    if (name !== 'site_sd') {
      // sd of a near-normal posterior: Monte Carlo se ≈ sd / √(2 ESS); 6 of them for tail weight.
      expect(Math.abs(q.sd - ref.sd), `${name} sd ${q.sd} vs exact ${ref.sd}`).toBeLessThan((6 * ref.sd) / Math.sqrt(2 * q.essBulk));
    }
  }
  return { exact, fit };
}

const hyperpriors: Array<[string, ScalePrior, ScalePrior]> = [
  ['uniform on σ_u and σ_e', { kind: 'uniform' }, { kind: 'uniform' }],
  ['half-Cauchy(1) on σ_u and σ_e', { kind: 'half_cauchy', scale: 1 }, { kind: 'half_cauchy', scale: 1 }],
  ['inverse-gamma(2, 1) on σ_u², inverse-gamma(3, 2) on σ_e²', { kind: 'inverse_gamma', shape: 2, scale: 1 }, { kind: 'inverse_gamma', shape: 3, scale: 2 }],
];

describe('unit model Gibbs sampler vs exact posterior (2-D numerical integration)', () => {
  const data = smallData();
  for (const [label, siteSd, unitSd] of hyperpriors) {
    it(`${label}: every site, coefficient, σ_u and σ_e within ${Z} MCSE`, async () => {
      await expectAgreement(data, { coefficients: { kind: 'flat' }, siteSd, unitSd }, 11);
    });
  }

  it('normal prior on the coefficients is honoured (fixed, not learned)', async () => {
    const coefficients: CoefficientPrior = { kind: 'normal', mean: 0, sd: 0.5 };
    const { exact } = await expectAgreement(data, { coefficients, siteSd: { kind: 'half_cauchy', scale: 1 }, unitSd: { kind: 'uniform' } }, 12);
    // A tight prior pulls the intercept toward its prior mean 0, but not all the way.
    const flat = exactUnitPosterior(data, { coefficients: { kind: 'flat' }, site_sd: { kind: 'half_cauchy', scale: 1 }, unit_sd: { kind: 'uniform' } });
    expect(exact.coefficients[0].mean).toBeLessThan(flat.coefficients[0].mean);
    expect(exact.coefficients[0].mean).toBeGreaterThan(0);
  });

  it('finite-population targets (sampled units as observed, predictions for the rest)', async () => {
    const finite = smallData({ finitePopulation: true });
    const { exact } = await expectAgreement(finite, { coefficients: { kind: 'flat' }, siteSd: { kind: 'uniform' }, unitSd: { kind: 'uniform' } }, 13);
    // The finite-population mean of a well-sampled site is tighter than the model mean.
    const model = exactUnitPosterior(data, { coefficients: { kind: 'flat' }, site_sd: { kind: 'uniform' }, unit_sd: { kind: 'uniform' } });
    const site = data.siteIds.indexOf('s8'); // 12 of 60 units sampled
    expect(exact.sites[site].sd).toBeLessThan(model.sites[site].sd);
  });

  it('σ_u near zero: agrees with the exact posterior and mixes (ESS per draw of σ_u ≥ 0.3)', async () => {
    const flatSites = smallData({ siteSd: 0.01, seed: 77 });
    const { fit } = await expectAgreement(flatSites, { coefficients: { kind: 'flat' }, siteSd: { kind: 'half_cauchy', scale: 1 }, unitSd: { kind: 'uniform' } }, 14);
    // 4 chains × 5000 draws. Plain Gibbs stalls here (σ_u² | u with all u ≈ 0; Gelman 2006).
    expect(fit.get('site_sd')!.essBulk / 20000).toBeGreaterThan(0.3);
  });
});

describe('draws do not depend on the thread count', () => {
  it('4 chains on 1 thread and on 2 worker threads give identical draws', async () => {
    const data = smallData();
    const request = {
      spec: { kind: 'unit' as const, data, coefficients: { kind: 'flat' as const }, siteSd: { kind: 'half_cauchy' as const, scale: 1 }, unitSd: { kind: 'uniform' as const } },
      plan: { warmup: 50, draws: 200, seed: 99 },
      chains: 4,
    };
    const one = await sampleChains({ ...request, threads: 1 });
    const two = await sampleChains({ ...request, threads: 2 });
    for (let c = 0; c < 4; c++) expect(Buffer.from(two[c].values.buffer).equals(Buffer.from(one[c].values.buffer))).toBe(true);
    const names = unitQuantities(data);
    expect(one[0].values[names.indexOf('unit_sd') * 200]).not.toBe(one[1].values[names.indexOf('unit_sd') * 200]);
  });
});
