/**
 * Benchmarking draw by draw (ratio and difference adjustments; Pfeffermann 2013, Statistical
 * Science 28(1), §7, recalled) against exact identities and closed forms.
 */
import { describe, expect, it } from 'vitest';
import { createRng } from '../src/sampler/rng.js';
import { normal } from '../src/sampler/variates.js';
import { benchmarkDraws } from '../src/summaries/benchmark.js';

/** Independent normal draws θ_i ~ N(μ_i, s_i²) for m sites in `chains` chains, quantity-major. */
function normalDraws(mu: number[], s: number[], chains: number, draws: number, seed: number) {
  const rng = createRng(seed, 0);
  return Array.from({ length: chains }, () => {
    const values = new Float64Array(mu.length * draws);
    mu.forEach((m, q) => {
      for (let d = 0; d < draws; d++) values[q * draws + d] = m + s[q] * normal(rng);
    });
    return { draws, values };
  });
}

describe('benchmarking', () => {
  const mu = [3, 2.5, 4, 3.5, 2];
  const s = [0.3, 0.2, 0.5, 0.25, 0.4];
  const w = Float64Array.from([0.1, 0.3, 0.2, 0.25, 0.15]);
  const chains = normalDraws(mu, s, 4, 5000, 11);
  const index = mu.map((_, i) => i);

  for (const method of ['ratio', 'difference'] as const) {
    it(`${method}: the weighted sum of the benchmarked estimates equals the total (exact identity)`, () => {
      const result = benchmarkDraws(chains, index, w, 3.2, method, 0.95);
      // Every draw meets the constraint, and means are linear: Σ w_i E[θ*_i] = T to rounding.
      const sum = result.sites.reduce((acc, site, i) => acc + w[i] * site.estimate, 0);
      expect(sum).toBeCloseTo(3.2, 10);
      expect(result.sites.every((site) => site.lower < site.estimate && site.estimate < site.upper)).toBe(true);
    });
  }

  it('difference: the benchmarked sd matches its closed form', () => {
    // θ* = θ − 1 (wᵀθ − T)/Σw is linear in independent normals: Var θ*_i = Σ_j (δ_ij − w_j/Σw)² s_j².
    const result = benchmarkDraws(chains, index, w, 3.2, 'difference', 0.95);
    const W = w.reduce((a, b) => a + b, 0);
    const S = 4 * 5000;
    result.sites.forEach((site, i) => {
      const variance = s.reduce((acc, sj, j) => acc + ((i === j ? 1 : 0) - w[j] / W) ** 2 * sj * sj, 0);
      const sd = Math.sqrt(variance);
      // Monte Carlo se of a sample sd from S independent normal draws: sd / √(2S); 5 of them.
      expect(Math.abs(site.sd - sd)).toBeLessThan((5 * sd) / Math.sqrt(2 * S));
      // and the mean shifts by (T − Σ w μ)/Σw exactly in expectation
      const shift = (3.2 - mu.reduce((acc, m, j) => acc + w[j] * m, 0)) / W;
      expect(Math.abs(site.estimate - (mu[i] + shift))).toBeLessThan((5 * sd) / Math.sqrt(S));
    });
  });

  it('ratio: with no posterior spread the factor is exactly total / weighted sum', () => {
    const fixed = normalDraws(mu, [0, 0, 0, 0, 0], 2, 10, 1);
    const result = benchmarkDraws(fixed, index, w, 3.2, 'ratio', 0.9);
    const sum = mu.reduce((acc, m, j) => acc + w[j] * m, 0);
    expect(result.adjustment.mean).toBeCloseTo(3.2 / sum, 12);
    result.sites.forEach((site, i) => expect(site.estimate).toBeCloseTo((mu[i] * 3.2) / sum, 12));
  });
});
