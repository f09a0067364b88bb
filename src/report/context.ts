/**
 * Builds the template context: every value the templates print, already formatted, from the run
 * folder alone. Text values stay plain strings (Handlebars escapes them); only markup this module
 * builds itself (charts, typeset maths) is passed as `SafeString`.
 */
import Handlebars from 'handlebars';
import { traceDensityPlot } from './mcmc-plots.js';
import { intervalsChart, shrinkageChart, cvChart, type ChartSite } from './charts.js';
import { comparisonsView, type ComparisonsView } from './comparisons.js';
import { auditView, type AuditView } from './audit.js';
import { fixed, normalQuantile, percent, significant, whole } from './format.js';
import { estimatesMap, flagsMap, type MapSite, type SiteMap } from './map.js';
import { PRIOR_TARGETS, describePrior, leadHtml, modelEquations, normalisePrior, summaryEquations, tex } from './maths.js';
import { drawsOf, type DiagnosticRow, type Flag, type RunFolder, type SiteRow } from './read-run.js';

type Safe = Handlebars.SafeString;
const safe = (html: string): Safe => new Handlebars.SafeString(html);

export const FLAG_LABELS: Record<Flag, string> = { publish: 'Publish', caution: 'Caution', suppress: 'Suppressed' };

export interface SiteView {
  id: string;
  label: string;
  n: number;
  synthetic: boolean;
  suppressed: boolean;
  /** The direct figure; `interval` is set for shares (shown instead of ± se), null otherwise. */
  survey: { mean: string; se: string; cv: string; interval: string | null } | null;
  estimate: string | null;
  interval: string | null;
  cv: string;
  weight: string;
  flag: Flag;
  flagLabel: string;
  reasons: string[];
}

/**
 * Words that depend on what the direct figure is: a mean (area and unit models) or a share of
 * cases (counts). Mean wording reproduces the report's original text exactly.
 */
export interface Wording {
  share: boolean;
  /** "Survey mean" or "Survey share", and the lower-case and plural forms. */
  survey: string;
  surveyLower: string;
  surveyPlural: string;
  surveyLowerPlural: string;
  /** How the survey interval in the intervals chart is formed. */
  surveyIntervalHow: string;
  /** The guide's sentences on the survey figure and on the CV. */
  surveyGuide: string;
  cvGuide: string;
}

export function wording(kind: string, intervalPercent: string): Wording {
  if (kind === 'counts') {
    return {
      share: true,
      survey: 'Survey share',
      surveyLower: 'survey share',
      surveyPlural: 'Survey shares',
      surveyLowerPlural: 'survey shares',
      surveyIntervalHow: 'the Wilson score interval of the share, which stays between 0 and 1 and is not empty at 0 cases',
      surveyGuide: 'is the share of sampled units in a site that have the condition (cases out of those sampled). Where few units were sampled it is noisy.',
      cvGuide:
        'is the estimate’s standard deviation as a share of the estimate, or of its complement (1 − estimate) when that is smaller, ' +
        'so that shares near 0 and near 1 are judged alike; smaller is more reliable.',
    };
  }
  return {
    share: false,
    survey: 'Survey mean',
    surveyLower: 'survey mean',
    surveyPlural: 'Survey means',
    surveyLowerPlural: 'survey means',
    surveyIntervalHow: `survey mean ± ${intervalPercent} normal quantile × se`,
    surveyGuide: 'is the plain average of the sampled units in a site. Where few units were sampled it is noisy.',
    cvGuide: 'is the estimate’s standard deviation as a share of the estimate; smaller is more reliable.',
  };
}

export interface ReportContext {
  paper: 'A4' | 'Letter';
  title: string;
  period: string | null;
  measure: { name: string; unit: string; decimals: number };
  wording: Wording;
  converged: boolean;
  status: {
    rhatMax: string;
    essMin: string;
    worstRhat: { quantity: string; value: string } | null;
    lowestEssBulk: { quantity: string; value: string } | null;
    lowestEssTail: { quantity: string; value: string } | null;
    failing: string[];
    failingMore: number;
  };
  counts: { sites: number; sampled: number; unsampled: number; publish: number; caution: number; suppress: number };
  intervalPercent: string;
  reliability: { cvCaution: string; cvSuppress: string; minSample: number; minWeight: string | null };
  created: string | null;
  tool: { name: string; version: string };
  sites: SiteView[];
  charts: { intervals: Safe[]; shrinkage: Safe; cv: Safe; mapEstimates: Safe | null; mapFlags: Safe | null };
  mapNotes: string[];
  /** The comparisons section, when the run folder has a comparisons/ folder (shrinkwell compare). */
  comparisons: ComparisonsView | null;
  /** The auditor's checks (frequentist cross-check, sampler certificate, model checks, benchmarking); each part null when absent. */
  audit: AuditView;
  appendix: AppendixView;
}

export interface AppendixView {
  modelKind: string;
  equations: Array<{ lead: Safe; html: Safe }>;
  summaryEquations: Array<{ lead: Safe; html: Safe }>;
  priors: Array<{ name: string; symbol: Safe; prior: Safe; values: string; note: string | null }>;
  varianceNote: string | null;
  /** "Sampling variances" (area, unit) or "Direct estimates" (counts). */
  varianceHeading: string;
  directInterval: string | null;
  cvRule: string | null;
  methodNote: string | null;
  config: { path: string | null; sha256: string | null };
  inputs: Array<{ role: string; path: string; rows: string; sha256: string }>;
  coefficients: Array<{ quantity: string; name: string; estimate: string; sd: string; lower: string; upper: string }>;
  sampling: { chains: number; warmup: string; draws: string; total: string; seed: string; method: string; methodNote: string | null; threads: string };
  diagnostics: {
    parameters: Array<{ quantity: string; name: string; rhat: string; essBulk: string; essTail: string; mcse: string; fails: boolean }>;
    sites: { count: number; failing: number; worstRhat: string | null; worstRhatSite: string | null; lowestEssBulk: string | null; lowestEssBulkSite: string | null; lowestEssTail: string | null; lowestEssTailSite: string | null };
  };
  traces: Array<{ quantity: string; svg: Safe }>;
  traceMissing: string[];
  reproduce: { command: string | null; node: string | null; platform: string | null; created: string | null; threads: string };
}

/** Name of a monitored quantity in words. */
export function quantityName(quantity: string): string {
  if (quantity === 'coef:intercept') return 'Intercept';
  if (quantity.startsWith('coef:')) return `Coefficient of ${quantity.slice(5)}`;
  if (quantity === 'site_sd') return 'Between-site standard deviation';
  if (quantity === 'unit_sd') return 'Within-site standard deviation';
  if (quantity.startsWith('site:')) return `Site ${quantity.slice(5)}`;
  return quantity;
}

const METHOD_NOTES: Record<string, string> = {
  collapsed: 'Gibbs sampling with the between-site variance drawn with the site effects integrated out (collapsed), which keeps mixing good when the between-site spread is near zero.',
  plain: 'Plain Gibbs sampling: each block drawn from its full conditional in turn.',
};

function siteView(site: SiteRow, decimals: number, share: boolean): SiteView {
  const suppressed = site.flag === 'suppress';
  const sampled = site.n > 0 && site.direct !== null;
  const interval = share && site.direct_lower !== null && site.direct_upper !== null
    ? `${fixed(site.direct_lower, decimals)}–${fixed(site.direct_upper, decimals)}`
    : null;
  return {
    id: site.site,
    label: site.label,
    n: site.n,
    synthetic: site.n === 0,
    suppressed,
    survey: sampled && !suppressed ? { mean: fixed(site.direct, decimals), se: fixed(site.direct_se, decimals), cv: percent(site.direct_cv), interval } : null,
    estimate: suppressed ? null : fixed(site.estimate, decimals),
    interval: suppressed ? null : `${fixed(site.lower, decimals)} – ${fixed(site.upper, decimals)}`,
    cv: percent(site.cv),
    weight: fixed(site.weight_direct, 2),
    flag: site.flag,
    flagLabel: FLAG_LABELS[site.flag],
    reasons: site.reasons,
  };
}

/** The survey interval: the run's own columns where written (counts: Wilson), else direct ± z·se. */
function chartSite(site: SiteRow, z: number): ChartSite {
  const hasDirect = site.direct !== null && site.direct_se !== null && Number.isFinite(site.direct_se);
  const hasOwn = site.direct_lower !== null && site.direct_upper !== null && Number.isFinite(site.direct_lower) && Number.isFinite(site.direct_upper);
  return {
    id: site.site,
    label: site.label,
    n: site.n,
    direct: site.direct,
    directLower: hasOwn ? site.direct_lower : hasDirect ? (site.direct as number) - z * (site.direct_se as number) : null,
    directUpper: hasOwn ? site.direct_upper : hasDirect ? (site.direct as number) + z * (site.direct_se as number) : null,
    directCv: site.direct_cv,
    estimate: site.estimate,
    lower: site.lower,
    upper: site.upper,
    cv: site.cv,
    weight: site.weight_direct,
    flag: site.flag,
  };
}

/** The extreme of a statistic over rows (largest R-hat, smallest ESS), ignoring blanks. */
function extreme(rows: DiagnosticRow[], key: 'rhat' | 'ess_bulk' | 'ess_tail', worse: (a: number, b: number) => boolean): DiagnosticRow | null {
  let best: DiagnosticRow | null = null;
  for (const row of rows) {
    const v = row[key];
    if (v === null) continue;
    // NaN counts as worst: a chain that did not move has no usable R-hat.
    if (best === null || Number.isNaN(v) || (!Number.isNaN(best[key] as number) && worse(v, best[key] as number))) best = row;
  }
  return best;
}

export interface ContextOptions {
  paper: 'A4' | 'Letter';
  map: SiteMap | null;
  mapNotes: string[];
}

/** Everything the templates print, from the run folder. */
/** Whether the run's unit model targeted finite-population means (recorded settings). */
function finitePopulationRun(run: RunFolder): boolean {
  const model = run.manifest.settings?.model as { finite_population?: unknown } | undefined;
  return model?.finite_population === true;
}

export function buildContext(run: RunFolder, opts: ContextOptions): ReportContext {
  const { summary, manifest } = run;
  const decimals = summary.measure.decimals;
  const z = normalQuantile(0.5 + summary.interval / 2);
  const intervalPercent = `${Number((summary.interval * 100).toPrecision(4))}%`;
  const chartSites = run.estimates.map((s) => chartSite(s, z));
  const unit = summary.measure.unit;
  const words = wording(summary.model.kind, intervalPercent);

  const mapSites: MapSite[] = run.estimates.map((s) => ({ id: s.site, label: s.label, n: s.n, estimate: s.estimate, flag: s.flag }));
  const charts = {
    intervals: intervalsChart(chartSites, { unit, level: intervalPercent, survey: words.survey }).map(safe),
    shrinkage: safe(shrinkageChart(chartSites, { unit, survey: words.survey })),
    cv: safe(cvChart(chartSites, { cvCaution: summary.reliability.cv_caution, cvSuppress: summary.reliability.cv_suppress, survey: words.survey })),
    mapEstimates: opts.map ? safe(estimatesMap(opts.map, mapSites, { unit, decimals, title: summary.measure.name })) : null,
    mapFlags: opts.map ? safe(flagsMap(opts.map, mapSites, {})) : null,
  };

  const gateEntry = (entry: { quantity: string; value: number } | null, format: (v: number) => string) =>
    entry ? { quantity: entry.quantity, value: format(entry.value) } : null;
  const failingShown = summary.gate.failing.slice(0, 12);
  const counts = {
    sites: summary.counts.sites,
    sampled: summary.counts.sampled,
    unsampled: summary.counts.sites - summary.counts.sampled,
    publish: summary.counts.publish,
    caution: summary.counts.caution,
    suppress: summary.counts.suppress,
  };

  return {
    paper: opts.paper,
    title: summary.title,
    period: summary.period,
    measure: summary.measure,
    wording: words,
    converged: summary.converged,
    status: {
      rhatMax: fixed(summary.reliability.rhat_max, 3),
      essMin: whole(summary.reliability.ess_min),
      worstRhat: gateEntry(summary.gate.worst_rhat, (v) => fixed(v, 3)),
      lowestEssBulk: gateEntry(summary.gate.lowest_ess_bulk, whole),
      lowestEssTail: gateEntry(summary.gate.lowest_ess_tail, whole),
      failing: failingShown,
      failingMore: summary.gate.failing.length - failingShown.length,
    },
    counts,
    intervalPercent,
    reliability: {
      cvCaution: percent(summary.reliability.cv_caution, 0),
      cvSuppress: percent(summary.reliability.cv_suppress, 0),
      minSample: summary.reliability.min_sample,
      minWeight: summary.reliability.min_weight_direct === null ? null : fixed(summary.reliability.min_weight_direct, 2),
    },
    created: manifest.created,
    tool: { name: manifest.toolName, version: manifest.toolVersion },
    sites: run.estimates.map((s) => siteView(s, decimals, words.share)),
    charts,
    mapNotes: opts.mapNotes,
    comparisons: comparisonsView(run),
    audit: auditView(run),
    appendix: buildAppendix(run),
  };
}

function buildAppendix(run: RunFolder): AppendixView {
  const { summary, manifest } = run;
  const sampling = summary.sampling;
  const typeset = (equations: Array<{ lead: string; tex: string }>) => equations.map((e) => ({ lead: safe(leadHtml(e.lead)), html: safe(tex(e.tex, true)) }));
  const priorKeys = Object.keys(summary.model.priors);
  const orderedKeys = [...['coefficients', 'site_sd', 'unit_sd'].filter((k) => priorKeys.includes(k)), ...priorKeys.filter((k) => !(k in PRIOR_TARGETS))];
  const priors = orderedKeys.map((key) => {
    const described = describePrior(key, normalisePrior(summary.model.priors[key]));
    const target = PRIOR_TARGETS[key] ?? { name: key, symbol: '\\cdot' };
    return { name: target.name, symbol: safe(tex(target.symbol)), prior: safe(tex(described.tex)), values: described.values, note: summary.model.prior_notes[key] ?? null };
  });

  const isParameter = (q: string) => !q.startsWith('site:');
  const parameterRows = run.diagnostics.filter((d) => isParameter(d.quantity));
  const siteRows = run.diagnostics.filter((d) => !isParameter(d.quantity));
  const rhatMax = summary.reliability.rhat_max;
  const essMin = summary.reliability.ess_min;
  const fails = (d: DiagnosticRow) =>
    d.rhat === null || Number.isNaN(d.rhat) || d.rhat >= rhatMax || (d.ess_bulk ?? 0) < essMin || (d.ess_tail ?? 0) < essMin;
  const worstRhat = extreme(siteRows, 'rhat', (a, b) => a > b);
  const lowBulk = extreme(siteRows, 'ess_bulk', (a, b) => a < b);
  const lowTail = extreme(siteRows, 'ess_tail', (a, b) => a < b);

  const traceQuantities = run.parameters.map((p) => p.quantity);
  const traces: Array<{ quantity: string; svg: Safe }> = [];
  const traceMissing: string[] = [];
  for (const quantity of traceQuantities) {
    const chains = drawsOf(run.draws, quantity);
    if (!chains) traceMissing.push(quantity);
    else traces.push({ quantity, svg: safe(traceDensityPlot(`${quantityName(quantity)} — ${quantity}`, chains)) });
  }

  return {
    modelKind: summary.model.kind,
    equations: typeset(modelEquations(summary.model.kind, finitePopulationRun(run))),
    summaryEquations: typeset(summaryEquations(summary.interval, summary.model.kind)),
    priors,
    varianceNote: summary.model.variance_note,
    varianceHeading: summary.model.kind === 'counts' ? 'Direct estimates' : 'Sampling variances',
    directInterval: summary.model.direct_interval,
    cvRule: summary.model.cv_rule,
    methodNote: summary.model.method_note,
    config: { path: manifest.configPath, sha256: manifest.configSha256 },
    inputs: manifest.inputs.map((f) => ({ role: f.role, path: f.path, rows: f.rows === null ? '—' : whole(f.rows), sha256: f.sha256 })),
    coefficients: run.parameters.map((p) => ({
      quantity: p.quantity,
      name: quantityName(p.quantity),
      estimate: significant(p.estimate, 4),
      sd: significant(p.sd, 3),
      lower: significant(p.lower, 4),
      upper: significant(p.upper, 4),
    })),
    sampling: {
      chains: sampling.chains,
      warmup: whole(sampling.warmup),
      draws: whole(sampling.draws),
      total: whole(sampling.chains * sampling.draws),
      seed: String(sampling.seed),
      method: sampling.method ?? 'not recorded',
      methodNote: sampling.method ? METHOD_NOTES[sampling.method] ?? null : null,
      threads: sampling.threads === null ? '—' : String(sampling.threads),
    },
    diagnostics: {
      parameters: parameterRows.map((d) => ({
        quantity: d.quantity,
        name: quantityName(d.quantity),
        rhat: fixed(d.rhat, 3),
        essBulk: whole(d.ess_bulk),
        essTail: whole(d.ess_tail),
        mcse: significant(d.mcse_mean, 2),
        fails: fails(d),
      })),
      sites: {
        count: siteRows.length,
        failing: siteRows.filter(fails).length,
        worstRhat: worstRhat ? fixed(worstRhat.rhat, 3) : null,
        worstRhatSite: worstRhat?.quantity ?? null,
        lowestEssBulk: lowBulk ? whole(lowBulk.ess_bulk) : null,
        lowestEssBulkSite: lowBulk?.quantity ?? null,
        lowestEssTail: lowTail ? whole(lowTail.ess_tail) : null,
        lowestEssTailSite: lowTail?.quantity ?? null,
      },
    },
    traces,
    traceMissing,
    reproduce: {
      command: manifest.command,
      node: manifest.node,
      platform: manifest.platform,
      created: manifest.created,
      threads: manifest.threads === null ? '—' : String(manifest.threads),
    },
  };
}
