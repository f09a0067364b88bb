/**
 * The auditor's sections of the methodology appendix, built from the run folder's optional files
 * (read-audit.ts): the frequentist cross-check, the sampler certificate, the model checks and the
 * benchmarking. Each part is `null` when its data are not in the run folder, and the template
 * leaves the section out.
 *
 * Every figure is formatted here, deterministically. Suppressed sites keep their figures withheld
 * in every table (their model estimate, EBLUP, benchmarked estimate and certificate means).
 */
import Handlebars from 'handlebars';
import { certificateChart, crossCheckChart, residualQqPlot, type CrossCheckPoint } from './audit-charts.js';
import { quantityName } from './context.js';
import { fixed, percent, significant, whole } from './format.js';
import { readAuditFiles, type AuditFiles, type BenchmarkSummary, type CertificateRow, type Interval3 } from './read-audit.js';
import { drawsOf, type RunFolder, type SiteRow } from './read-run.js';

type Safe = Handlebars.SafeString;
const safe = (html: string): Safe => new Handlebars.SafeString(html);

/** Sites listed in the table of largest frequentist–posterior differences. */
export const LARGEST_DIFFERENCES_SHOWN = 5;

export interface SpreadRow {
  label: string;
  /** σ with subscript `letter`, squared for a variance. */
  letter: string;
  squared: boolean;
  frequentist: string;
  posteriorMean: string;
  interval: string;
}

export interface FrequentistView {
  method: string;
  /** The variance estimator in words. */
  methodName: string;
  methodIsReml: boolean;
  /** Where the model's classical form is published. */
  modelSource: string;
  converged: boolean | null;
  iterations: string | null;
  atBoundary: boolean;
  spread: SpreadRow[];
  coefficients: Array<{ quantity: string; name: string; frequentist: string; se: string; posterior: string; sd: string; difference: string }>;
  reading: string | null;
  mseNote: string | null;
  chart: Safe | null;
  chartOmitted: number;
  largest: Array<{ id: string; label: string; suppressed: boolean; eblup: string; rmse: string; estimate: string; sd: string; difference: string }>;
}

export interface CertificateView {
  note: string | null;
  count: number;
  bound: string | null;
  allWithin: boolean | null;
  worst: { quantity: string; name: string; z: string; gibbs: string; exact: string; mcse: string } | null;
  outside: Array<{ quantity: string; z: string }>;
  parameters: Array<{ quantity: string; name: string; gibbs: string; exact: string; mcse: string; z: string; outside: boolean }>;
  chart: Safe | null;
}

export interface ModelChecksView {
  words: ModelChecksWords;
  note: string | null;
  overallPpp: string | null;
  reading: string | null;
  misfit: boolean;
  level: string;
  sampled: number;
  expectedByChance: string;
  extreme: Array<{ id: string; label: string; ppp: string; residual: string; side: string; suppressed: boolean }>;
  means: { direct: string; model: string; difference: string } | null;
  chart: Safe | null;
}

export interface BenchmarkSiteView {
  estimate: string;
  suppressed: boolean;
}

export interface BenchmarkView {
  method: string;
  methodNote: string | null;
  total: string;
  weights: string | null;
  sum: { mean: string; interval: string } | null;
  adjustment: { what: string; mean: string; interval: string } | null;
  reading: string | null;
  outsideInterval: boolean;
  file: boolean;
  bySite: Record<string, BenchmarkSiteView>;
}

export interface AuditView {
  frequentist: FrequentistView | null;
  certificate: CertificateView | null;
  modelChecks: ModelChecksView | null;
  benchmark: BenchmarkView | null;
}

const interval = (lower: string, upper: string) => `${lower} – ${upper}`;
const finite = (v: number | null | undefined): v is number => v !== null && v !== undefined && Number.isFinite(v);

/** The auditor's sections of the run folder; every part `null` when its data are missing. */
export function auditView(run: RunFolder): AuditView {
  const files = readAuditFiles(run.dir, run.estimates);
  return {
    frequentist: frequentistView(run, files.frequentist),
    certificate: certificateView(run, files.certificate),
    modelChecks: modelChecksView(run, files.modelChecks),
    benchmark: benchmarkView(run, files.benchmark),
  };
}

// ---------------------------------------------------------------------------------------------
// Frequentist cross-check

/** Posterior mean of the square of a quantity, from the draws (null when none were recorded). */
function meanOfSquares(run: RunFolder, quantity: string): number | null {
  const chains = drawsOf(run.draws, quantity);
  if (!chains) return null;
  let sum = 0;
  let count = 0;
  for (const chain of chains) {
    for (let d = 0; d < chain.length; d++) {
      sum += chain[d] * chain[d];
      count++;
    }
  }
  return count ? sum / count : null;
}

/**
 * Rows comparing a frequentist variance with the posterior of the matching sd, on both scales:
 * the sd as √(variance) beside the posterior of the sd, and the variance beside the posterior
 * mean of the squared draws (the equal-tailed interval of the square is the square of the sd's,
 * squaring being monotone on sd ≥ 0).
 */
function spreadRows(run: RunFolder, variance: number | null, quantity: string, what: string, letter: string): SpreadRow[] {
  const posterior = run.parameters.find((p) => p.quantity === quantity);
  if (variance === null && !posterior) return [];
  const sq = (v: number) => v * v;
  return [
    {
      label: `${what} standard deviation`,
      letter,
      squared: false,
      frequentist: variance === null ? '—' : significant(Math.sqrt(Math.max(0, variance)), 3),
      posteriorMean: posterior ? significant(posterior.estimate, 3) : '—',
      interval: posterior ? interval(significant(posterior.lower, 3), significant(posterior.upper, 3)) : '—',
    },
    {
      label: `${what} variance`,
      letter,
      squared: true,
      frequentist: variance === null ? '—' : significant(variance, 3),
      posteriorMean: significant(meanOfSquares(run, quantity), 3),
      interval: posterior ? interval(significant(sq(Math.max(0, posterior.lower)), 3), significant(sq(posterior.upper), 3)) : '—',
    },
  ];
}

const METHOD_NAMES: Record<string, string> = {
  REML: 'restricted maximum likelihood (REML)',
  ML: 'maximum likelihood (ML)',
  PR: 'the moment estimator of Prasad & Rao (1990)',
};

function frequentistView(run: RunFolder, data: AuditFiles['frequentist']): FrequentistView | null {
  if (!data) return null;
  const { summary, file, rows } = data;
  const decimals = run.summary.measure.decimals;
  const method = file?.method ?? summary?.method ?? 'not recorded';
  const siteVariance = file?.site_variance ?? summary?.site_variance ?? null;
  const spread = [
    ...spreadRows(run, siteVariance, 'site_sd', 'Between-site', 'u'),
    ...(file?.unit_variance !== null && file?.unit_variance !== undefined ? spreadRows(run, file.unit_variance, 'unit_sd', 'Within-site', 'e') : []),
  ];
  const coefficients = (file?.coefficients ?? []).map((c) => {
    const quantity = `coef:${c.name}`;
    const posterior = run.parameters.find((p) => p.quantity === quantity);
    const difference = posterior && finite(c.estimate) && posterior.sd > 0 ? (c.estimate - posterior.estimate) / posterior.sd : null;
    return {
      quantity,
      name: quantityName(quantity),
      frequentist: significant(c.estimate, 4),
      se: significant(c.se, 3),
      posterior: posterior ? significant(posterior.estimate, 4) : '—',
      sd: posterior ? significant(posterior.sd, 3) : '—',
      difference: fixed(difference, 2),
    };
  });

  let chart: Safe | null = null;
  let chartOmitted = 0;
  let largest: FrequentistView['largest'] = [];
  if (rows) {
    const bySite = new Map(rows.map((r) => [r.site, r]));
    const points: CrossCheckPoint[] = run.estimates.map((s) => ({
      id: s.site,
      eblup: bySite.get(s.site)?.eblup ?? null,
      rmse: bySite.get(s.site)?.rmse ?? null,
      estimate: s.estimate,
      sd: s.sd,
      sampled: s.n > 0 && s.direct !== null,
      suppressed: s.flag === 'suppress',
    }));
    chart = safe(crossCheckChart(points, { unit: run.summary.measure.unit }));
    chartOmitted = points.filter((p) => p.suppressed && finite(p.eblup)).length;
    const differences = run.estimates
      .map((s) => ({ site: s, row: bySite.get(s.site) }))
      .filter((d): d is { site: SiteRow; row: NonNullable<typeof d.row> } => finite(d.row?.eblup) && d.site.sd > 0)
      .map((d) => ({ ...d, difference: ((d.row.eblup as number) - d.site.estimate) / d.site.sd }))
      .sort((a, b) => Math.abs(b.difference) - Math.abs(a.difference) || (a.site.site < b.site.site ? -1 : 1));
    largest = differences.slice(0, LARGEST_DIFFERENCES_SHOWN).map(({ site, row, difference }) => {
      const suppressed = site.flag === 'suppress';
      return {
        id: site.site,
        label: site.label,
        suppressed,
        eblup: suppressed ? '' : fixed(row.eblup, decimals),
        rmse: suppressed ? '' : fixed(row.rmse, decimals),
        estimate: suppressed ? '' : fixed(site.estimate, decimals),
        sd: suppressed ? '' : fixed(site.sd, decimals),
        difference: fixed(difference, 2),
      };
    });
  }

  return {
    method,
    methodName: METHOD_NAMES[method.toUpperCase()] ?? method,
    methodIsReml: method.toUpperCase() === 'REML',
    modelSource: (file?.model ?? run.summary.model.kind) === 'unit' ? 'Battese, Harter & Fuller 1988' : 'Fay & Herriot 1979',
    converged: file?.converged ?? summary?.converged ?? null,
    iterations: file?.iterations === null || file?.iterations === undefined ? null : whole(file.iterations),
    atBoundary: (file?.at_boundary ?? summary?.at_boundary) === true,
    spread,
    coefficients,
    reading: summary?.reading ?? null,
    mseNote: file?.mse_note ?? summary?.mse_note ?? null,
    chart,
    chartOmitted,
    largest,
  };
}

// ---------------------------------------------------------------------------------------------
// Sampler certificate

const isSiteQuantity = (quantity: string) => quantity.startsWith('site:');

function certificateView(run: RunFolder, data: AuditFiles['certificate']): CertificateView | null {
  if (!data) return null;
  const { summary, rows } = data;
  const suppressed = new Set(run.estimates.filter((s) => s.flag === 'suppress').map((s) => `site:${s.site}`));
  const bound = summary?.bound ?? null;
  // A blank or NaN z (no Monte Carlo error to divide by) is not counted either way; ±Infinity is outside.
  const outsideOf = (z: number | null) => bound !== null && z !== null && !Number.isNaN(z) && Math.abs(z) > bound;
  const outside = (rows ?? []).filter((r) => outsideOf(r.z)).sort((a, b) => Math.abs(b.z ?? Infinity) - Math.abs(a.z ?? Infinity) || (a.quantity < b.quantity ? -1 : 1));
  const allWithin = summary?.all_within ?? (rows && bound !== null ? outside.length === 0 : null);

  // The worst quantity: from summary.json, else the largest |z| in the file.
  let worstRow: CertificateRow | null = null;
  if (summary?.worst) {
    const w = summary.worst;
    worstRow = { quantity: w.quantity, gibbs_mean: w.gibbs, exact_mean: w.exact, mcse: w.mcse, z: w.z };
  } else if (rows?.length) {
    worstRow = [...rows].sort((a, b) => Math.abs(b.z ?? Infinity) - Math.abs(a.z ?? Infinity) || (a.quantity < b.quantity ? -1 : 1))[0];
  }
  const means = (r: CertificateRow) => {
    const withheld = suppressed.has(r.quantity);
    return {
      gibbs: withheld ? 'withheld (suppressed site)' : significant(r.gibbs_mean, 4),
      exact: withheld ? 'withheld (suppressed site)' : significant(r.exact_mean, 4),
    };
  };

  return {
    note: summary?.note ?? null,
    count: summary?.quantities ?? rows?.length ?? 0,
    bound: bound === null ? null : fixed(bound, 2),
    allWithin,
    worst: worstRow
      ? { quantity: worstRow.quantity, name: quantityName(worstRow.quantity), z: fixed(worstRow.z, 2), mcse: significant(worstRow.mcse, 2), ...means(worstRow) }
      : null,
    outside: outside.map((r) => ({ quantity: r.quantity, z: fixed(r.z, 2) })),
    parameters: (rows ?? [])
      .filter((r) => !isSiteQuantity(r.quantity))
      .map((r) => ({ quantity: r.quantity, name: quantityName(r.quantity), mcse: significant(r.mcse, 2), z: fixed(r.z, 2), outside: outsideOf(r.z), ...means(r) })),
    chart: rows?.length
      ? safe(certificateChart(rows.filter((r) => finite(r.z)).map((r) => ({ quantity: r.quantity, z: r.z as number, parameter: !isSiteQuantity(r.quantity) })), { bound }))
      : null,
  };
}

// ---------------------------------------------------------------------------------------------
// Model checks

/** Band of the overall p-value read as "no sign of misfit" (common practice: outside 0.05–0.95 is a warning). */
export const PPP_BAND: readonly [number, number] = [0.05, 0.95];

/** How the model checks name the survey figure and its sampling error, per model kind. */
export interface ModelChecksWords {
  /** The survey figure of one site ("direct estimate"), and in the plural. */
  direct: string;
  directs: string;
  /** The same in the "… is higher than the model expects" sentence and the table heading. */
  survey: string;
  surveyHeading: string;
  /** What the predictive distribution would produce ("survey means"). */
  surveys: string;
  /** What sets each site's predictive spread. */
  spread: string;
}

/** Wording of the model-checks section for each model kind (the area wording is the default). */
export function modelChecksWords(kind: string): ModelChecksWords {
  if (kind === 'counts') {
    return {
      direct: 'survey share', directs: 'survey shares', survey: 'survey share', surveyHeading: 'Survey share is',
      surveys: 'case counts', spread: 'each site’s number of trials (binomial sampling)',
    };
  }
  return {
    direct: 'direct estimate', directs: 'direct estimates', survey: 'survey mean', surveyHeading: 'Survey mean is',
    surveys: 'survey means', spread: kind === 'unit' ? 'each site’s sample size (sampling variance σ_e²/n_i)' : 'each site’s sampling variance',
  };
}

/**
 * A plain reading of the overall posterior predictive p-value of the discrepancy: Σ (y − θ)²/ψ
 * (area), Σ n(ȳ − x̄β − u)²/σ_e² (unit), Σ (y − np)²/(np(1 − p)) (counts).
 */
export function pppReading(p: number, kind = 'area'): { text: string; misfit: boolean } {
  if (p < PPP_BAND[0]) {
    const text =
      kind === 'counts'
        ? 'The survey shares lie further from the model than binomial sampling allows. ' +
          'A covariate may be missing, the design effect may be set too low (or not set for a clustered survey), or some sites may not follow the model; ' +
          'see the sites listed below and the quantile plot.'
        : kind === 'unit'
          ? 'The site sample means lie further from the model than their sampling variances σ_e²/n_i allow. ' +
            'A covariate may be missing, the units within a site may be clustered (so σ_e²/n_i understates the sampling variance), or some sites may not follow the model; ' +
            'see the sites listed below and the quantile plot.'
          : `The direct estimates lie further from the model than their sampling variances allow. ` +
            'A covariate may be missing, some sampling variances may be understated, or some sites may not follow the model; ' +
            'see the sites listed below and the quantile plot.';
    return { misfit: true, text };
  }
  if (p > PPP_BAND[1]) {
    const text =
      kind === 'counts'
        ? 'The survey shares lie closer to the model than binomial sampling implies, which suggests the design effect is set too high.'
        : kind === 'unit'
          ? 'The site sample means lie closer to the model than their sampling variances σ_e²/n_i imply, ' +
            'which can happen when the units were sampled in strata within each site.'
          : `The direct estimates lie closer to the model than their sampling variances imply, ` +
            'which suggests the sampling variances are overstated (for instance a design effect set too high).';
    return { misfit: true, text };
  }
  const basis =
    kind === 'counts'
      ? 'The spread of the survey shares around the model is in line with binomial sampling, '
      : `The spread of the direct estimates around the model is in line with their sampling variances, `;
  return {
    misfit: false,
    text: basis +
      'so this check shows no sign of misfit. (Values near 0 or 1 would; the check is known to be conservative, ' +
      'so the site-level checks below say more.)',
  };
}

function modelChecksView(run: RunFolder, data: AuditFiles['modelChecks']): ModelChecksView | null {
  if (!data) return null;
  const { summary, rows } = data;
  const decimals = run.summary.measure.decimals;
  const unit = run.summary.measure.unit;
  const level = summary?.extreme_level ?? null;
  const sites = new Map(run.estimates.map((s) => [s.site, s]));
  const sampledRows = (rows ?? []).filter((r) => finite(r.ppp));
  const sampled = rows ? sampledRows.length : run.summary.counts.sampled;

  const extremeIds = rows ? rows.filter((r) => r.extreme === true).map((r) => r.site) : summary?.extreme_sites ?? [];
  const byId = new Map((rows ?? []).map((r) => [r.site, r]));
  const closeness = (id: string) => {
    const p = byId.get(id)?.ppp;
    return finite(p) ? Math.min(p, 1 - p) : 1;
  };
  const extreme = [...extremeIds]
    .sort((a, b) => closeness(a) - closeness(b) || (a < b ? -1 : 1))
    .map((id) => {
      const row = byId.get(id);
      const p = row?.ppp;
      return {
        id,
        label: sites.get(id)?.label ?? '',
        ppp: finite(p) ? (p < 0.001 || p > 0.999 ? (p < 0.5 ? '< 0.001' : '> 0.999') : fixed(p, 3)) : '—',
        residual: fixed(row?.std_residual, 2),
        side: finite(p) ? (p < 0.5 ? 'higher than the model expects' : 'lower than the model expects') : '—',
        suppressed: sites.get(id)?.flag === 'suppress',
      };
    });

  const ppp = summary?.overall_ppp ?? null;
  const kind = run.summary.model.kind;
  const reading = finite(ppp) ? pppReading(ppp, kind) : null;
  const meanDirect = summary?.mean_direct ?? null;
  const meanModel = summary?.mean_model ?? null;
  const withUnit = (v: string) => (unit ? `${v} ${unit}` : v);
  const points = sampledRows
    .filter((r) => finite(r.std_residual))
    .map((r) => ({ id: r.site, residual: r.std_residual as number, extreme: r.extreme === true, suppressed: sites.get(r.site)?.flag === 'suppress' }));

  return {
    words: modelChecksWords(kind),
    note: summary?.note ?? null,
    overallPpp: finite(ppp) ? fixed(ppp, 2) : null,
    reading: reading?.text ?? null,
    misfit: reading?.misfit ?? false,
    level: level === null ? 'outer tail' : `outer ${percent(level, 0)}`,
    sampled,
    expectedByChance: level === null ? '—' : fixed(level * sampled, 1),
    extreme,
    means: finite(meanDirect) && finite(meanModel)
      ? { direct: withUnit(fixed(meanDirect, decimals + 1)), model: withUnit(fixed(meanModel, decimals + 1)), difference: withUnit(fixed(meanModel - meanDirect, decimals + 1)) }
      : null,
    chart: points.length ? safe(residualQqPlot(points)) : null,
  };
}

// ---------------------------------------------------------------------------------------------
// Benchmarking

const plain = (v: number) => String(Number(v.toPrecision(8)));

function benchmarkReading(b: BenchmarkSummary, sum: Interval3 | null, level: string): { text: string | null; outside: boolean } {
  if (!sum || b.total === null) return { text: null, outside: false };
  const inside = b.total >= sum.lower && b.total <= sum.upper;
  return inside
    ? { outside: false, text: `The total ${plain(b.total)} lies inside the ${level} interval of the model's own weighted sum, so the adjustment stays within the model's uncertainty.` }
    : {
        outside: true,
        text: `The total ${plain(b.total)} lies outside the ${level} interval of the model's own weighted sum (${significant(sum.lower, 4)} – ${significant(sum.upper, 4)}): ` +
          'the adjustment is larger than the model\'s uncertainty. Check that the total and the weights describe the same population and are on the same scale before publishing the adjusted figures.',
      };
}

function benchmarkView(run: RunFolder, data: AuditFiles['benchmark']): BenchmarkView | null {
  if (!data) return null;
  const { summary, rows } = data;
  const decimals = run.summary.measure.decimals;
  const level = `${Number((run.summary.interval * 100).toPrecision(4))}%`;
  const flags = new Map(run.estimates.map((s) => [s.site, s.flag]));
  const bySite: Record<string, BenchmarkSiteView> = {};
  for (const row of rows ?? []) {
    const suppressed = row.flag === 'suppress' || flags.get(row.site) === 'suppress';
    bySite[row.site] = suppressed
      ? { estimate: '', suppressed }
      : { estimate: fixed(row.estimate, decimals), suppressed };
  }
  const method = summary?.method ?? 'not recorded';
  const sum = summary?.unadjusted_sum ?? null;
  const adjustment = summary?.adjustment ?? null;
  const ratio = method === 'ratio';
  const unit = run.summary.measure.unit;
  const format = (v: number) => (ratio ? fixed(v, 4) : `${significant(v, 3)}${unit ? ` ${unit}` : ''}`);
  const reading = summary ? benchmarkReading(summary, sum, level) : { text: null, outside: false };
  return {
    method,
    methodNote: summary?.method_note ?? null,
    total: summary?.total === null || summary?.total === undefined ? '—' : plain(summary.total),
    weights: summary?.weights ?? null,
    sum: sum ? { mean: significant(sum.mean, 4), interval: interval(significant(sum.lower, 4), significant(sum.upper, 4)) } : null,
    adjustment: adjustment
      ? { what: ratio ? 'Adjustment factor (total ÷ weighted sum)' : method === 'difference' ? 'Shift added to every site' : 'Adjustment', mean: format(adjustment.mean), interval: interval(format(adjustment.lower), format(adjustment.upper)) }
      : null,
    reading: reading.text,
    outsideInterval: reading.outside,
    file: rows !== null,
    bySite,
  };
}
