/**
 * Benchmarking: make the site estimates add up to a reliable published figure T,
 * Σ_i w_i θ_i = T, by adjusting every posterior draw.
 *
 * - ratio: θ*_i = θ_i · T / Σ_j w_j θ_j  (the adjustment factor is T / Σ w θ),
 * - difference: θ*_i = θ_i + (T − Σ_j w_j θ_j) / Σ_j w_j.
 *
 * These are the ratio and difference benchmarking adjustments of the small-area literature
 * (Pfeffermann 2013, "New important developments in small area estimation", Statistical
 * Science 28(1), §7; recalled). Applying them draw by draw (rather than to the posterior means
 * only) gives benchmarked draws whose every realisation meets the constraint exactly, so the
 * benchmarked intervals include the uncertainty of the adjustment itself.
 */
import { quantileSorted, type ChainValues } from './posterior.js';

export type BenchmarkMethod = 'ratio' | 'difference';

export interface BenchmarkedSite {
  estimate: number;
  sd: number;
  lower: number;
  upper: number;
}

export interface BenchmarkResult {
  method: BenchmarkMethod;
  total: number;
  /** Posterior mean and interval of the weighted sum before adjustment. */
  unadjustedSum: { mean: number; lower: number; upper: number };
  /** The factor (ratio) or shift (difference) applied: posterior mean and interval. */
  adjustment: { mean: number; lower: number; upper: number };
  sites: BenchmarkedSite[];
}

function summarize(values: Float64Array, interval: number): { mean: number; sd: number; lower: number; upper: number } {
  let mean = 0;
  for (let i = 0; i < values.length; i++) mean += values[i];
  mean /= values.length;
  let ss = 0;
  for (let i = 0; i < values.length; i++) ss += (values[i] - mean) ** 2;
  values.sort();
  const tail = (1 - interval) / 2;
  return {
    mean,
    sd: Math.sqrt(ss / Math.max(values.length - 1, 1)),
    lower: quantileSorted(values, tail),
    upper: quantileSorted(values, 1 - tail),
  };
}

/**
 * Benchmarks the site draws. `siteQuantity[i]` is the index of site i's quantity in the
 * chains; `weights[i]` its weight. Pure: returns summaries, leaves the draws untouched.
 */
export function benchmarkDraws(
  chains: readonly ChainValues[],
  siteQuantity: readonly number[],
  weights: Float64Array,
  total: number,
  method: BenchmarkMethod,
  interval: number,
): BenchmarkResult {
  const D = chains[0].draws;
  const S = chains.length * D;
  // Weighted sum per draw, one pass over the sites (draws of a site are contiguous).
  const sums = new Float64Array(S);
  chains.forEach((chain, c) => {
    siteQuantity.forEach((q, i) => {
      const w = weights[i];
      if (w === 0) return;
      const base = q * D;
      for (let d = 0; d < D; d++) sums[c * D + d] += w * chain.values[base + d];
    });
  });
  let weightTotal = 0;
  for (const w of weights) weightTotal += w;
  const adjustment = new Float64Array(S);
  for (let k = 0; k < S; k++) adjustment[k] = method === 'ratio' ? total / sums[k] : (total - sums[k]) / weightTotal;

  const adjusted = new Float64Array(S);
  const sites = siteQuantity.map((q) => {
    chains.forEach((chain, c) => {
      const base = q * D;
      for (let d = 0; d < D; d++) {
        const k = c * D + d;
        const theta = chain.values[base + d];
        adjusted[k] = method === 'ratio' ? theta * adjustment[k] : theta + adjustment[k];
      }
    });
    const { mean, sd, lower, upper } = summarize(adjusted, interval);
    return { estimate: mean, sd, lower, upper };
  });
  const sumSummary = summarize(sums, interval);
  const adjustmentSummary = summarize(adjustment, interval);
  return {
    method,
    total,
    unadjustedSum: { mean: sumSummary.mean, lower: sumSummary.lower, upper: sumSummary.upper },
    adjustment: { mean: adjustmentSummary.mean, lower: adjustmentSummary.lower, upper: adjustmentSummary.upper },
    sites,
  };
}
