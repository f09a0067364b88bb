/**
 * Checks of the area model against the data (Gelman, Meng & Stern 1996, Statistica Sinica 6,
 * "Posterior predictive assessment of model fitness via realized discrepancies"; Gelman et al.
 * 2013, BDA3 ch. 6):
 *
 * - per site, the posterior predictive p-value of the direct estimate,
 *   p_i = P(y_i^rep ≥ y_i | y) = E[1 − Φ((y_i − θ_i)/√ψ_i)], averaged over the draws of θ_i
 *   (the inner probability in closed form, so no replicate noise);
 * - overall, the realized-discrepancy p-value of T(y, θ) = Σ_i (y_i − θ_i)²/ψ_i,
 *   P(T(y^rep, θ) ≥ T(y, θ) | y), with one replicate per draw;
 * - standardized residuals r_i = (y_i − x_iᵀβ̄)/√(ψ_i + σ̄_u²), roughly N(0, 1) under the model,
 *   for a normal quantile plot;
 * - the mean of the model estimates against the mean of the direct estimates over sampled sites.
 */
import type { Rng } from '../sampler/rng.js';
import { normal } from '../sampler/variates.js';
import { normalCdf } from './exact.js';

export interface SiteCheck {
  site: string;
  /** Posterior predictive p-value of the direct estimate (NaN for unsampled sites). */
  ppp: number;
  /** Standardized residual (NaN for unsampled sites). */
  residual: number;
  /** The direct estimate lies in the outer `extremeLevel` of its predictive distribution. */
  extreme: boolean;
}

export interface ModelChecks {
  sites: SiteCheck[];
  /** Realized-discrepancy p-value of Σ (y − θ)²/ψ. */
  overallPpp: number;
  /** Two-sided level below which a site's direct estimate is called extreme. */
  extremeLevel: number;
  meanDirect: number;
  meanModel: number;
}

export interface AreaCheckInput {
  siteIds: string[];
  X: Float64Array;
  p: number;
  direct: Float64Array;
  variance: Float64Array;
  hasData: Uint8Array;
}

/** One sampled site, as the normal-error checks need it. */
export interface NormalCheckSite {
  /** The direct estimate. */
  y: number;
  /** Pooled draws of the mean the model predicts for it. */
  mean: Float64Array;
  /** Its sampling sd at draw k. */
  sdAt: (k: number) => number;
  /** The regression fit at the posterior mean coefficients, and the marginal sd about it. */
  fitted: number;
  residualSd: number;
  /** The reported estimate of the site. */
  estimate: number;
}

/**
 * The checks of every model whose direct estimate is normal given its mean (area: ψ_i; unit:
 * σ_e²/n_i). `site(i)` is null for an unsampled site. The per-site p-value is in closed form
 * per draw; the overall discrepancy Σ z² is compared with a sum of squared standard normals,
 * one replicate per draw from `rng`.
 */
export function normalModelChecks(
  siteIds: readonly string[],
  site: (i: number) => NormalCheckSite | null,
  S: number,
  rng: Rng,
  extremeLevel: number,
): ModelChecks {
  const realized = new Float64Array(S);
  const replicated = new Float64Array(S);
  let sumDirect = 0;
  let sumModel = 0;
  let sampled = 0;
  const sites = siteIds.map((id, i) => {
    const s = site(i);
    if (s === null) return { site: id, ppp: NaN, residual: NaN, extreme: false };
    let upper = 0;
    for (let k = 0; k < S; k++) {
      const z = (s.y - s.mean[k]) / s.sdAt(k);
      upper += 1 - normalCdf(z);
      realized[k] += z * z;
      const e = normal(rng);
      replicated[k] += e * e;
    }
    const ppp = upper / S;
    sumDirect += s.y;
    sumModel += s.estimate;
    sampled++;
    return {
      site: id,
      ppp,
      residual: (s.y - s.fitted) / s.residualSd,
      extreme: ppp < extremeLevel / 2 || ppp > 1 - extremeLevel / 2,
    };
  });
  let exceed = 0;
  for (let k = 0; k < S; k++) if (replicated[k] >= realized[k]) exceed++;
  return { sites, overallPpp: exceed / S, extremeLevel, meanDirect: sumDirect / sampled, meanModel: sumModel / sampled };
}

/** Posterior means of the coefficients and of a variance σ² from pooled draws of σ. */
export function posteriorMeans(beta: Float64Array[], sd: Float64Array): { beta: number[]; variance: number } {
  const S = sd.length;
  let variance = 0;
  for (let k = 0; k < S; k++) variance += sd[k] * sd[k];
  return { beta: beta.map((b) => b.reduce((a, v) => a + v, 0) / S), variance: variance / S };
}

export function fittedValue(X: Float64Array, p: number, i: number, beta: readonly number[]): number {
  let fitted = 0;
  for (let j = 0; j < p; j++) fitted += X[i * p + j] * beta[j];
  return fitted;
}

/**
 * `theta(i)` returns the pooled draws of θ_i, `beta` and `siteSd` the pooled draws of the
 * coefficients and σ_u; `estimates[i]` the posterior mean of θ_i. One replicate per draw
 * comes from `rng` (seeded by the caller, so the result is reproducible).
 */
export function areaModelChecks(
  input: AreaCheckInput,
  theta: (site: number) => Float64Array,
  beta: Float64Array[],
  siteSd: Float64Array,
  estimates: ArrayLike<number>,
  rng: Rng,
  extremeLevel = 0.05,
): ModelChecks {
  const means = posteriorMeans(beta, siteSd);
  return normalModelChecks(
    input.siteIds,
    (i) => {
      if (!input.hasData[i]) return null;
      const psi = input.variance[i];
      const sd = Math.sqrt(psi);
      return {
        y: input.direct[i],
        mean: theta(i),
        sdAt: () => sd,
        fitted: fittedValue(input.X, input.p, i, means.beta),
        residualSd: Math.sqrt(psi + means.variance),
        estimate: estimates[i],
      };
    },
    siteSd.length,
    rng,
    extremeLevel,
  );
}
