/** The area model as the pipeline sees it (see src/models/prepared.ts). */
import type { Settings } from '../config/types.js';
import type { AreaData, FileFingerprint } from '../data/types.js';
import { areaQuantities } from './area.js';
import { areaEblup } from '../summaries/frequentist.js';
import { exactAreaPosterior } from '../summaries/exact.js';
import { areaModelChecks } from '../summaries/model-checks.js';
import type { PreparedFit, SiteInputs } from './prepared.js';

function covariatesWithoutIntercept(data: AreaData): Float64Array {
  const k = data.p - 1;
  const out = new Float64Array(data.m * k);
  for (let i = 0; i < data.m; i++) for (let j = 0; j < k; j++) out[i * k + j] = data.X[i * data.p + j + 1];
  return out;
}

export function areaSiteInputs(data: AreaData): SiteInputs {
  const directSe = new Float64Array(data.m);
  const n = new Float64Array(data.m);
  for (let i = 0; i < data.m; i++) {
    directSe[i] = data.hasData[i] ? Math.sqrt(data.variance[i]) : NaN;
    n[i] = data.hasData[i] ? data.sampleSize[i] : 0;
  }
  return {
    m: data.m,
    siteIds: data.siteIds,
    labels: data.labels,
    n,
    direct: data.direct,
    directSe,
    sampled: data.hasData,
    covariates: covariatesWithoutIntercept(data),
    covariateNames: data.coefficientNames.slice(1),
  };
}

/** Posterior mean over draws of γ_i = σ²/(σ² + ψ_i), the weight on site i's own data. */
export function areaWeights(data: AreaData, siteSdDraws: Float64Array): Float64Array {
  const weights = new Float64Array(data.m);
  for (let i = 0; i < data.m; i++) {
    if (!data.hasData[i]) continue;
    let sum = 0;
    for (let k = 0; k < siteSdDraws.length; k++) {
      const s2 = siteSdDraws[k] * siteSdDraws[k];
      sum += s2 / (s2 + data.variance[i]);
    }
    weights[i] = sum / siteSdDraws.length;
  }
  return weights;
}

/** Exact posterior means of every monitored quantity (β, σ_u, every θ_i) by quadrature. */
export function areaExactMeans(settings: Settings, data: AreaData): Map<string, number> {
  const exact = exactAreaPosterior(
    data,
    { coefficients: settings.model.priors.coefficients, site_sd: settings.model.priors.site_sd },
    [], // means only
  );
  const means = new Map<string, number>();
  data.coefficientNames.forEach((name, j) => means.set(`coef:${name}`, exact.coefficients[j].mean));
  means.set('site_sd', exact.siteSd.mean);
  data.siteIds.forEach((id, i) => means.set(`site:${id}`, exact.sites[i].mean));
  return means;
}

export function prepareArea(settings: Settings, data: AreaData, files: FileFingerprint[]): PreparedFit {
  return {
    kind: 'area',
    spec: {
      kind: 'area',
      data,
      coefficients: settings.model.priors.coefficients,
      siteSd: settings.model.priors.site_sd,
      method: settings.sampling.method,
    },
    quantities: areaQuantities(data),
    coefficientNames: data.coefficientNames,
    sites: areaSiteInputs(data),
    files,
    varianceNote: data.varianceNote,
    weightDirect: (pooled) => areaWeights(data, pooled('site_sd')),
    frequentist: () => areaEblup(data, 'REML'),
    exactMeans: () => areaExactMeans(settings, data),
    modelChecks: (pooled, estimates, rng) =>
      areaModelChecks(
        data,
        (i) => pooled(`site:${data.siteIds[i]}`),
        data.coefficientNames.map((name) => pooled(`coef:${name}`)),
        pooled('site_sd'),
        estimates,
        rng,
      ),
  };
}
