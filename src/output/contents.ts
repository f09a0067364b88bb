/**
 * The contents of a run folder, built from the fit's results as text and bytes (no I/O here).
 * The layout is documented in DEVELOPERS.md ("The run folder").
 */
import type { CoefficientPrior, ScalePrior, Settings } from '../config/types.js';
import type { FileFingerprint } from '../data/types.js';
import type { QuantitySummary } from '../summaries/posterior.js';
import { countFlags, type GateResult, type SiteEstimate } from '../summaries/sites.js';
import { csvText } from './csv.js';
import type { BenchmarkResult } from '../summaries/benchmark.js';
import type { Certificate } from '../summaries/certificate.js';
import type { ModelChecks } from '../summaries/model-checks.js';
import type { FrequentistComparison, FrequentistFit } from '../summaries/frequentist.js';

export const RUN_FORMAT = 'shrinkwell-run';
export const RUN_FORMAT_VERSION = 1;

export const ESTIMATE_COLUMNS = [
  'site', 'label', 'n', 'direct', 'direct_se', 'direct_cv', 'direct_lower', 'direct_upper', 'estimate', 'sd',
  'lower', 'upper', 'cv', 'weight_direct', 'flag', 'reasons',
] as const;

export function estimatesCsv(sites: readonly SiteEstimate[]): string {
  return csvText(
    ESTIMATE_COLUMNS,
    sites.map((s) => [
      s.site, s.label, s.n, s.direct, s.directSe, s.directCv, s.directLower, s.directUpper, s.estimate, s.sd,
      s.lower, s.upper, s.cv, s.weightDirect, s.flag, s.reasons.join('; '),
    ]),
  );
}

const isParameter = (q: QuantitySummary): boolean => !q.name.startsWith('site:');

export function parametersCsv(summaries: readonly QuantitySummary[]): string {
  return csvText(
    ['quantity', 'estimate', 'sd', 'lower', 'upper'],
    summaries.filter(isParameter).map((q) => [q.name, q.mean, q.sd, q.lower, q.upper]),
  );
}

export function diagnosticsCsv(summaries: readonly QuantitySummary[]): string {
  return csvText(
    ['quantity', 'rhat', 'ess_bulk', 'ess_tail', 'mcse_mean'],
    summaries.map((q) => [q.name, q.rhat, q.essBulk, q.essTail, q.mcseMean]),
  );
}

/** Why each prior: quoted in the report's appendix. */
export function coefficientPriorNote(prior: CoefficientPrior): string {
  return prior.kind === 'flat'
    ? 'Flat (improper uniform) prior on every coefficient, fixed in advance and never learned: ' +
        'the coefficients are then driven by the data alone, as in the frequentist regression.'
    : `Normal prior with mean ${prior.mean} and sd ${prior.sd} on every coefficient (intercept included), ` +
        'fixed in advance and never learned from the data.';
}

export function scalePriorNote(prior: ScalePrior, what: string): string {
  switch (prior.kind) {
    case 'uniform':
      return `Uniform prior on the ${what} over (0, ∞), learned from the data. Recommended when there are ` +
        'enough sites to inform the spread (Gelman 2006, Bayesian Analysis 1(3), 515–534); ' +
        'with very few sites it can overstate the spread, and half-Cauchy is advised instead.';
    case 'half_cauchy':
      return `Half-Cauchy prior with scale ${prior.scale} on the ${what}, learned from the data: weakly ` +
        'informative, nearly flat below the scale with heavy tails above it (Gelman 2006). The collapsed sampler ' +
        'uses its density directly; the plain sampler draws it through the inverse-gamma mixture of ' +
        'Huang & Wand (2013, Bayesian Analysis 8(2), 439–452).';
    case 'inverse_gamma':
      return `Inverse-gamma prior with shape ${prior.shape} and scale ${prior.scale} on the ${what} squared ` +
        '(the variance), learned from the data. Note that this prior is informative near zero ' +
        '(Gelman 2006); results can depend on the values chosen.';
  }
}

export function benchmarkedCsv(sites: readonly SiteEstimate[], b: BenchmarkResult): string {
  return csvText(
    ['site', 'label', 'estimate', 'sd', 'lower', 'upper', 'estimate_unadjusted', 'flag'],
    sites.map((s, i) => {
      const adjusted = b.sites[i];
      return [s.site, s.label, adjusted.estimate, adjusted.sd, adjusted.lower, adjusted.upper, s.estimate, s.flag];
    }),
  );
}

export function certificateCsv(c: Certificate): string {
  return csvText(['quantity', 'gibbs_mean', 'exact_mean', 'mcse', 'z'], c.rows.map((r) => [r.quantity, r.gibbs, r.exact, r.mcse, r.z]));
}

export function modelChecksCsv(c: ModelChecks): string {
  return csvText(
    ['site', 'ppp', 'std_residual', 'extreme'],
    c.sites.map((s) => [s.site, s.ppp, s.residual, Number.isNaN(s.ppp) ? '' : s.extreme ? 'yes' : 'no']),
  );
}

/** How the direct interval and the CV are formed unless the model says otherwise (area, unit). */
export const DEFAULT_DIRECT_INTERVAL = 'normal interval ± z·se (direct ± z·direct_se at the interval level)';
export const DEFAULT_CV_RULE = 'sd / |estimate|';

/** summary.json `model_checks.note`: what was checked for this model kind. */
export function modelChecksNote(kind: string, extremeLevel: number): string {
  const checks =
    kind === 'unit'
      ? 'Posterior predictive p-value of each site\'s sample mean, P(ȳ_rep ≥ ȳ | data) with ȳ_rep drawn from N(x̄β + u, σ_e²/n), ' +
        'and of the discrepancy Σ n(ȳ − x̄β − u)²/σ_e² overall (Gelman, Meng & Stern 1996); ' +
        'standardized residuals (ȳ − x̄β)/√(σ_u² + σ_e²/n), x̄ the sample means of the covariates. '
      : kind === 'counts'
        ? 'Posterior predictive mid-p value of each site\'s cases, P(y_rep > y | data) + ½ P(y_rep = y | data) with ' +
          'y_rep drawn from Binomial(n, p), and of the discrepancy Σ (y − np)²/(np(1 − p)) overall (Gelman, Meng & Stern 1996); ' +
          'standardized residuals (y/n − p̄)/√(p̄(1 − p̄)/n + (1 − 1/n)v), p̄ and v the mean and variance of ' +
          'expit(xβ + u), u ~ N(0, σ_u²). Under a design effect the effective counts y/deff and n/deff, rounded to whole numbers, are used. '
        : 'Posterior predictive p-value of each direct estimate, P(y_rep ≥ y | data), and of the discrepancy ' +
          'Σ (y − θ)²/ψ overall (Gelman, Meng & Stern 1996); standardized residuals (y − xβ)/√(ψ + σ_u²). ';
  return (
    checks +
    `Sites whose p-value lies in the outer ${100 * extremeLevel}% are listed as extreme ` +
    '(about that share of sites is expected by chance).'
  );
}

export interface RunResults {
  checks?: ModelChecks | null;
  certificate?: Certificate | null;
  benchmark?: BenchmarkResult | null;
  frequentist?: { fit: FrequentistFit; comparison: FrequentistComparison } | null;
  settings: Settings;
  coefficientNames: string[];
  varianceNote: string;
  /** The direct-estimate interval, the CV rule and the sampler note in words (defaults: area and unit models). */
  directIntervalNote?: string;
  cvRule?: string;
  methodNote?: string;
  summaries: QuantitySummary[];
  sites: SiteEstimate[];
  gate: GateResult;
  threads: number;
}

export function summaryJson(r: RunResults): string {
  const { settings } = r;
  const counts = countFlags(r.sites);
  const summary = {
    format: RUN_FORMAT,
    format_version: RUN_FORMAT_VERSION,
    title: settings.title,
    period: settings.period ?? null,
    measure: settings.measure,
    model: {
      kind: settings.model.kind,
      coefficients: r.coefficientNames,
      priors: {
        coefficients: settings.model.priors.coefficients,
        site_sd: settings.model.priors.site_sd,
        ...(settings.model.kind === 'unit' ? { unit_sd: settings.model.priors.unit_sd } : {}),
      },
      prior_notes: {
        coefficients: coefficientPriorNote(settings.model.priors.coefficients),
        site_sd: scalePriorNote(settings.model.priors.site_sd, 'between-site standard deviation'),
        ...(settings.model.kind === 'unit'
          ? { unit_sd: scalePriorNote(settings.model.priors.unit_sd, 'within-site (unit-level) standard deviation') }
          : {}),
      },
      variance_note: r.varianceNote,
      direct_interval: r.directIntervalNote ?? DEFAULT_DIRECT_INTERVAL,
      cv_rule: r.cvRule ?? DEFAULT_CV_RULE,
      ...(r.methodNote ? { method_note: r.methodNote } : {}),
    },
    interval: settings.interval,
    sampling: {
      chains: settings.sampling.chains,
      warmup: settings.sampling.warmup,
      draws: settings.sampling.draws,
      seed: settings.sampling.seed,
      method: settings.sampling.method,
      threads: r.threads,
    },
    reliability: settings.reliability,
    converged: r.gate.converged,
    gate: {
      worst_rhat: r.gate.worstRhat,
      lowest_ess_bulk: r.gate.lowestEssBulk,
      lowest_ess_tail: r.gate.lowestEssTail,
      failing: r.gate.failing,
    },
    benchmark: r.benchmark && settings.benchmark
      ? {
          method: r.benchmark.method,
          method_note:
            r.benchmark.method === 'ratio'
              ? 'Ratio benchmarking applied draw by draw: every draw of every site multiplied by total / weighted sum (Pfeffermann 2013, Statistical Science 28(1), §7).'
              : 'Difference benchmarking applied draw by draw: the same amount added to every site so the weighted sum meets the total (Pfeffermann 2013, Statistical Science 28(1), §7).',
          total: r.benchmark.total,
          weights: settings.benchmark.weights,
          unadjusted_sum: r.benchmark.unadjustedSum,
          adjustment: r.benchmark.adjustment,
        }
      : null,
    model_checks: r.checks
      ? {
          note: modelChecksNote(settings.model.kind, r.checks.extremeLevel),
          overall_ppp: r.checks.overallPpp,
          extreme_level: r.checks.extremeLevel,
          extreme_sites: r.checks.sites.filter((s) => s.extreme).map((s) => s.site),
          mean_direct: r.checks.meanDirect,
          mean_model: r.checks.meanModel,
        }
      : null,
    certificate: r.certificate
      ? {
          note:
            'Gibbs posterior means against the exact posterior by numerical integration over the between-site sd ' +
            '(coefficients and site effects integrated out analytically), in units of Monte Carlo standard error; ' +
            `bound for all quantities together at a 1% false-alarm rate (Bonferroni).`,
          quantities: r.certificate.rows.length,
          worst: r.certificate.worst,
          bound: r.certificate.bound,
          all_within: r.certificate.allWithin,
        }
      : null,
    frequentist: r.frequentist
      ? {
          method: r.frequentist.fit.method,
          site_variance: r.frequentist.fit.siteVariance,
          at_boundary: r.frequentist.fit.atBoundary,
          converged: r.frequentist.fit.converged,
          largest_difference_sd: r.frequentist.comparison.largestDifference,
          mean_difference_sd: r.frequentist.comparison.meanDifference,
          rmse_over_sd: r.frequentist.comparison.rmseOverSd,
          reading: r.frequentist.comparison.reading,
          mse_note: r.frequentist.fit.mseNote,
        }
      : null,
    counts: {
      sites: r.sites.length,
      sampled: r.sites.filter((s) => s.n !== 0).length,
      ...counts,
    },
  };
  return JSON.stringify(summary, jsonNumbers, 2) + '\n';
}

/** JSON has no NaN or Infinity: write null. */
function jsonNumbers(_key: string, value: unknown): unknown {
  return typeof value === 'number' && !Number.isFinite(value) ? null : value;
}

export interface ManifestInput {
  settings: Settings;
  version: string;
  command: string[];
  configSha256: string;
  inputs: FileFingerprint[];
  threads: number;
  timingsMs: Record<string, number>;
  createdAt: string;
}

export function manifestJson(m: ManifestInput): string {
  const manifest = {
    tool: 'shrinkwell',
    version: m.version,
    node: process.versions.node,
    platform: `${process.platform}-${process.arch}`,
    created_at: m.createdAt,
    command: m.command,
    config: { path: m.settings.config_path, sha256: m.configSha256 },
    settings: m.settings,
    inputs: m.inputs,
    seed: m.settings.sampling.seed,
    threads: m.threads,
    timings_ms: m.timingsMs,
  };
  return JSON.stringify(manifest, jsonNumbers, 2) + '\n';
}

/** Quantities per chunk of draws.bin: bounds the memory the writer holds at once. */
const DRAWS_CHUNK_QUANTITIES = 64;

/**
 * Draws as float32, quantity-major then chain then draw (documented in DEVELOPERS.md), produced
 * in chunks of quantities so a large run is never held twice in memory.
 */
export function drawsFiles(
  names: readonly string[],
  chains: ReadonlyArray<{ draws: number; values: Float64Array }>,
): { json: string; bin: Iterable<Uint8Array> } {
  const C = chains.length;
  const D = chains[0].draws;
  function* chunks(): Generator<Uint8Array> {
    for (let first = 0; first < names.length; first += DRAWS_CHUNK_QUANTITIES) {
      const last = Math.min(first + DRAWS_CHUNK_QUANTITIES, names.length);
      const out = new Float32Array((last - first) * C * D);
      for (let q = first; q < last; q++)
        for (let c = 0; c < C; c++)
          out.set(chains[c].values.subarray(q * D, (q + 1) * D), ((q - first) * C + c) * D);
      yield new Uint8Array(out.buffer);
    }
  }
  const json = JSON.stringify(
    { dtype: 'float32', byte_order: 'little', quantities: names, chains: C, draws_per_chain: D },
    null,
    2,
  );
  return { json: json + '\n', bin: { [Symbol.iterator]: chunks } };
}
