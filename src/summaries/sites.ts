/**
 * Per-site figures for publication: the direct (survey) estimate beside the model estimate,
 * the weight on the site's own data, and the reliability flag with its reasons.
 */
import type { Settings } from '../config/types.js';
import type { SiteInputs } from '../models/prepared.js';
import type { QuantitySummary } from './posterior.js';
import { normalQuantile } from '../diagnostics/normal-quantile.js';

export type Flag = 'publish' | 'caution' | 'suppress';

export interface SiteEstimate {
  site: string;
  label: string;
  /** Sample size; 0 for an unsampled site, NaN when the config names no sample-size column. */
  n: number;
  direct: number;
  directSe: number;
  directCv: number;
  /**
   * Interval of the direct estimate at the run's interval level: the model's own where it has one
   * (counts: Wilson score), else the normal interval direct ± z·direct_se; NaN where not available.
   */
  directLower: number;
  directUpper: number;
  estimate: number;
  sd: number;
  lower: number;
  upper: number;
  cv: number;
  weightDirect: number;
  flag: Flag;
  reasons: string[];
}

/** Convergence of the run as a whole against the gate. */
export interface GateResult {
  converged: boolean;
  worstRhat: { quantity: string; value: number };
  lowestEssBulk: { quantity: string; value: number };
  lowestEssTail: { quantity: string; value: number };
  /** Quantities failing the gate (R-hat ≥ rhat_max, or bulk or tail ESS < ess_min, or NaN). */
  failing: string[];
}

/**
 * A quantity passes when R-hat < rhatMax and both ESS ≥ essMin. A quantity with no posterior
 * spread at all (e.g. a finite-population mean of a fully sampled site) is known exactly and
 * passes; its diagnostics are undefined (NaN), not failing.
 */
export function passesGate(q: QuantitySummary, rhatMax: number, essMin: number): boolean {
  if (q.sd === 0 && Number.isFinite(q.mean)) return true;
  return q.rhat < rhatMax && q.essBulk >= essMin && q.essTail >= essMin;
}

/** Applies the gate (Vehtari et al. 2021 recommend R-hat < 1.01 and ESS > 400) to every quantity. */
export function evaluateGate(summaries: readonly QuantitySummary[], rhatMax: number, essMin: number): GateResult {
  let worstRhat = { quantity: '', value: -Infinity };
  let lowestEssBulk = { quantity: '', value: Infinity };
  let lowestEssTail = { quantity: '', value: Infinity };
  const failing: string[] = [];
  for (const q of summaries) {
    // A quantity known exactly (no spread) has no diagnostics to report; any other NaN fails.
    if (q.sd === 0 && Number.isFinite(q.mean)) continue;
    if (!(q.rhat <= worstRhat.value)) worstRhat = { quantity: q.name, value: q.rhat };
    if (!(q.essBulk >= lowestEssBulk.value)) lowestEssBulk = { quantity: q.name, value: q.essBulk };
    if (!(q.essTail >= lowestEssTail.value)) lowestEssTail = { quantity: q.name, value: q.essTail };
    if (!passesGate(q, rhatMax, essMin)) failing.push(q.name);
  }
  return { converged: failing.length === 0, worstRhat, lowestEssBulk, lowestEssTail, failing };
}

/** Per covariate, the [min, max] over sampled sites. */
function sampledRanges(sites: SiteInputs): Array<[number, number]> {
  const k = sites.covariateNames.length;
  const ranges: Array<[number, number]> = Array.from({ length: k }, () => [Infinity, -Infinity]);
  for (let i = 0; i < sites.m; i++) {
    if (!sites.sampled[i]) continue;
    for (let j = 0; j < k; j++) {
      const v = sites.covariates[i * k + j];
      if (v < ranges[j][0]) ranges[j][0] = v;
      if (v > ranges[j][1]) ranges[j][1] = v;
    }
  }
  return ranges;
}

function outsideRange(sites: SiteInputs, ranges: Array<[number, number]>, site: number): string[] {
  const k = sites.covariateNames.length;
  const names: string[] = [];
  for (let j = 0; j < k; j++) {
    const v = sites.covariates[site * k + j];
    if (v < ranges[j][0] || v > ranges[j][1]) names.push(sites.covariateNames[j]);
  }
  return names;
}

const percent = (x: number): string => `${(100 * x).toFixed(x < 0.1 ? 1 : 0)}%`;

interface Finding {
  flag: Flag;
  reason: string;
}

/** The reliability rules, each a pure check on one site; the flag is the worst finding. */
export function siteFindings(
  est: Pick<SiteEstimate, 'n' | 'cv' | 'weightDirect'>,
  rules: Settings['reliability'],
  context: { converged: boolean; runConverged: boolean; outside: string[]; outsideReason?: string },
): Finding[] {
  const findings: Finding[] = [];
  if (!context.runConverged)
    findings.push({ flag: 'suppress', reason: 'run failed the convergence gate: figures are not final' });
  else if (!context.converged) findings.push({ flag: 'suppress', reason: 'estimate did not converge' });
  if (!(est.cv <= rules.cv_suppress))
    findings.push({ flag: 'suppress', reason: `CV ${percent(est.cv)} above ${percent(rules.cv_suppress)}` });
  else if (est.cv > rules.cv_caution)
    findings.push({ flag: 'caution', reason: `CV ${percent(est.cv)} above ${percent(rules.cv_caution)}` });
  if (est.n === 0) findings.push({ flag: 'caution', reason: 'no sample: synthetic estimate' });
  else if (est.n < rules.min_sample)
    findings.push({ flag: 'caution', reason: `small sample (n = ${est.n}, below ${rules.min_sample})` });
  if (est.n !== 0 && est.weightDirect < rules.min_weight_direct)
    findings.push({
      flag: 'caution',
      reason: `mostly synthetic (weight on own data ${percent(est.weightDirect)})`,
    });
  if (context.outside.length > 0)
    findings.push({
      flag: 'caution',
      reason: `${context.outsideReason ?? 'covariates outside the range of sampled sites'} (${context.outside.join(', ')})`,
    });
  return findings;
}

const SEVERITY: Record<Flag, number> = { publish: 0, caution: 1, suppress: 2 };

export function worstFlag(findings: readonly Finding[]): Flag {
  let flag: Flag = 'publish';
  for (const f of findings) if (SEVERITY[f.flag] > SEVERITY[flag]) flag = f.flag;
  return flag;
}

/**
 * Builds the per-site table. `summaries` holds every monitored quantity by name; `weights` is
 * each site's posterior mean weight on its own data; `interval` is the run's interval level,
 * used for the normal interval of the direct estimate when the model provides none.
 */
export function siteEstimates(
  sites: SiteInputs,
  summaries: ReadonlyMap<string, QuantitySummary>,
  weights: Float64Array,
  rules: Settings['reliability'],
  gate: GateResult,
  interval: number,
): SiteEstimate[] {
  const ranges = sampledRanges(sites);
  const z = normalQuantile(0.5 + interval / 2);
  const own = sites.directInterval;
  const cvOf = sites.cvOf ?? ((estimate: number, sd: number) => sd / Math.abs(estimate));
  return sites.siteIds.map((site, i) => {
    const q = summaries.get(`site:${site}`)!;
    const sampled = sites.sampled[i] === 1;
    const base = {
      site,
      label: sites.labels[i],
      n: sites.n[i],
      direct: sampled ? sites.direct[i] : NaN,
      directSe: sampled ? sites.directSe[i] : NaN,
      directCv: sampled ? cvOf(sites.direct[i], sites.directSe[i]) : NaN,
      directLower: !sampled ? NaN : own ? own.lower[i] : sites.direct[i] - z * sites.directSe[i],
      directUpper: !sampled ? NaN : own ? own.upper[i] : sites.direct[i] + z * sites.directSe[i],
      estimate: q.mean,
      sd: q.sd,
      lower: q.lower,
      upper: q.upper,
      cv: cvOf(q.mean, q.sd),
      weightDirect: sampled ? weights[i] : 0,
    };
    const findings = siteFindings(base, rules, {
      converged: passesGate(q, rules.rhat_max, rules.ess_min),
      runConverged: gate.converged,
      outside: outsideRange(sites, ranges, i),
      outsideReason: sites.outsideRangeReason,
    });
    return { ...base, flag: worstFlag(findings), reasons: findings.map((f) => f.reason) };
  });
}

export function countFlags(sites: readonly SiteEstimate[]): Record<Flag, number> {
  const counts: Record<Flag, number> = { publish: 0, caution: 0, suppress: 0 };
  for (const s of sites) counts[s.flag]++;
  return counts;
}
