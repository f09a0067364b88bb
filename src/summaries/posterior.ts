/**
 * Posterior summaries and convergence diagnostics of every monitored quantity, from the chains'
 * draws. Pure: draws in, one row per quantity out.
 */
import { createScratch, diagnoseQuantity } from '../diagnostics/convergence.js';

/** One chain's draws, quantity-major (see src/sampler/driver.ts). */
export interface ChainValues {
  draws: number;
  values: Float64Array;
}

export interface QuantitySummary {
  name: string;
  mean: number;
  sd: number;
  lower: number;
  upper: number;
  median: number;
  rhat: number;
  essBulk: number;
  essTail: number;
  mcseMean: number;
}

/** The draws of quantity q in each chain, as views (no copy). */
export function quantityChains(chains: readonly ChainValues[], q: number): Float64Array[] {
  return chains.map((c) => c.values.subarray(q * c.draws, (q + 1) * c.draws));
}

/**
 * Quantile of sorted values by linear interpolation between order statistics (the usual
 * "type 7" definition, Hyndman & Fan 1996, Am. Statistician 50(4)).
 */
export function quantileSorted(sorted: Float64Array, prob: number): number {
  const n = sorted.length;
  if (n === 0) return NaN;
  const h = (n - 1) * prob;
  const lo = Math.floor(h);
  const hi = Math.min(lo + 1, n - 1);
  return sorted[lo] + (h - lo) * (sorted[hi] - sorted[lo]);
}

function meanAndSd(pooled: Float64Array): { mean: number; sd: number } {
  let mean = 0;
  for (let i = 0; i < pooled.length; i++) mean += pooled[i];
  mean /= pooled.length;
  let ss = 0;
  for (let i = 0; i < pooled.length; i++) ss += (pooled[i] - mean) ** 2;
  return { mean, sd: Math.sqrt(ss / Math.max(pooled.length - 1, 1)) };
}

/** Summaries of every quantity; `interval` is the central credible mass (e.g. 0.95). */
export function summarizeQuantities(
  chains: readonly ChainValues[],
  names: readonly string[],
  interval: number,
): QuantitySummary[] {
  const draws = chains[0].draws;
  const scratch = createScratch(chains.length, draws);
  const pooled = new Float64Array(chains.length * draws);
  const tail = (1 - interval) / 2;
  return names.map((name, q) => {
    const perChain = quantityChains(chains, q);
    perChain.forEach((c, k) => pooled.set(c, k * draws));
    const { mean, sd } = meanAndSd(pooled);
    pooled.sort();
    const diag = diagnoseQuantity(perChain, scratch);
    return {
      name,
      mean,
      sd,
      lower: quantileSorted(pooled, tail),
      upper: quantileSorted(pooled, 1 - tail),
      median: quantileSorted(pooled, 0.5),
      rhat: diag.rhat,
      essBulk: diag.essBulk,
      essTail: diag.essTail,
      mcseMean: diag.mcseMean,
    };
  });
}
