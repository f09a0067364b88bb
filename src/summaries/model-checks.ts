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
  const S = siteSd.length;
  const betaMean = beta.map((b) => b.reduce((a, v) => a + v, 0) / S);
  let s2Mean = 0;
  for (let k = 0; k < S; k++) s2Mean += siteSd[k] * siteSd[k];
  s2Mean /= S;
  const realized = new Float64Array(S);
  const replicated = new Float64Array(S);
  let sumDirect = 0;
  let sumModel = 0;
  let sampled = 0;
  const sites = input.siteIds.map((site, i) => {
    if (!input.hasData[i]) return { site, ppp: NaN, residual: NaN, extreme: false };
    const y = input.direct[i];
    const psi = input.variance[i];
    const sd = Math.sqrt(psi);
    const draws = theta(i);
    let upper = 0;
    for (let k = 0; k < S; k++) {
      upper += 1 - normalCdf((y - draws[k]) / sd);
      realized[k] += (y - draws[k]) ** 2 / psi;
      const e = normal(rng);
      replicated[k] += e * e;
    }
    const ppp = upper / S;
    let fitted = 0;
    for (let j = 0; j < input.p; j++) fitted += input.X[i * input.p + j] * betaMean[j];
    sumDirect += y;
    sumModel += estimates[i];
    sampled++;
    return {
      site,
      ppp,
      residual: (y - fitted) / Math.sqrt(psi + s2Mean),
      extreme: ppp < extremeLevel / 2 || ppp > 1 - extremeLevel / 2,
    };
  });
  let exceed = 0;
  for (let k = 0; k < S; k++) if (replicated[k] >= realized[k]) exceed++;
  return {
    sites,
    overallPpp: exceed / S,
    extremeLevel,
    meanDirect: sumDirect / sampled,
    meanModel: sumModel / sampled,
  };
}
