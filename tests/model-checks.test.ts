/** Posterior predictive checks of the area model against closed forms. */
import { describe, expect, it } from 'vitest';
import { createRng } from '../src/sampler/rng.js';
import { normal } from '../src/sampler/variates.js';
import { normalCdf } from '../src/summaries/exact.js';
import { areaModelChecks } from '../src/summaries/model-checks.js';

describe('area model checks', () => {
  const input = {
    siteIds: ['a', 'b', 'c'],
    X: Float64Array.from([1, 1, 1]),
    p: 1,
    direct: Float64Array.from([1, 3, NaN]),
    variance: Float64Array.from([0.5, 2, NaN]),
    hasData: Uint8Array.from([1, 1, 0]),
  };

  it('with θ ~ N(m, s²) a posteriori the predictive p-value is Φ((m − y)/√(ψ + s²)) (normal convolution, closed form)', () => {
    const rng = createRng(5, 0);
    const S = 40000;
    const m = [1.6, 2.1];
    const s = [0.4, 0.8];
    const theta = m.map((mi, i) => Float64Array.from({ length: S }, () => mi + s[i] * normal(rng)));
    const checks = areaModelChecks(input, (i) => theta[i] ?? new Float64Array(S), [new Float64Array(S).fill(2)], new Float64Array(S).fill(1), [1.6, 2.1, 2], createRng(5, 1));
    m.forEach((mi, i) => {
      const exact = normalCdf((mi - input.direct[i]) / Math.sqrt(input.variance[i] + s[i] ** 2));
      // Monte Carlo se of an average of values in [0, 1] over S iid draws is at most 0.5/√S.
      expect(Math.abs(checks.sites[i].ppp - exact)).toBeLessThan((4 * 0.5) / Math.sqrt(S));
    });
    expect(Number.isNaN(checks.sites[2].ppp)).toBe(true);
    // standardized residual (y − xβ̄)/√(ψ + E σ²) with β̄ = 2, σ = 1
    expect(checks.sites[0].residual).toBeCloseTo((1 - 2) / Math.sqrt(0.5 + 1), 12);
  });

  it('a direct estimate far in the tail is called extreme; overall p-value near 0 when every site misfits', () => {
    const S = 4000;
    const theta = [new Float64Array(S).fill(10), new Float64Array(S).fill(-10)];
    const checks = areaModelChecks(input, (i) => theta[i] ?? new Float64Array(S), [new Float64Array(S)], new Float64Array(S), [10, -10, 0], createRng(1, 2));
    expect(checks.sites[0].extreme && checks.sites[1].extreme).toBe(true);
    expect(checks.overallPpp).toBe(0);
  });
});
