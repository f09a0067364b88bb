/**
 * Checks of the unit model against the data, the area model's checks (src/summaries/model-checks.ts;
 * Gelman, Meng & Stern 1996) with the site's sample mean as the direct estimate:
 *
 *   ȳ_i^rep | β, u_i, σ_e ~ N(x̄_iᵀβ + u_i, σ_e²/n_i)
 *
 * (x̄_i the sample means of the covariates: the model's prediction of the sample mean, not of the
 * population-mean target X̄_iᵀβ + u_i).
 *
 * - per site, p_i = P(ȳ_i^rep ≥ ȳ_i | y) = E[1 − Φ((ȳ_i − x̄_iᵀβ − u_i)/(σ_e/√n_i))], the inner
 *   probability in closed form per draw;
 * - overall, the realized-discrepancy p-value of T = Σ_i n_i(ȳ_i − x̄_iᵀβ − u_i)²/σ_e², one
 *   replicate per draw (under the model n_i(ȳ_i^rep − mean_i)²/σ_e² is χ²₁, so T^rep is a sum of
 *   squared standard normals);
 * - standardized residuals r_i = (ȳ_i − x̄_iᵀβ̄)/√(σ̄_u² + σ̄_e²/n_i), with σ̄² the posterior means
 *   of the squares (the marginal sd of ȳ_i about the regression line, Battese, Harter & Fuller 1988);
 * - the mean of the model estimates against the mean of the sample means over sampled sites.
 */
import type { Rng } from '../sampler/rng.js';
import { fittedValue, normalModelChecks, posteriorMeans, type ModelChecks } from './model-checks.js';

export interface UnitCheckInput {
  siteIds: string[];
  /** Units sampled per site; 0 = no sample. */
  n: Float64Array;
  /** Sample mean of the response (NaN where n = 0). */
  ybar: Float64Array;
  /** Sample means of the covariates, m × p row-major, 1 in column 0. */
  xbar: Float64Array;
  p: number;
}

/**
 * `sampleMean(i)` returns the pooled draws of x̄_iᵀβ + u_i (only asked for sampled sites), `beta`,
 * `siteSd`, `unitSd` the pooled draws of the coefficients, σ_u and σ_e (same draw order);
 * `estimates[i]` the reported estimate of site i. One replicate per draw comes from `rng`.
 */
export function unitModelChecks(
  input: UnitCheckInput,
  sampleMean: (site: number) => Float64Array,
  beta: Float64Array[],
  siteSd: Float64Array,
  unitSd: Float64Array,
  estimates: ArrayLike<number>,
  rng: Rng,
  extremeLevel = 0.05,
): ModelChecks {
  const site = posteriorMeans(beta, siteSd);
  const unit = posteriorMeans([], unitSd);
  return normalModelChecks(
    input.siteIds,
    (i) => {
      const n = input.n[i];
      if (!(n > 0)) return null;
      const root = Math.sqrt(n);
      return {
        y: input.ybar[i],
        mean: sampleMean(i),
        sdAt: (k) => unitSd[k] / root,
        fitted: fittedValue(input.xbar, input.p, i, site.beta),
        residualSd: Math.sqrt(site.variance + unit.variance / n),
        estimate: estimates[i],
      };
    },
    siteSd.length,
    rng,
    extremeLevel,
  );
}
