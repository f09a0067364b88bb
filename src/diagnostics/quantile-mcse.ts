/**
 * Monte Carlo standard error of a posterior quantile (Vehtari, Gelman, Simpson, Carpenter &
 * Bürkner 2021, §4.3): the ESS of the indicator I(x ≤ q_p) over split chains gives the
 * uncertainty of the probability level, which is mapped back through the empirical quantile
 * function. The beta interval of the reference is replaced by its normal approximation
 * p ± √(p(1 − p)/ESS), adequate for ESS in the hundreds or more.
 */
import { essOfChains, splitChains } from './convergence.js';

function quantileOfSorted(sorted: Float64Array, prob: number): number {
  const h = (sorted.length - 1) * Math.min(Math.max(prob, 0), 1);
  const lo = Math.floor(h);
  const hi = Math.min(lo + 1, sorted.length - 1);
  return sorted[lo] + (h - lo) * (sorted[hi] - sorted[lo]);
}

export function mcseQuantile(chains: readonly Float64Array[], prob: number): number {
  const total = chains.reduce((n, c) => n + c.length, 0);
  const sorted = new Float64Array(total);
  let at = 0;
  for (const c of chains) {
    sorted.set(c, at);
    at += c.length;
  }
  sorted.sort();
  const q = quantileOfSorted(sorted, prob);
  const indicators = splitChains(chains).map((c) => c.map((v) => (v <= q ? 1 : 0)));
  const ess = essOfChains(indicators);
  if (!Number.isFinite(ess)) return NaN;
  const half = Math.sqrt((prob * (1 - prob)) / ess);
  return (quantileOfSorted(sorted, prob + half) - quantileOfSorted(sorted, prob - half)) / 2;
}
