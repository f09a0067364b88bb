/**
 * The area model's input, as plain typed arrays: one row per site, intercept first in X.
 * Built by `src/data` from the sites file; consumed by `src/models` and `src/summaries`.
 */
export interface AreaData {
  /** Number of sites (rows of the sites file). */
  m: number;
  /** Number of coefficients, intercept included. */
  p: number;
  siteIds: string[];
  labels: string[];
  /** Coefficient names: 'intercept' then the covariates in config order. */
  coefficientNames: string[];
  /** Design matrix, m × p row-major; column 0 is all ones. */
  X: Float64Array;
  /** Direct estimate y_i; NaN where the site has no sample. */
  direct: Float64Array;
  /** Known sampling variance ψ_i; NaN where the site has no sample. */
  variance: Float64Array;
  /** Sample size n_i; 0 where the site has no sample, NaN where the config names no column. */
  sampleSize: Float64Array;
  /** 1 where the site has a direct estimate. */
  hasData: Uint8Array;
  /** How ψ_i were obtained, in words for the appendix (e.g. "sd² / n from column sd_yield"). */
  varianceNote: string;
}

/** A fingerprint of one input file, for the manifest and the appendix. */
export interface FileFingerprint {
  role: string;
  path: string;
  rows: number;
  sha256: string;
}
