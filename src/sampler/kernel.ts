/**
 * What every model hands to the chain driver.
 *
 * A kernel is `init(rng) → state` plus `step(state, rng, phase) → state` over typed arrays, and
 * declares the quantities it records. The driver owns warmup, draws, chains and progress; the
 * kernel owns only the maths of one sweep. States are mutated in place for speed (no per-sweep
 * allocation), so a step returns the same object it was given.
 */
import type { Rng } from './rng.js';

export type Phase = 'warmup' | 'sampling';

export interface Kernel<State> {
  /** Names of the monitored quantities, in the order `record` writes them. */
  readonly quantities: readonly string[];
  init(rng: Rng): State;
  /** One full sweep. `iteration` counts from 0 within the phase; warmup may adapt tuning. */
  step(state: State, rng: Rng, phase: Phase, iteration: number): State;
  /** Write the monitored quantities of `state` into `out[q * stride + offset]`. */
  record(state: State, out: Float64Array, stride: number, offset: number): void;
}
