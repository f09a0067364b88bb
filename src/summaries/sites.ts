/**
 * Per-site figures for publication: the direct (survey) estimate beside the model estimate,
 * the weight on the site's own data, and the reliability flag with its reasons.
 */
import type { Settings } from '../config/types.js';
import type { AreaData } from '../data/types.js';
import type { QuantitySummary } from './posterior.js';

export type Flag = 'publish' | 'caution' | 'suppress';

export interface SiteEstimate {
  site: string;
  label: string;
  /** Sample size; 0 for an unsampled site, NaN when the config names no sample-size column. */
  n: number;
  direct: number;
  directSe: number;
  directCv: number;
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

export function passesGate(q: QuantitySummary, rhatMax: number, essMin: number): boolean {
  return q.rhat < rhatMax && q.essBulk >= essMin && q.essTail >= essMin;
}

/** Applies the gate (Vehtari et al. 2021 recommend R-hat < 1.01 and ESS > 400) to every quantity. */
export function evaluateGate(summaries: readonly QuantitySummary[], rhatMax: number, essMin: number): GateResult {
  let worstRhat = { quantity: '', value: -Infinity };
  let lowestEssBulk = { quantity: '', value: Infinity };
  let lowestEssTail = { quantity: '', value: Infinity };
  const failing: string[] = [];
  for (const q of summaries) {
    // A constant quantity (NaN diagnostics) cannot be judged; count it as failing.
    if (!(q.rhat <= worstRhat.value)) worstRhat = { quantity: q.name, value: q.rhat };
    if (!(q.essBulk >= lowestEssBulk.value)) lowestEssBulk = { quantity: q.name, value: q.essBulk };
    if (!(q.essTail >= lowestEssTail.value)) lowestEssTail = { quantity: q.name, value: q.essTail };
    if (!passesGate(q, rhatMax, essMin)) failing.push(q.name);
  }
  return { converged: failing.length === 0, worstRhat, lowestEssBulk, lowestEssTail, failing };
}

/** Posterior mean over draws of γ_i = σ²/(σ² + ψ_i), the weight on site i's own data. */
export function weightOnDirect(siteSdDraws: Float64Array, psi: number): number {
  let sum = 0;
  for (let k = 0; k < siteSdDraws.length; k++) {
    const s2 = siteSdDraws[k] * siteSdDraws[k];
    sum += s2 / (s2 + psi);
  }
  return sum / siteSdDraws.length;
}

/** Per covariate, the [min, max] over sampled sites. */
function sampledRanges(data: AreaData): Array<[number, number]> {
  const ranges: Array<[number, number]> = [];
  for (let j = 1; j < data.p; j++) {
    let lo = Infinity;
    let hi = -Infinity;
    for (let i = 0; i < data.m; i++) {
      if (!data.hasData[i]) continue;
      const v = data.X[i * data.p + j];
      if (v < lo) lo = v;
      if (v > hi) hi = v;
    }
    ranges.push([lo, hi]);
  }
  return ranges;
}

function outsideRange(data: AreaData, ranges: Array<[number, number]>, site: number): string[] {
  const names: string[] = [];
  for (let j = 1; j < data.p; j++) {
    const v = data.X[site * data.p + j];
    const [lo, hi] = ranges[j - 1];
    if (v < lo || v > hi) names.push(data.coefficientNames[j]);
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
  context: { converged: boolean; runConverged: boolean; outside: string[] },
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
      reason: `covariates outside the range of sampled sites (${context.outside.join(', ')})`,
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
 * Builds the per-site table. `summaries` holds every monitored quantity by name; `siteSdDraws`
 * is the pooled draws of σ_u (for the weights on own data).
 */
export function siteEstimates(
  data: AreaData,
  summaries: ReadonlyMap<string, QuantitySummary>,
  siteSdDraws: Float64Array,
  settings: Settings,
  gate: GateResult,
): SiteEstimate[] {
  const rules = settings.reliability;
  const ranges = sampledRanges(data);
  return data.siteIds.map((site, i) => {
    const q = summaries.get(`site:${site}`)!;
    const sampled = data.hasData[i] === 1;
    const directSe = sampled ? Math.sqrt(data.variance[i]) : NaN;
    const base = {
      site,
      label: data.labels[i],
      n: sampled ? data.sampleSize[i] : 0,
      direct: sampled ? data.direct[i] : NaN,
      directSe,
      directCv: sampled ? directSe / Math.abs(data.direct[i]) : NaN,
      estimate: q.mean,
      sd: q.sd,
      lower: q.lower,
      upper: q.upper,
      cv: q.sd / Math.abs(q.mean),
      weightDirect: sampled ? weightOnDirect(siteSdDraws, data.variance[i]) : 0,
    };
    const findings = siteFindings(base, rules, {
      converged: passesGate(q, rules.rhat_max, rules.ess_min),
      runConverged: gate.converged,
      outside: outsideRange(data, ranges, i),
    });
    return { ...base, flag: worstFlag(findings), reasons: findings.map((f) => f.reason) };
  });
}

export function countFlags(sites: readonly SiteEstimate[]): Record<Flag, number> {
  const counts: Record<Flag, number> = { publish: 0, caution: 0, suppress: 0 };
  for (const s of sites) counts[s.flag]++;
  return counts;
}
