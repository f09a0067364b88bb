/**
 * One-dimensional updates of a positive scale parameter σ (a standard deviation) whose
 * marginal log density is available, shared by the collapsed samplers of every model.
 *
 * Both leave the target invariant, on log σ or on σ itself:
 * - slice sampling with stepping-out and shrinkage (Neal 2003, "Slice sampling", Annals of
 *   Statistics 31(3), figs. 3 and 5);
 * - independence Metropolis–Hastings with a Student-t proposal (folded at zero on σ), fitted in
 *   warmup (Tierney 1994, Annals of Statistics 22(4)); with a proposal wider than the target it
 *   is uniformly ergodic (Mengersen & Tweedie 1996, Annals of Statistics 24(1)).
 *
 * The caller supplies `logDensityOfLog(t)`, the log density of t = log σ up to a constant; on
 * σ itself the Jacobian e^t is removed and σ ≤ 0 is outside the support.
 */
import type { Rng } from './rng.js';
import { gamma, normal } from './variates.js';

export type SliceScale = 'log' | 'linear';

/** Maximum stepping-out steps of a slice update (both sides together). */
export const STEP_OUT_LIMIT = 32;
/** Degrees of freedom of the independence proposal: heavier tails than the target's. */
export const PROPOSAL_DF = 5;
/** The proposal's spread over the warmup sd: wide enough to cover the target's tails. */
export const PROPOSAL_INFLATION = 1.3;

/** The new σ and the log density of log σ there. */
export interface ScaleMove {
  sigma: number;
  logTarget: number;
  accepted: boolean;
}

function onScale(x: number, scale: SliceScale, logDensityOfLog: (t: number) => number): number {
  if (scale === 'log') return logDensityOfLog(x);
  if (!(x > 0)) return -Infinity;
  const t = Math.log(x);
  return logDensityOfLog(t) - t;
}

/**
 * One slice update from σ0 (log density of log σ0 = `logTarget`), width `w` on the scale. The
 * accepted point is the last one evaluated, so buffers the density fills describe it.
 */
export function sliceScaleUpdate(
  sigma0: number,
  logTarget: number,
  scale: SliceScale,
  w: number,
  logDensityOfLog: (t: number) => number,
  rng: Rng,
): ScaleMove {
  const t0 = Math.log(sigma0);
  const x0 = scale === 'log' ? t0 : sigma0;
  const current = scale === 'log' ? logTarget : logTarget - t0;
  const target = (x: number): number => onScale(x, scale, logDensityOfLog);
  const level = current + Math.log(rng.uniform()); // log of a uniform height under the density
  let lo = x0 - w * rng.uniform();
  let hi = lo + w;
  let leftSteps = Math.floor(STEP_OUT_LIMIT * rng.uniform());
  let rightSteps = STEP_OUT_LIMIT - 1 - leftSteps;
  while (leftSteps > 0 && target(lo) > level) {
    lo -= w;
    leftSteps--;
  }
  while (rightSteps > 0 && target(hi) > level) {
    hi += w;
    rightSteps--;
  }
  for (;;) {
    const x1 = lo + (hi - lo) * rng.uniform();
    const value = target(x1);
    if (value > level) {
      return {
        sigma: scale === 'log' ? Math.exp(x1) : x1,
        logTarget: scale === 'log' ? value : value + Math.log(x1),
        accepted: true,
      };
    }
    if (x1 < x0) lo = x1;
    else hi = x1;
  }
}

function logStudentT(x: number, centre: number, spread: number): number {
  const z = (x - centre) / spread;
  return -0.5 * (PROPOSAL_DF + 1) * Math.log1p((z * z) / PROPOSAL_DF) - Math.log(spread);
}

/** Log density of the proposal: Student-t on log σ; on σ folded at zero (|x|), so no proposal is wasted below zero. */
export function logProposal(x: number, scale: SliceScale, centre: number, spread: number): number {
  if (scale === 'log') return logStudentT(x, centre, spread);
  const a = logStudentT(x, centre, spread);
  const b = logStudentT(-x, centre, spread);
  const top = Math.max(a, b);
  return top + Math.log(Math.exp(a - top) + Math.exp(b - top));
}

/**
 * One independence Metropolis–Hastings update. `logDensityOfLog` is evaluated once, at the
 * proposal (callers point it at spare buffers and swap them in when `accepted`).
 */
export function independenceScaleUpdate(
  sigma0: number,
  logTarget: number,
  scale: SliceScale,
  centre: number,
  spread: number,
  logDensityOfLog: (t: number) => number,
  rng: Rng,
): ScaleMove {
  const g = gamma(rng, PROPOSAL_DF / 2) / (PROPOSAL_DF / 2);
  const raw = centre + (spread * normal(rng)) / Math.sqrt(g);
  const x1 = scale === 'log' ? raw : Math.abs(raw);
  const stay = { sigma: sigma0, logTarget, accepted: false };
  const value = onScale(x1, scale, logDensityOfLog);
  if (value === -Infinity) return stay;
  const t0 = Math.log(sigma0);
  const x0 = scale === 'log' ? t0 : sigma0;
  const current = scale === 'log' ? logTarget : logTarget - t0;
  const logRatio = value - current + logProposal(x0, scale, centre, spread) - logProposal(x1, scale, centre, spread);
  if (!(Math.log(rng.uniform()) < logRatio)) return stay;
  return { sigma: scale === 'log' ? Math.exp(x1) : x1, logTarget: scale === 'log' ? value : value + Math.log(x1), accepted: true };
}
