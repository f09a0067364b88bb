/**
 * The frequentist cross-check's two run-folder files, as text (no I/O here):
 *   frequentist.csv  — `site,eblup,rmse`, one row per site in the order of the sites file;
 *   frequentist.json — the variance estimates, coefficients by name, method and fit status.
 * Works for every model's {@link FrequentistFit} (`unit_variance` appears only where it applies).
 */
import type { FrequentistFit } from '../summaries/frequentist.js';
import { csvText } from './csv.js';

export const FREQUENTIST_COLUMNS = ['site', 'eblup', 'rmse'] as const;

/** `site,eblup,rmse` with rmse = √mse; numbers as in every run-folder CSV (8 significant digits). */
export function frequentistCsv(fit: FrequentistFit): string {
  return csvText(
    FREQUENTIST_COLUMNS,
    fit.siteIds.map((site, i) => [site, fit.eblup[i], Math.sqrt(fit.mse[i])]),
  );
}

/** JSON has no NaN or Infinity: write null. */
function jsonNumbers(_key: string, value: unknown): unknown {
  return typeof value === 'number' && !Number.isFinite(value) ? null : value;
}

/**
 * `{ model, method, site_variance, [unit_variance], coefficients: { name: { estimate, se } },
 * converged, iterations, at_boundary, log_likelihood, mse_note }`.
 */
export function frequentistJson(fit: FrequentistFit): string {
  const coefficients: Record<string, { estimate: number; se: number }> = {};
  for (const c of fit.coefficients) coefficients[c.name] = { estimate: c.estimate, se: c.se };
  const body = {
    model: fit.model,
    method: fit.method,
    site_variance: fit.siteVariance,
    ...(fit.unitVariance === undefined ? {} : { unit_variance: fit.unitVariance }),
    coefficients,
    converged: fit.converged,
    iterations: fit.iterations,
    at_boundary: fit.atBoundary,
    log_likelihood: fit.logLikelihood,
    mse_note: fit.mseNote,
  };
  return JSON.stringify(body, jsonNumbers, 2) + '\n';
}
