/**
 * The sampler certificate: on this very data, the Gibbs posterior means against the exact
 * posterior means by numerical integration (src/summaries/exact.ts), each difference in units
 * of its Monte Carlo standard error. An auditor sees that the sampler is right here, not only
 * in the test suite.
 */
import { normalQuantile } from '../diagnostics/normal-quantile.js';
import type { QuantitySummary } from './posterior.js';

export interface CertificateRow {
  quantity: string;
  gibbs: number;
  exact: number;
  mcse: number;
  /** (gibbs − exact) / mcse. */
  z: number;
}

export interface Certificate {
  rows: CertificateRow[];
  worst: CertificateRow;
  /** |z| bound for the family: all K differences within it with probability 0.99 under a correct sampler. */
  bound: number;
  allWithin: boolean;
}

/** Family-wise false-alarm rate of the certificate. */
export const CERTIFICATE_ALPHA = 0.01;

/**
 * Compares every quantity with an exact mean. The bound is the Bonferroni normal quantile
 * Φ⁻¹(1 − α/(2K)) (common practice for K simultaneous z-checks), so a correct sampler passes
 * with probability at least 1 − α whatever the number of sites.
 */
export function samplerCertificate(
  summaries: ReadonlyMap<string, QuantitySummary>,
  exactMeans: ReadonlyMap<string, number>,
): Certificate {
  const rows: CertificateRow[] = [];
  for (const [quantity, exact] of exactMeans) {
    const q = summaries.get(quantity);
    // A posterior mean that does not exist (heavy tail: Infinity) cannot be certified.
    if (!q || !Number.isFinite(exact)) continue;
    rows.push({ quantity, gibbs: q.mean, exact, mcse: q.mcseMean, z: (q.mean - exact) / q.mcseMean });
  }
  const bound = normalQuantile(1 - CERTIFICATE_ALPHA / (2 * Math.max(rows.length, 1)));
  let worst = rows[0];
  for (const row of rows) if (!(Math.abs(row.z) <= Math.abs(worst.z))) worst = row;
  return { rows, worst, bound, allWithin: rows.every((r) => Math.abs(r.z) <= bound) };
}
