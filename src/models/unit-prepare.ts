/** The unit model as the pipeline sees it (see src/models/prepared.ts). */
import { unitEblup } from '../summaries/frequentist-unit.js';
import type { Settings } from '../config/types.js';
import { formatNumber } from '../data/area.js';
import type { UnitData } from '../data/unit-data.js';
import type { FileFingerprint } from '../data/types.js';
import { UserError } from '../errors.js';
import { exactUnitPosterior } from '../summaries/exact-unit.js';
import { unitModelChecks } from '../summaries/model-checks-unit.js';
import type { Rng } from '../sampler/rng.js';
import { normal } from '../sampler/variates.js';
import type { PreparedFit, SiteInputs } from './prepared.js';
import { unitQuantities } from './unit.js';

/**
 * Per-site survey figures: the direct estimate is the site's sample mean ȳ_i (NaN where n = 0),
 * its standard error the usual s_i/√n_i with s_i² = Σ_j (y_ij − ȳ_i)²/(n_i − 1) (NaN where
 * n < 2; simple random sampling within the site, common practice). The covariates of the
 * outside-the-range check are the population means X̄_i, the values the estimate is made at.
 */
export function unitSiteInputs(data: UnitData): SiteInputs {
  const { m, p } = data;
  const direct = new Float64Array(m).fill(Number.NaN);
  const directSe = new Float64Array(m).fill(Number.NaN);
  const sampled = new Uint8Array(m);
  const q = p - 1;
  const covariates = new Float64Array(m * q);
  for (let i = 0; i < m; i++) {
    const n = data.n[i];
    if (n > 0) {
      sampled[i] = 1;
      direct[i] = data.ybar[i];
      if (n >= 2) directSe[i] = Math.sqrt(data.withinY[i] / (n - 1) / n);
    }
    for (let j = 0; j < q; j++) covariates[i * q + j] = data.populationMeans[i * p + j + 1];
  }
  return {
    m,
    siteIds: data.siteIds,
    labels: data.labels,
    n: Float64Array.from(data.n),
    direct,
    directSe,
    sampled,
    outsideRangeReason: "site's covariate means outside the range of sampled sites",
    covariates,
    covariateNames: data.coefficientNames.slice(1),
  };
}

/**
 * Posterior mean over draws of the weight on the site's own data: γ_i = σ_u²/(σ_u² + σ_e²/n_i),
 * the factor on ȳ_i − x̄_iᵀβ in E[u_i | β, σ's, y] (Battese, Harter & Fuller 1988). For the
 * finite-population target the site's sampled units enter with weight f_i = n_i/N_i as they are,
 * so the weight is f_i + (1 − f_i)γ_i. 0 for unsampled sites.
 */
export function unitWeights(data: UnitData, siteSdDraws: Float64Array, unitSdDraws: Float64Array): Float64Array {
  const weights = new Float64Array(data.m);
  const draws = siteSdDraws.length;
  for (let i = 0; i < data.m; i++) {
    const n = data.n[i];
    if (n === 0) continue;
    let sum = 0;
    for (let d = 0; d < draws; d++) {
      const s2 = siteSdDraws[d] * siteSdDraws[d];
      sum += s2 / (s2 + (unitSdDraws[d] * unitSdDraws[d]) / n);
    }
    const gamma = sum / draws;
    const f = data.finitePopulation ? Math.min(n / data.populationSize[i], 1) : 0;
    weights[i] = f + (1 - f) * gamma;
  }
  return weights;
}

/** How the sampling error enters, in words for the appendix. */
export function unitNote(data: UnitData): string {
  const unsampled = data.m - data.sampledSites;
  const target = data.finitePopulation
    ? 'the finite-population mean of each site (its sampled units as observed, plus model predictions for the units not sampled, from the population sizes N_i)'
    : 'X̄_iᵀβ + u_i for each site, with X̄_i the population means of the covariates from the sites file';
  return (
    `Unit-level model on ${formatNumber(data.units, 12)} units in ${data.sampledSites} sampled sites` +
    (unsampled > 0 ? ` (${unsampled} site${unsampled === 1 ? '' : 's'} without a sample get the synthetic estimate)` : '') +
    `: a site's sample mean of "${data.responseName}" has sampling variance σ_e²/n_i, with the within-site sd σ_e learned from the units. ` +
    `Target: ${target}.`
  );
}

/**
 * Exact posterior means of every monitored quantity by 2-D quadrature (the sampler certificate).
 * Means only, on a grid of half the tests' density (spacing half a conditional sd): the
 * trapezoid rule's error there is of order e^{−2π²·4} ≈ 1e-34 for a Gaussian-shaped integrand
 * (Trefethen & Weideman 2014), far below any Monte Carlo error it is compared with.
 */
export function unitExactMeans(settings: Settings, data: UnitData): Map<string, number> {
  const { priors } = settings.model;
  const exact = exactUnitPosterior(data, { coefficients: priors.coefficients, site_sd: priors.site_sd, unit_sd: priors.unit_sd }, { meansOnly: true, spacingFactor: 2 });
  const means = new Map<string, number>();
  data.coefficientNames.forEach((name, j) => means.set(`coef:${name}`, exact.coefficients[j].mean));
  means.set('site_sd', exact.siteSd.mean);
  means.set('unit_sd', exact.unitSd.mean);
  data.siteIds.forEach((id, i) => means.set(`site:${id}`, exact.sites[i].mean));
  return means;
}

/**
 * Draws of x̄_iᵀβ + u_i, the model's mean of site i's sample mean, for the model checks (sampled
 * sites). The kernel records the target μ_i, not u_i. For the population-mean target
 * μ_i = X̄_iᵀβ + u_i, so x̄_iᵀβ + u_i = μ_i + (x̄_i − X̄_i)ᵀβ exactly, draw by draw. For the
 * finite-population target μ_i also holds the draw of the non-sampled units' mean error, so u_i
 * is drawn afresh from its full conditional u_i | β, σ_u, σ_e, y ~ N(γ_i(ȳ_i − x̄_iᵀβ), γ_i σ_e²/n_i),
 * γ_i = σ_u²/(σ_u² + σ_e²/n_i) (Battese, Harter & Fuller 1988; step 4 of src/models/unit.ts), which
 * with the recorded (β, σ_u, σ_e) is a draw from the joint posterior.
 */
export function unitSampleMeanDraws(data: UnitData, pooled: (quantity: string) => Float64Array, rng: Rng): (site: number) => Float64Array {
  const { p } = data;
  const beta = data.coefficientNames.map((name) => pooled(`coef:${name}`));
  const siteSd = pooled('site_sd');
  const unitSd = pooled('unit_sd');
  const S = siteSd.length;
  return (i) => {
    const out = new Float64Array(S);
    const n = data.n[i];
    if (!data.finitePopulation) {
      const mu = pooled(`site:${data.siteIds[i]}`);
      for (let k = 0; k < S; k++) {
        let shift = 0;
        for (let j = 0; j < p; j++) shift += (data.xbar[i * p + j] - data.populationMeans[i * p + j]) * beta[j][k];
        out[k] = mu[k] + shift;
      }
      return out;
    }
    for (let k = 0; k < S; k++) {
      let eta = 0;
      for (let j = 0; j < p; j++) eta += data.xbar[i * p + j] * beta[j][k];
      const s2 = siteSd[k] * siteSd[k];
      const noise = (unitSd[k] * unitSd[k]) / n;
      const gamma = s2 / (s2 + noise);
      out[k] = eta + gamma * (data.ybar[i] - eta) + Math.sqrt(gamma * noise) * normal(rng);
    }
    return out;
  };
}

export function prepareUnit(settings: Settings, data: UnitData, files: FileFingerprint[]): PreparedFit {
  if (settings.sampling.method === 'plain') {
    throw new UserError('config', `${settings.config_path}: sampling.method: plain is available for the area model only; the unit model always uses the collapsed sampler (remove sampling.method)`);
  }
  return {
    kind: 'unit',
    spec: {
      kind: 'unit',
      data,
      coefficients: settings.model.priors.coefficients,
      siteSd: settings.model.priors.site_sd,
      unitSd: settings.model.priors.unit_sd,
    },
    quantities: unitQuantities(data),
    coefficientNames: data.coefficientNames,
    sites: unitSiteInputs(data),
    files,
    varianceNote: unitNote(data),
    weightDirect: (pooled) => unitWeights(data, pooled('site_sd'), pooled('unit_sd')),
    exactMeans: () => unitExactMeans(settings, data),
    frequentist: () => unitEblup(data),
    modelChecks: (pooled, estimates, rng) =>
      unitModelChecks(
        { siteIds: data.siteIds, n: data.n, ybar: data.ybar, xbar: data.xbar, p: data.p },
        unitSampleMeanDraws(data, pooled, rng),
        data.coefficientNames.map((name) => pooled(`coef:${name}`)),
        pooled('site_sd'),
        pooled('unit_sd'),
        estimates,
        rng,
      ),
  };
}
