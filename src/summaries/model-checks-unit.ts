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
import { normal } from '../sampler/variates.js';
import { normalCdf } from './exact.js';
import type { ModelChecks } from './model-checks.js';

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
  const S = siteSd.length;
  const betaMean = beta.map((b) => b.reduce((a, v) => a + v, 0) / S);
  let siteVar = 0;
  let unitVar = 0;
  for (let k = 0; k < S; k++) {
    siteVar += siteSd[k] * siteSd[k];
    unitVar += unitSd[k] * unitSd[k];
  }
  siteVar /= S;
  unitVar /= S;
  const realized = new Float64Array(S);
  const replicated = new Float64Array(S);
  let sumDirect = 0;
  let sumModel = 0;
  let sampled = 0;
  const sites = input.siteIds.map((site, i) => {
    const n = input.n[i];
    if (!(n > 0)) return { site, ppp: NaN, residual: NaN, extreme: false };
    const y = input.ybar[i];
    const draws = sampleMean(i);
    let upper = 0;
    for (let k = 0; k < S; k++) {
      const sd = unitSd[k] / Math.sqrt(n);
      const z = (y - draws[k]) / sd;
      upper += 1 - normalCdf(z);
      realized[k] += z * z;
      const e = normal(rng);
      replicated[k] += e * e;
    }
    const ppp = upper / S;
    let fitted = 0;
    for (let j = 0; j < input.p; j++) fitted += input.xbar[i * input.p + j] * betaMean[j];
    sumDirect += y;
    sumModel += estimates[i];
    sampled++;
    return {
      site,
      ppp,
      residual: (y - fitted) / Math.sqrt(siteVar + unitVar / n),
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
