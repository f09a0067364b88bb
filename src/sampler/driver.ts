/**
 * The chain driver: runs one kernel for warmup + draws sweeps on its own seeded stream and
 * collects the recorded quantities. Knows nothing of any model.
 */
import type { Kernel } from './kernel.js';
import { createRng } from './rng.js';

export interface ChainPlan {
  warmup: number;
  draws: number;
  seed: number;
}

/** Draws of one chain, quantity-major: value of quantity q at draw d is `values[q * draws + d]`. */
export interface ChainDraws {
  chain: number;
  draws: number;
  values: Float64Array;
}

/** Sweeps between progress callbacks. */
export const PROGRESS_EVERY = 50;

/**
 * Runs chain `chain` of `plan`. Stream `chain` of seed `plan.seed` drives it, so the draws are
 * the same whichever thread runs it. `onProgress` receives the sweeps done so far.
 */
export function runChain<S>(
  kernel: Kernel<S>,
  plan: ChainPlan,
  chain: number,
  onProgress?: (sweepsDone: number) => void,
  allocate: (length: number) => Float64Array = (length) => new Float64Array(length),
): ChainDraws {
  const rng = createRng(plan.seed, chain);
  const values = allocate(kernel.quantities.length * plan.draws);
  let state = kernel.init(rng);
  for (let it = 0; it < plan.warmup; it++) {
    state = kernel.step(state, rng, 'warmup', it);
    if (onProgress && (it + 1) % PROGRESS_EVERY === 0) onProgress(it + 1);
  }
  for (let d = 0; d < plan.draws; d++) {
    state = kernel.step(state, rng, 'sampling', d);
    kernel.record(state, values, plan.draws, d);
    if (onProgress && (plan.warmup + d + 1) % PROGRESS_EVERY === 0) onProgress(plan.warmup + d + 1);
  }
  onProgress?.(plan.warmup + plan.draws);
  return { chain, draws: plan.draws, values };
}
