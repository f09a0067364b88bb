/**
 * The resolved settings of one run: the config file after schema validation, with defaults
 * filled in and paths made absolute. Keys mirror the YAML (snake_case) so the manifest's
 * "resolved config" reads like the file the analyst wrote.
 */

export type ModelKind = 'area' | 'unit' | 'counts';

/** Fixed prior on the regression coefficients: never learned from the data. */
export type CoefficientPrior =
  | { kind: 'flat' }
  | { kind: 'normal'; mean: number; sd: number };

/** Hyperprior on a standard deviation (site_sd or unit_sd): learned from the data. */
export type ScalePrior =
  | { kind: 'uniform' } // flat on the sd over (0, ∞)
  | { kind: 'half_cauchy'; scale: number } // via the Huang & Wand (2013) inverse-gamma mixture
  | { kind: 'inverse_gamma'; shape: number; scale: number }; // on the variance

/** Where an area model's sampling variances ψ_i come from. */
export type VarianceSource =
  | { kind: 'column'; column: string } // model.variance
  | { kind: 'sd'; column: string } // model.sd with model.sample_size: sd² / n
  | { kind: 'pooled'; column: string }; // model.sd pooled over sites, / n, times design_effect

export interface Settings {
  /** Absolute path of the config file. */
  config_path: string;
  title: string;
  /** Reporting period, e.g. "2026 long rains"; optional. */
  period?: string;
  measure: { name: string; unit: string; decimals: number };
  sites: { file: string; id: string; label?: string };
  /** Unit model: the units file; `aggregated` when it holds per-site statistics, not rows. */
  units?: { file: string; site: string; aggregated?: boolean };
  model: {
    kind: ModelKind;
    direct?: string;
    variance?: string;
    sd?: string;
    sample_size?: string;
    variance_from?: 'column' | 'sd' | 'pooled';
    design_effect: number;
    response?: string;
    cases?: string;
    trials?: string;
    population_size?: string;
    /** Unit model: target the finite-population mean instead of the model mean. */
    finite_population?: boolean;
    covariates: string[];
    priors: {
      coefficients: CoefficientPrior;
      site_sd: ScalePrior;
      unit_sd: ScalePrior;
    };
  };
  sampling: {
    chains: number;
    warmup: number;
    draws: number;
    seed: number;
    /** Worker threads; default min(chains, cores). Draws do not depend on it. */
    threads?: number;
    /** `collapsed` (default) or `plain` Gibbs, kept for comparison. */
    method: 'collapsed' | 'plain';
  };
  reliability: {
    cv_caution: number;
    cv_suppress: number;
    min_sample: number;
    /** Below this posterior weight on the site's own data the estimate is "mostly synthetic". */
    min_weight_direct: number;
    /** Convergence gate: R-hat must stay below this. */
    rhat_max: number;
    /** Convergence gate: bulk and tail ESS must reach this. */
    ess_min: number;
  };
  interval: number;
  /** How the report is rendered; paths absolute. */
  report: {
    /** An office's own folder of templates; files missing there fall back to the default set. */
    template?: string;
    paper: 'A4' | 'Letter';
    /** Site boundaries for the maps (GeoJSON) and the property holding the site id. */
    map?: { file: string; id_property: string };
  };
  /** Make the weighted sum of site estimates equal a reliable total (draw by draw). */
  benchmark?: { total: number; weights: string; method: 'ratio' | 'difference' };
  /** Defaults for `shrinkwell compare`. */
  compare?: { target?: number; top: number; lower_is_better: boolean };
}
