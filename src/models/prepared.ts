/**
 * What the pipeline needs from any model kind, once its data are loaded: a serialisable spec for
 * the sampler, the monitored quantities, the per-site survey figures for the outputs, and how to
 * turn parameter draws into each site's weight on its own data. Each model kind provides a
 * `prepare…` function returning this; the driver, diagnostics, flags and writer are shared.
 */
import type { ModelKind } from '../config/types.js';
import type { FileFingerprint } from '../data/types.js';
import type { ModelSpec } from './index.js';
import type { FrequentistFit } from '../summaries/frequentist.js';
import type { ModelChecks } from '../summaries/model-checks.js';
import type { Rng } from '../sampler/rng.js';

/** Per-site survey (direct) figures and covariates, as the outputs and flags need them. */
export interface SiteInputs {
  m: number;
  siteIds: string[];
  labels: string[];
  /** Sample size n_i: 0 for an unsampled site, NaN when the config gives no sample size. */
  n: Float64Array;
  /** Direct estimate and its standard error; NaN where not available. */
  direct: Float64Array;
  directSe: Float64Array;
  /** 1 where the site has survey data. */
  sampled: Uint8Array;
  /** Covariate values per site (m × covariateNames.length, row-major), for the range check. */
  covariates: Float64Array;
  covariateNames: string[];
  /** The flag's wording when a site's covariates lie outside the sampled range (default: covariates …). */
  outsideRangeReason?: string;
  /**
   * Interval of the direct estimate at the run's interval level, where the model provides one
   * (counts: the Wilson score interval, which stays inside [0, 1] and is not empty at 0 cases).
   */
  directInterval?: { lower: Float64Array; upper: Float64Array; method: string };
  /**
   * The coefficient of variation the flags use, when it is not sd / |estimate| (counts:
   * sd / min(p, 1 − p), see src/models/counts-prepare.ts). Applied to the direct and the model
   * estimate alike.
   */
  cvOf?: (estimate: number, sd: number) => number;
}

export interface PreparedFit {
  kind: ModelKind;
  spec: ModelSpec;
  quantities: string[];
  coefficientNames: string[];
  sites: SiteInputs;
  files: FileFingerprint[];
  /** How the sampling variances (or the direct figures) were obtained, in words for the appendix. */
  varianceNote: string;
  /** The interval of the direct estimate in words (summary.json model.direct_interval); default: the normal interval ± z·se. */
  directIntervalNote?: string;
  /** The CV rule in words (summary.json model.cv_rule); default: sd / |estimate|. */
  cvRule?: string;
  /** How the sampler draws this model, where more needs saying than the method's name (summary.json model.method_note). */
  methodNote?: string;
  /**
   * Posterior mean per site of the weight on the site's own data (1 − shrinkage), from the
   * pooled draws of the named parameters; 0 for unsampled sites.
   */
  weightDirect(pooled: (quantity: string) => Float64Array): Float64Array;
  /** The frequentist cross-check (EBLUP) of this model, where one is available. */
  frequentist?: () => FrequentistFit;
  /** Exact posterior means by numerical integration, by quantity name, where available. */
  exactMeans?: () => Map<string, number>;
  /** Posterior predictive checks of the model against the data, where available. */
  modelChecks?: (pooled: (quantity: string) => Float64Array, estimates: Float64Array, rng: Rng) => ModelChecks;
}
