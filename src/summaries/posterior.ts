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

function meanAndSd(chains: readonly Float64Array[]): { mean: number; sd: number } {
  let mean = 0;
  let count = 0;
  for (const c of chains) {
    for (let i = 0; i < c.length; i++) mean += c[i];
    count += c.length;
  }
  mean /= count;
  let ss = 0;
  for (const c of chains) for (let i = 0; i < c.length; i++) ss += (c[i] - mean) ** 2;
  return { mean, sd: Math.sqrt(ss / Math.max(count - 1, 1)) };
}

/** Numbers per quantity in the packed form `summarizeRange` returns (see `unpackSummary`). */
export const SUMMARY_FIELDS = 9;

/**
 * Summaries of quantities [from, to) packed as SUMMARY_FIELDS numbers each: mean, sd, lower,
 * upper, median, rhat, essBulk, essTail, mcseMean. Packed so worker threads can return them
 * as one typed array. `interval` is the central credible mass (e.g. 0.95).
 */
export function summarizeRange(
  chains: readonly ChainValues[],
  from: number,
  to: number,
  interval: number,
): Float64Array {
  const draws = chains[0].draws;
  const scratch = createScratch(chains.length, draws);
  const tail = (1 - interval) / 2;
  const out = new Float64Array((to - from) * SUMMARY_FIELDS);
  for (let q = from; q < to; q++) {
    const perChain = quantityChains(chains, q);
    const diag = diagnoseQuantity(perChain, scratch);
    const { mean, sd } = meanAndSd(perChain);
    // For finite draws the diagnostics leave them all sorted in the scratch: quantiles from there.
    const sorted = scratch.sortedAll.subarray(0, chains.length * draws);
    const valid = Number.isFinite(mean) && Number.isFinite(sd);
    const at = (q - from) * SUMMARY_FIELDS;
    out[at] = mean;
    out[at + 1] = sd;
    out[at + 2] = valid ? quantileSorted(sorted, tail) : NaN;
    out[at + 3] = valid ? quantileSorted(sorted, 1 - tail) : NaN;
    out[at + 4] = valid ? quantileSorted(sorted, 0.5) : NaN;
    out[at + 5] = diag.rhat;
    out[at + 6] = diag.essBulk;
    out[at + 7] = diag.essTail;
    out[at + 8] = diag.mcseMean;
  }
  return out;
}

export function unpackSummary(name: string, packed: Float64Array, index: number): QuantitySummary {
  const at = index * SUMMARY_FIELDS;
  return {
    name,
    mean: packed[at],
    sd: packed[at + 1],
    lower: packed[at + 2],
    upper: packed[at + 3],
    median: packed[at + 4],
    rhat: packed[at + 5],
    essBulk: packed[at + 6],
    essTail: packed[at + 7],
    mcseMean: packed[at + 8],
  };
}

/** Summaries of every quantity, in this thread. */
export function summarizeQuantities(
  chains: readonly ChainValues[],
  names: readonly string[],
  interval: number,
): QuantitySummary[] {
  const packed = summarizeRange(chains, 0, names.length, interval);
  return names.map((name, q) => unpackSummary(name, packed, q));
}
