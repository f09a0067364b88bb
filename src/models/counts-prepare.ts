/** The counts model as the pipeline sees it (see src/models/prepared.ts). */
import type { Settings } from '../config/types.js';
import { formatNumber } from '../data/area.js';
import type { CountsData } from '../data/counts.js';
import type { FileFingerprint } from '../data/types.js';
import { UserError } from '../errors.js';
import { normalQuantile } from '../diagnostics/normal-quantile.js';
import { PG_REAL_METHOD_NOTE } from '../sampler/polya-gamma-real.js';
import { exactCountsPosterior } from '../summaries/exact-counts.js';
import { checkCounts, countsModelChecks } from '../summaries/model-checks-counts.js';
import { countsQuantities } from './counts.js';
import type { PreparedFit, SiteInputs } from './prepared.js';

/**
 * Wilson (1927, "Probable inference, the law of succession, and statistical inference", JASA
 * 22(158), 209–212) score interval for a proportion p̂ from n trials at normal quantile z:
 *   (p̂ + z²/(2n) ± z √(p̂(1 − p̂)/n + z²/(4n²))) / (1 + z²/n).
 * Recommended for small n by Brown, Cai & DasGupta (2001, Statistical Science 16(2), 101–133);
 * unlike the Wald interval p̂ ± z·se it is not empty at 0 or n cases and stays inside [0, 1].
 * With a design effect, n is the effective sample size n/deff (Korn & Graubard 1998 — recalled).
 */
export function wilsonInterval(share: number, n: number, z: number): { lower: number; upper: number } {
  const z2n = (z * z) / n;
  const centre = (share + z2n / 2) / (1 + z2n);
  const half = (z / (1 + z2n)) * Math.sqrt((share * (1 - share)) / n + z2n / (4 * n));
  return { lower: Math.max(0, centre - half), upper: Math.min(1, centre + half) };
}

/**
 * The CV rule for shares: sd / min(p, 1 − p), the coefficient of variation of the share or of
 * its complement, whichever is smaller. The plain CV sd/p judges a share near 0 as hopeless and
 * one near 1 as excellent at the same sd, and gives opposite verdicts for the share of households
 * with a condition and the share without it; the rule here is symmetric in p ↔ 1 − p, equals
 * the plain CV for p ≤ ½, and keeps the configured thresholds (reliability.cv_caution,
 * cv_suppress) meaningful. (This project's rule; the problem with the plain CV near 0 and 1 is
 * the one the US NCHS data presentation standards for proportions address with interval-width
 * rules instead: Parker et al. 2017, Vital Health Stat 2(175) — thresholds not verified here.)
 * NaN when p is 0 or 1 (no sd relative to a zero share: the direct estimate at 0 or all cases).
 */
export function shareCv(estimate: number, sd: number): number {
  const smaller = Math.min(estimate, 1 - estimate);
  return smaller > 0 ? sd / smaller : Number.NaN;
}

function covariatesWithoutIntercept(data: CountsData): Float64Array {
  const k = data.p - 1;
  const out = new Float64Array(data.m * k);
  for (let i = 0; i < data.m; i++) for (let j = 0; j < k; j++) out[i * k + j] = data.X[i * data.p + j + 1];
  return out;
}

/**
 * Per-site survey figures: direct = y_i/n_i; direct_se = √(deff · p̂(1 − p̂)/n_i), the binomial
 * standard error (times the design effect) — the usual plug-in, 0 at 0 or all cases, which is
 * why the Wilson interval is reported beside it; n = trials (0: no sample, synthetic estimate).
 */
export function countsSiteInputs(data: CountsData, interval: number): SiteInputs {
  const { m } = data;
  const direct = new Float64Array(m).fill(Number.NaN);
  const directSe = new Float64Array(m).fill(Number.NaN);
  const lower = new Float64Array(m).fill(Number.NaN);
  const upper = new Float64Array(m).fill(Number.NaN);
  const z = normalQuantile(0.5 + interval / 2);
  for (let i = 0; i < m; i++) {
    if (!data.hasData[i]) continue;
    const n = data.trials[i];
    const share = data.cases[i] / n;
    direct[i] = share;
    directSe[i] = Math.sqrt((data.designEffect * share * (1 - share)) / n);
    const w = wilsonInterval(share, data.effectiveTrials[i], z);
    lower[i] = w.lower;
    upper[i] = w.upper;
  }
  return {
    m,
    siteIds: data.siteIds,
    labels: data.labels,
    n: Float64Array.from(data.trials),
    direct,
    directSe,
    sampled: data.hasData,
    covariates: covariatesWithoutIntercept(data),
    covariateNames: data.coefficientNames.slice(1),
    directInterval: { lower, upper, method: 'Wilson score interval' },
    cvOf: shareCv,
  };
}

/**
 * Posterior mean over draws of the weight on the site's own data, on the logit scale:
 *   w_i = ñ_i p_i(1 − p_i) σ_u² / (1 + ñ_i p_i(1 − p_i) σ_u²),
 * the area model's σ_u²/(σ_u² + ψ_i) with ψ_i = 1/(ñ_i p_i(1 − p_i)), the large-sample variance
 * of the empirical logit of a binomial share (delta method; the inverse Fisher information of
 * the logit, common practice), evaluated at each draw of p_i and σ_u. 0 for unsampled sites.
 */
export function countsWeights(data: CountsData, siteDraws: (site: number) => Float64Array, siteSdDraws: Float64Array): Float64Array {
  const weights = new Float64Array(data.m);
  for (let i = 0; i < data.m; i++) {
    if (!data.hasData[i]) continue;
    const p = siteDraws(i);
    const n = data.effectiveTrials[i];
    let sum = 0;
    for (let d = 0; d < p.length; d++) {
      const information = n * p[d] * (1 - p[d]) * siteSdDraws[d] * siteSdDraws[d];
      sum += information / (1 + information);
    }
    weights[i] = sum / p.length;
  }
  return weights;
}

/**
 * How the direct figures were formed from the counts, for the appendix (shown where the area
 * model states its ψ_i). The interval, CV rule and sampler have their own notes below.
 */
export function countsNote(data: CountsData, interval: number): string {
  const deff = data.designEffect;
  const percent = `${formatNumber(100 * interval)}%`;
  const parts = [
    `Cases y_i (column "${data.casesColumn}") out of trials n_i (column "${data.trialsColumn}"), binomial with a logit link.`,
    deff === 1
      ? 'No design effect: the counts are used as simple random samples within each site.'
      : `Design effect ${formatNumber(deff)}: the likelihood uses the effective counts y_i/${formatNumber(deff)} and n_i/${formatNumber(deff)} ` +
        '(effective sample size, Korn & Graubard 1998), and the direct standard error is multiplied by its square root.',
    `Direct estimate: the share y_i/n_i; its standard error the binomial √(p̂(1 − p̂)/n_i)${deff === 1 ? '' : ' × √deff'}, ` +
      `which is 0 at 0 or all cases, so the ${percent} interval of a direct share is the Wilson score interval instead.`,
  ];
  return parts.join(' ');
}

/** The direct interval in words (summary.json model.direct_interval). */
export function countsDirectIntervalNote(data: CountsData): string {
  return data.designEffect === 1
    ? 'Wilson score interval (Wilson 1927): stays inside [0, 1] and is not empty at 0 or all cases'
    : `Wilson score interval (Wilson 1927) with the effective sample size n_i/${formatNumber(data.designEffect)}: ` +
        'stays inside [0, 1] and is not empty at 0 or all cases';
}

/** The CV rule of shares in words (summary.json model.cv_rule); see `shareCv`. */
export const COUNTS_CV_RULE =
  'sd / min(p, 1 − p): the sd over the smaller of the share and its complement, so that a share near 0 and one ' +
  'near 1 are judged alike (this project\'s rule; the plain sd/p is huge near 0 and tiny near 1)';

/** The sampler in words (summary.json model.method_note). */
export const COUNTS_METHOD_NOTE =
  'Pólya–Gamma augmentation (Polson, Scott & Windle 2013) turns each site into a Gaussian observation of the logit; ' +
  `σ_u is then drawn with β and the logits integrated out. ${PG_REAL_METHOD_NOTE}`;

/** Largest number of sites for which an intercept-only fit gets the exact certificate (seconds of quadrature). */
const EXACT_MAX_SITES = 40;

/** Exact posterior means of an intercept-only counts model (β₀, σ_u, every p_i) by quadrature. */
export function countsExactMeans(settings: Settings, data: CountsData): Map<string, number> {
  let exact: ReturnType<typeof exactCountsPosterior>;
  try {
    exact = exactCountsPosterior({
      cases: data.effectiveCases,
      trials: data.effectiveTrials,
      coefficients: settings.model.priors.coefficients,
      siteSd: settings.model.priors.site_sd,
    });
  } catch (error) {
    if (!(error instanceof RangeError)) throw error;
    throw new UserError('data', `exact posterior not available: ${error.message}`);
  }
  const means = new Map<string, number>();
  means.set('coef:intercept', exact.intercept.mean);
  means.set('site_sd', exact.siteSd.mean);
  data.siteIds.forEach((id, i) => means.set(`site:${id}`, exact.sites[i].mean));
  return means;
}

export function prepareCounts(settings: Settings, data: CountsData, files: FileFingerprint[]): PreparedFit {
  return {
    kind: 'counts',
    spec: {
      kind: 'counts',
      data,
      coefficients: settings.model.priors.coefficients,
      siteSd: settings.model.priors.site_sd,
      method: settings.sampling.method,
    },
    quantities: countsQuantities(data),
    coefficientNames: data.coefficientNames,
    sites: countsSiteInputs(data, settings.interval),
    files,
    varianceNote: countsNote(data, settings.interval),
    directIntervalNote: countsDirectIntervalNote(data),
    cvRule: COUNTS_CV_RULE,
    methodNote: COUNTS_METHOD_NOTE,
    weightDirect: (pooled) => countsWeights(data, (i) => pooled(`site:${data.siteIds[i]}`), pooled('site_sd')),
    exactMeans: data.p === 1 && data.m <= EXACT_MAX_SITES ? () => countsExactMeans(settings, data) : undefined,
    modelChecks: (pooled, estimates, rng) => {
      // Replicates use the counts the likelihood uses: the effective counts, rounded (see checkCounts).
      const { cases, trials } = checkCounts(data.effectiveCases, data.effectiveTrials, data.hasData);
      const direct = Float64Array.from(data.trials, (n, i) => (data.hasData[i] ? data.cases[i] / n : Number.NaN));
      return countsModelChecks(
        { siteIds: data.siteIds, cases, trials, direct, X: data.X, p: data.p },
        (i) => pooled(`site:${data.siteIds[i]}`),
        data.coefficientNames.map((name) => pooled(`coef:${name}`)),
        pooled('site_sd'),
        estimates,
        rng,
      );
    },
  };
}
