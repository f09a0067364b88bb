/**
 * Simulation: 95% credible intervals of the unit model's site targets cover the truth 95% of the
 * time, for the model mean X̄_iᵀβ + u_i and for the finite-population mean.
 *
 * When the truth is drawn from the same (proper) prior the model uses, posterior intervals have
 * exactly their nominal coverage averaged over replications (the self-consistency behind
 * simulation-based calibration; Cook, Gelman & Rubin 2006, JCGS 15(3)). So any departure beyond
 * Monte Carlo error is a bug in the sampler or the summaries, not a modelling question.
 */
import { describe, expect, it } from 'vitest';
import { createRng, type Rng } from '../src/sampler/rng.js';
import { inverseGamma, normal } from '../src/sampler/variates.js';
import { fitUnitInMemory, unitData, type UnitRow, type UnitSiteRow } from './support/unit-fit.js';

const REPLICATES = 150;
const SITES = 15;
const priors = {
  coefficients: { kind: 'normal' as const, mean: 0, sd: 1 },
  siteSd: { kind: 'inverse_gamma' as const, shape: 3, scale: 2 },
  unitSd: { kind: 'inverse_gamma' as const, shape: 4, scale: 3 },
};

/** One data set from the prior: β, σ_u, σ_e, the site effects, every population unit. */
function simulate(rng: Rng, finitePopulation: boolean) {
  const beta = [normal(rng), normal(rng)];
  const siteSd = Math.sqrt(inverseGamma(rng, priors.siteSd.shape, priors.siteSd.scale));
  const unitSd = Math.sqrt(inverseGamma(rng, priors.unitSd.shape, priors.unitSd.scale));
  const sites: UnitSiteRow[] = [];
  const rows: UnitRow[] = [];
  const truth: number[] = [];
  for (let i = 0; i < SITES; i++) {
    const centre = normal(rng);
    const u = siteSd * normal(rng);
    // the first three sites unsampled: their intervals are synthetic and must cover too
    const n = i < 3 ? 0 : 1 + Math.floor(rng.uniform() * 6);
    const size = 8 + Math.floor(rng.uniform() * 12);
    let sumX = 0;
    let sumY = 0;
    for (let j = 0; j < size; j++) {
      const x = centre + normal(rng);
      const y = beta[0] + beta[1] * x + u + unitSd * normal(rng);
      sumX += x;
      sumY += y;
      if (j < n) rows.push({ site: `s${i}`, x: [x], y });
    }
    const populationMean = sumX / size;
    sites.push({ id: `s${i}`, means: [populationMean], size });
    truth.push(finitePopulation ? sumY / size : beta[0] + beta[1] * populationMean + u);
  }
  return { data: unitData(sites, rows, ['x'], { finitePopulation }), truth };
}

describe('interval coverage by simulation (truth drawn from the prior)', () => {
  for (const finitePopulation of [false, true]) {
    const target = finitePopulation ? 'finite-population means' : 'model means X̄ᵀβ + u_i';
    it(`95% intervals of the ${target} cover the truth at the nominal rate over ${REPLICATES} data sets`, async () => {
      const rng = createRng(finitePopulation ? 2027 : 2026, 88);
      const perReplicate: number[] = [];
      for (let r = 0; r < REPLICATES; r++) {
        const { data, truth } = simulate(rng, finitePopulation);
        const fit = await fitUnitInMemory(data, { ...priors, chains: 2, warmup: 200, draws: 1000, seed: 5000 + r });
        let covered = 0;
        data.siteIds.forEach((id, i) => {
          const q = fit.get(`site:${id}`)!;
          if (q.lower <= truth[i] && truth[i] <= q.upper) covered++;
        });
        perReplicate.push(covered / SITES);
      }
      const mean = perReplicate.reduce((a, b) => a + b, 0) / REPLICATES;
      const variance = perReplicate.reduce((a, b) => a + (b - mean) ** 2, 0) / (REPLICATES - 1);
      // The standard error comes from the spread across replicates (sites within a data set
      // share β and the σ's, so they are not independent trials); never below the binomial one.
      const se = Math.max(Math.sqrt(variance / REPLICATES), Math.sqrt((0.95 * 0.05) / (REPLICATES * SITES)));
      // 4 se either side: false-alarm rate 6e-5 under the normal approximation. Quantiles of
      // 2,000 draws add a small negative bias, well under 1 se here.
      expect(Math.abs(mean - 0.95), `coverage ${mean.toFixed(4)} ± ${se.toFixed(4)}`).toBeLessThan(4 * se);
    });
  }
});
