/**
 * Site comparisons (src/summaries/compare.ts) against independent answers: closed forms for
 * normal posteriors, exact identities of ranks, exact integration for the eight-schools
 * posterior, hand-worked tie cases, and simulation for exchangeable sites.
 *
 * Tolerances: every probability estimated from n independent draws has Monte Carlo sd
 * √(p(1 − p)/n); a check passes within Z = 4.4172 of those sds (two-sided false-alarm rate 1e-5
 * per check). Goodness-of-fit checks reject at P < 1e-5. Seeds are fixed.
 */
import { readFileSync } from 'node:fs';
import { describe, expect, it } from 'vitest';
import { createRng, type Rng } from '../src/sampler/rng.js';
import { normal } from '../src/sampler/variates.js';
import {
  compareSites,
  pairwiseMatrix,
  probabilityAbove,
  probabilityGreater,
  probabilityMcse,
  rankDraws,
  summarizeRanks,
  type DrawArray,
} from '../src/summaries/compare.js';
import { Z_TWO_SIDED_1E5, chiSquarePValue, normalCdf } from './support/reference-distributions.js';

const Z = Z_TWO_SIDED_1E5;
const binomialSd = (p: number, n: number) => Math.sqrt((p * (1 - p)) / n);

function normalDraws(rng: Rng, n: number, mean: number, sd: number, type: 'f32' | 'f64' = 'f64'): DrawArray {
  const out = type === 'f32' ? new Float32Array(n) : new Float64Array(n);
  for (let i = 0; i < n; i++) out[i] = mean + sd * normal(rng);
  return out;
}

describe('P(θ_a > θ_b) and P(θ > target) against closed forms', () => {
  // Closed form (common practice): for independent normals θ_a − θ_b ~ N(μ_a − μ_b, σ_a² + σ_b²),
  // so P(θ_a > θ_b) = Φ((μ_a − μ_b)/√(σ_a² + σ_b²)); with correlation ρ the variance is
  // σ_a² + σ_b² − 2ρσ_aσ_b.
  const n = 100_000;
  const cases: Array<[number, number, number, number]> = [
    [1, 1, 0, 1],
    [0.2, 0.5, 0, 2],
    [-1, 0.3, 0.5, 0.4],
    [3, 2, 3, 0.5],
  ];
  for (const [ma, sa, mb, sb] of cases) {
    it(`independent N(${ma}, ${sa}²) vs N(${mb}, ${sb}²)`, () => {
      const rng = createRng(101, Math.round(100 * (ma + sa + mb + sb)));
      const a = normalDraws(rng, n, ma, sa);
      const b = normalDraws(rng, n, mb, sb);
      const exact = normalCdf((ma - mb) / Math.hypot(sa, sb));
      const p = probabilityGreater(a, b);
      expect(Math.abs(p - exact)).toBeLessThanOrEqual(Z * binomialSd(exact, n) + 1e-12);
      expect(probabilityGreater(b, a)).toBeCloseTo(1 - p, 12);
    });
  }

  it('correlated bivariate normal: the joint draws are used, not the margins', () => {
    const rng = createRng(102, 0);
    const [ma, sa, mb, sb, rho] = [0.3, 1, 0, 1.2, 0.9];
    const a = new Float64Array(n);
    const b = new Float64Array(n);
    for (let i = 0; i < n; i++) {
      const z1 = normal(rng);
      const z2 = normal(rng);
      a[i] = ma + sa * z1;
      b[i] = mb + sb * (rho * z1 + Math.sqrt(1 - rho * rho) * z2);
    }
    const exact = normalCdf((ma - mb) / Math.sqrt(sa * sa + sb * sb - 2 * rho * sa * sb));
    const independent = normalCdf((ma - mb) / Math.hypot(sa, sb));
    const p = probabilityGreater(a, b);
    expect(Math.abs(p - exact)).toBeLessThanOrEqual(Z * binomialSd(exact, n));
    expect(Math.abs(p - independent)).toBeGreaterThan(10 * binomialSd(independent, n)); // the two answers differ clearly
  });

  it('P(θ > target) matches 1 − Φ((t − μ)/σ)', () => {
    const rng = createRng(103, 0);
    const x = normalDraws(rng, n, 2.5, 0.4, 'f32');
    for (const t of [1.5, 2.3, 2.5, 2.9, 3.6]) {
      const exact = 1 - normalCdf((t - 2.5) / 0.4);
      expect(Math.abs(probabilityAbove(x, t) - exact)).toBeLessThanOrEqual(Z * binomialSd(exact, n) + 1e-12);
    }
  });

  it('two sites: P(rank 1) equals P(θ_a > θ_b) (closed form again)', () => {
    const rng = createRng(104, 0);
    const a = normalDraws(rng, 50_000, 0.4, 1, 'f32');
    const b = normalDraws(rng, 50_000, 0, 0.8, 'f32');
    const result = compareSites({ sites: [a, b], chains: 4, drawsPerChain: 12_500 }, { level: 0.9, top: 1, target: null, pairs: 'all' });
    const exact = normalCdf(0.4 / Math.hypot(1, 0.8));
    expect(Math.abs(result.ranks.pTop[0] - exact)).toBeLessThanOrEqual(Z * binomialSd(exact, 50_000));
    expect(result.ranks.pTop[0]).toBeCloseTo(result.matrix![1], 12); // same draws, same count
    expect(result.ranks.pTop[0] + result.ranks.pTop[1]).toBeCloseTo(1, 12);
  });
});

describe('ranks: exact cases and identities', () => {
  it('well-separated sites rank the same in every draw (both rank routes, both directions)', () => {
    const rng = createRng(201, 0);
    const means = [20, 0, 50, 10, 40, 30];
    for (const type of ['f32', 'f64'] as const) {
      const sites = means.map((mu) => normalDraws(rng, 3000, mu, 0.1, type));
      const expectedRank = means.map((mu) => 1 + means.filter((other) => other > mu).length);
      for (const lowerIsBetter of [false, true]) {
        const r = compareSites({ sites, chains: 3, drawsPerChain: 1000 }, { level: 0.95, top: 2, target: 25, pairs: 'all', lowerIsBetter });
        means.forEach((mu, s) => {
          const rank = lowerIsBetter ? 7 - expectedRank[s] : expectedRank[s];
          expect([r.ranks.median[s], r.ranks.lower[s], r.ranks.upper[s], r.ranks.mean[s]]).toEqual([rank, rank, rank, rank]);
          expect(r.ranks.pTop[s]).toBe(rank <= 2 ? 1 : 0);
          expect(r.ranks.pBottom[s]).toBe(rank >= 5 ? 1 : 0);
          expect(r.pAbove![s]).toBe(mu > 25 ? 1 : 0);
          expect(Number.isNaN(r.mcseAbove![s])).toBe(true); // constant indicator: no MCSE
          means.forEach((other, t) => {
            if (t !== s) expect(r.matrix![s * 6 + t]).toBe(mu > other ? 1 : 0);
          });
        });
      }
    }
  });

  it('sums: Σ P(top k) = Σ P(bottom k) = k, Σ mean rank = m(m+1)/2, and E rank_a = 1 + Σ_b P(θ_b > θ_a)', () => {
    // Exact identities for continuous draws (no ties): each draw's ranks are a permutation of
    // 1..m, and rank_a = 1 + #{b : θ_b > θ_a} (common practice).
    const rng = createRng(202, 0);
    const m = 23;
    const sites = Array.from({ length: m }, (_, s) => normalDraws(rng, 2000, 0.1 * s, 1 + 0.05 * s, s % 2 ? 'f32' : 'f64'));
    for (const lowerIsBetter of [false, true]) {
      const r = compareSites({ sites, chains: 2, drawsPerChain: 1000 }, { level: 0.8, top: 4, target: null, pairs: 'all', lowerIsBetter, mcse: false });
      const sum = (x: Float64Array) => x.reduce((a, b) => a + b, 0);
      expect(sum(r.ranks.pTop)).toBeCloseTo(4, 10);
      expect(sum(r.ranks.pBottom)).toBeCloseTo(4, 10);
      expect(sum(r.ranks.mean)).toBeCloseTo((m * (m + 1)) / 2, 8);
      for (let a = 0; a < m; a++) {
        let behind = 0;
        for (let b = 0; b < m; b++) if (b !== a) behind += lowerIsBetter ? r.matrix![a * m + b] : r.matrix![b * m + a];
        expect(r.ranks.mean[a]).toBeCloseTo(1 + behind, 10);
        expect(r.ranks.lower[a]).toBeLessThanOrEqual(r.ranks.median[a]);
        expect(r.ranks.median[a]).toBeLessThanOrEqual(r.ranks.upper[a]);
      }
    }
  });

  it('ties share their average rank and count one half (hand-worked example)', () => {
    // Draws (columns) of three sites:   d0 d1 d2 d3
    //   s0: 1 2 3 3     ranks, highest first: 1.5 1.5 2 2
    //   s1: 1 1 3 0                           1.5 3   2 3
    //   s2: 0 2 3 5                           3   1.5 2 1
    const values = [[1, 2, 3, 3], [1, 1, 3, 0], [0, 2, 3, 5]];
    for (const make of [(v: number[]): DrawArray => Float64Array.from(v), (v: number[]): DrawArray => Float32Array.from(v)]) {
      const sites = values.map(make);
      const ranks = rankDraws(sites);
      expect(Array.from(ranks.doubled)).toEqual([3, 3, 4, 4, 3, 6, 4, 6, 6, 3, 4, 2]);
      const s = summarizeRanks(ranks, { level: 0.5, top: 1 });
      expect(Array.from(s.mean)).toEqual([1.75, 2.375, 1.875]);
      // Type-1 quantiles of 4 draws: 25% → 1st, 50% → 2nd, 75% → 3rd smallest.
      expect(Array.from(s.lower)).toEqual([1.5, 1.5, 1]);
      expect(Array.from(s.median)).toEqual([1.5, 2, 1.5]);
      expect(Array.from(s.upper)).toEqual([2, 3, 2]);
      expect(Array.from(s.pTop)).toEqual([0, 0, 0.25]); // a tie at the top is rank 1.5: not "top 1"
      expect(probabilityGreater(sites[0], sites[1])).toBe(0.75);
      expect(probabilityAbove(sites[0], 3)).toBe(0.25);
      expect(Array.from(pairwiseMatrix(sites))).toEqual([0.5, 0.75, 0.5, 0.25, 0.5, 0.375, 0.5, 0.625, 0.5]);
    }
  });

  it('−0 and +0 tie, as they compare equal', () => {
    for (const make of [(v: number[]): DrawArray => Float64Array.from(v), (v: number[]): DrawArray => Float32Array.from(v)]) {
      const ranks = rankDraws([make([-0]), make([0]), make([-1])]);
      expect(Array.from(ranks.doubled)).toEqual([3, 3, 6]);
    }
  });

  it('the packed float32 route and the search route agree, ties included', () => {
    const rng = createRng(203, 0);
    const m = 37;
    const n = 1000; // several blocks of draws
    const f64: Float64Array[] = [];
    for (let s = 0; s < m; s++) {
      const x = new Float64Array(n);
      for (let i = 0; i < n; i++) x[i] = Math.round(4 * normal(rng)) / 2 - (s % 3) * 0.25; // many ties, negatives, zeros
      f64.push(x);
    }
    const f32 = f64.map((x) => Float32Array.from(x));
    for (const lowerIsBetter of [false, true]) {
      expect(Array.from(rankDraws(f32, { lowerIsBetter }).doubled)).toEqual(Array.from(rankDraws(f64, { lowerIsBetter }).doubled));
    }
  });

  it('more than 32 766 sites use 32-bit rank storage and still give permutations', () => {
    const m = 33_000;
    // Distinct values (7919 is prime, so s ↦ 7919·s mod m is a permutation): ranks known exactly.
    const sites = Array.from({ length: m }, (_, s) => Float32Array.from([(7919 * s) % m, -s]));
    const ranks = rankDraws(sites);
    expect(ranks.doubled).toBeInstanceOf(Uint32Array);
    for (let s = 0; s < m; s++) {
      expect(ranks.doubled[s * 2]).toBe(2 * (m - ((7919 * s) % m)));
      expect(ranks.doubled[s * 2 + 1]).toBe(2 * (s + 1));
    }
  });
});

describe('exchangeable sites (simulation)', () => {
  it('each site\'s rank is uniform on 1..m, P(a > b) = ½ and P(top k) = k/m', () => {
    // For iid sites every ordering is equally likely (common practice), so each rank has
    // probability 1/m. Chi-square test per site, 7 df, reject at P < 1e-5.
    const m = 8;
    const n = 24_000;
    const rng = createRng(301, 0);
    const sites = Array.from({ length: m }, () => normalDraws(rng, n, 1, 2, 'f32'));
    const ranks = rankDraws(sites);
    for (let s = 0; s < m; s++) {
      const counts = new Array<number>(m + 1).fill(0);
      for (let i = 0; i < n; i++) counts[ranks.doubled[s * n + i] / 2]++;
      const expected = n / m;
      const chi2 = counts.slice(1).reduce((acc, c) => acc + (c - expected) ** 2 / expected, 0);
      expect(chiSquarePValue(chi2, m - 1)).toBeGreaterThan(1e-5);
    }
    const r = compareSites({ sites, chains: 4, drawsPerChain: n / 4 }, { level: 0.95, top: 2, target: null, pairs: 'all', mcse: false });
    for (let s = 0; s < m; s++) {
      expect(Math.abs(r.ranks.pTop[s] - 2 / m)).toBeLessThanOrEqual(Z * binomialSd(2 / m, n));
      // With 3000 draws per rank value, the 2.5% and 97.5% type-1 quantiles are ranks 1 and 8.
      expect([r.ranks.lower[s], r.ranks.upper[s]]).toEqual([1, 8]);
      for (let t = s + 1; t < m; t++) expect(Math.abs(r.matrix![s * m + t] - 0.5)).toBeLessThanOrEqual(Z * binomialSd(0.5, n));
    }
  });
});

describe('Monte Carlo standard errors (simulation)', () => {
  // The reported MCSE must match the actual sd of p̂ over independent replications. With R
  // replications the sample sd has relative sd ≈ 1/√(2(R − 1)) (normal theory, common practice);
  // the check allows Z of those. For independent draws the MCSE must also agree with the binomial
  // closed form √(p(1 − p)/n) to the same resolution.
  const chains = 4;
  const per = 2500;
  const n = chains * per;
  const replications = 300;
  const threshold = 0.3;
  const pTrue = 1 - normalCdf(threshold); // stationary N(0, 1) chains
  for (const rho of [0, 0.8]) {
    it(`AR(1) chains with ρ = ${rho}: reported MCSE vs the spread of p̂ over ${replications} replications`, () => {
      const rng = createRng(401, Math.round(10 * rho));
      const estimates: number[] = [];
      const reported: number[] = [];
      const x = new Float64Array(n);
      for (let rep = 0; rep < replications; rep++) {
        for (let c = 0; c < chains; c++) {
          let state = normal(rng);
          for (let i = 0; i < per; i++) {
            state = rho * state + Math.sqrt(1 - rho * rho) * normal(rng);
            x[c * per + i] = state > threshold ? 1 : 0;
          }
        }
        estimates.push(x.reduce((a, b) => a + b, 0) / n);
        reported.push(probabilityMcse(x, chains, per));
      }
      const meanOf = (v: number[]) => v.reduce((a, b) => a + b, 0) / v.length;
      const sdOf = (v: number[]) => Math.sqrt(v.reduce((a, b) => a + (b - meanOf(v)) ** 2, 0) / (v.length - 1));
      const meanReported = meanOf(reported);
      expect(Math.abs(meanReported / sdOf(estimates) - 1)).toBeLessThan(Z / Math.sqrt(2 * (replications - 1)));
      if (rho === 0) {
        // The exact sd of p̂ is then binomial; the reported MCSE must be as close to it as the
        // replication experiment can resolve (same relative tolerance as above).
        expect(Math.abs(meanReported / binomialSd(pTrue, n) - 1)).toBeLessThan(Z / Math.sqrt(2 * (replications - 1)));
      } else {
        expect(meanReported).toBeGreaterThan(1.5 * binomialSd(pTrue, n)); // autocorrelation is not ignored
      }
    });
  }
});

describe('eight schools: posterior comparisons against exact integration', () => {
  // Data: Rubin (1981), Table 1, as integer-rounded in Gelman et al. (2013), BDA3 §5.5, Table 5.2
  // (checks/eight_schools_data.csv). Model: y_j ~ N(θ_j, σ_j²), θ_j ~ N(μ, τ²), p(μ, τ) ∝ 1.
  // Given τ (BDA3 eqs. 5.17–5.21): p(τ | y) ∝ V_μ^{1/2} Π (σ_j² + τ²)^{−1/2} exp(−(y_j − μ̂)²/(2(σ_j² + τ²))),
  // μ | τ, y ~ N(μ̂, V_μ), θ_j | μ, τ, y ~ N(B_j μ + (1 − B_j) y_j, V_j), B_j = σ_j²/(σ_j² + τ²),
  // V_j = σ_j² τ²/(σ_j² + τ²). Reference values integrate these conditionals numerically
  // (midpoint rule; refining every step 2–4× changed them by < 5e-5 when checked, far below the
  // Monte Carlo error of about 2e-3);
  // the draws come from the same conditionals by direct simulation.
  const text = readFileSync(new URL('../../shared/checks/eight_schools_data.csv', import.meta.url), 'utf8');
  const rows = text.trim().split('\n').slice(1).map((line) => line.split(','));
  const y = rows.map((r) => Number(r[1]));
  const sigma = rows.map((r) => Number(r[2]));
  const J = y.length;

  function given(tau: number) {
    let precision = 0;
    let weighted = 0;
    for (let j = 0; j < J; j++) {
      const w = 1 / (sigma[j] ** 2 + tau * tau);
      precision += w;
      weighted += w * y[j];
    }
    const muHat = weighted / precision;
    const vMu = 1 / precision;
    let logDensity = 0.5 * Math.log(vMu);
    for (let j = 0; j < J; j++) {
      const v = sigma[j] ** 2 + tau * tau;
      logDensity += -0.5 * Math.log(v) - (y[j] - muHat) ** 2 / (2 * v);
    }
    const B = sigma.map((s) => (s * s) / (s * s + tau * tau));
    const V = sigma.map((s) => (s * s * tau * tau) / (s * s + tau * tau));
    return { muHat, vMu, logDensity, B, V };
  }

  // τ grid: midpoints on (0, 100]; p(τ | y) decays like τ^{−7}, so the mass beyond is negligible.
  const h = 0.05;
  const taus: number[] = [];
  for (let t = h / 2; t < 100; t += h) taus.push(t);
  const logs = taus.map((t) => given(t).logDensity);
  const top = Math.max(...logs);
  const weights = logs.map((l) => Math.exp(l - top));
  const total = weights.reduce((a, b) => a + b, 0);

  function exactAGreaterC(): number {
    let sum = 0;
    taus.forEach((tau, k) => {
      const g = given(tau);
      const mean = (g.B[0] - g.B[2]) * g.muHat + (1 - g.B[0]) * y[0] - (1 - g.B[2]) * y[2];
      const variance = (g.B[0] - g.B[2]) ** 2 * g.vMu + g.V[0] + g.V[2];
      sum += weights[k] * normalCdf(mean / Math.sqrt(variance));
    });
    return sum / total;
  }

  /** P(θ_A is the largest): given μ and τ the θ's are independent, so P = ∫ φ_A(t) Π_{j≠A} Φ_j(t) dt. */
  function exactABest(): number {
    const tauStep = 8; // every 8th grid point (h = 0.4) suffices for this smooth integrand
    let sum = 0;
    let weightSum = 0;
    for (let k = 0; k < taus.length; k += tauStep) {
      const g = given(taus[k] + (tauStep - 1) * h / 2);
      const w = Math.exp(g.logDensity - top);
      weightSum += w;
      const sdMu = Math.sqrt(g.vMu);
      const sd = g.V.map(Math.sqrt);
      const nMu = 32;
      const nT = 40;
      let overMu = 0;
      for (let a = 0; a < nMu; a++) {
        const zMu = -6 + (12 * (a + 0.5)) / nMu;
        const mu = g.muHat + sdMu * zMu;
        const centre = g.B.map((b, j) => b * mu + (1 - b) * y[j]);
        let overT = 0;
        for (let b = 0; b < nT; b++) {
          const u = -6 + (12 * (b + 0.5)) / nT;
          const t = centre[0] + sd[0] * u;
          let product = Math.exp(-0.5 * u * u) / Math.sqrt(2 * Math.PI) * (12 / nT);
          for (let j = 1; j < J; j++) product *= normalCdf((t - centre[j]) / sd[j]);
          overT += product;
        }
        overMu += (Math.exp(-0.5 * zMu * zMu) / Math.sqrt(2 * Math.PI)) * (12 / nMu) * overT;
      }
      sum += w * overMu;
    }
    return sum / weightSum;
  }

  function posteriorDraws(n: number, chains: number): Float32Array[] {
    const cumulative = new Float64Array(taus.length);
    let acc = 0;
    weights.forEach((w, k) => (cumulative[k] = acc += w / total));
    const rng = createRng(501, 0);
    const theta = Array.from({ length: J }, () => new Float32Array(n));
    for (let i = 0; i < n; i++) {
      const u = rng.uniform();
      let lo = 0;
      let hi = taus.length - 1;
      while (lo < hi) {
        const mid = (lo + hi) >>> 1;
        if (cumulative[mid] < u) lo = mid + 1;
        else hi = mid;
      }
      const tau = taus[lo] - h / 2 + h * rng.uniform(); // uniform within the grid cell
      const g = given(tau);
      const mu = g.muHat + Math.sqrt(g.vMu) * normal(rng);
      for (let j = 0; j < J; j++) theta[j][i] = g.B[j] * mu + (1 - g.B[j]) * y[j] + Math.sqrt(g.V[j]) * normal(rng);
    }
    void chains;
    return theta;
  }

  it('P(θ_A > θ_C) and P(school A ranks first) match the integrals', () => {
    const n = 40_000;
    const chains = 4;
    const theta = posteriorDraws(n, chains);
    // The draws themselves: posterior mean of θ_A against checks/eight_schools_posterior_exact.csv
    // (bda_rounded, theta_A: mean 11.4, sd 8.341; exact quadrature, see checks/SOURCES.md).
    const meanA = theta[0].reduce((a, b) => a + b, 0) / n;
    expect(Math.abs(meanA - 11.4)).toBeLessThan(Z * (8.341 / Math.sqrt(n)) + 0.001);

    const result = compareSites({ sites: theta, chains, drawsPerChain: n / chains }, { level: 0.95, top: 1, target: 0, pairs: [[0, 2]] });
    const pAC = exactAGreaterC();
    const pBest = exactABest();
    expect(Math.abs(result.pairs[0].p - pAC)).toBeLessThanOrEqual(Z * binomialSd(pAC, n));
    expect(Math.abs(result.ranks.pTop[0] - pBest)).toBeLessThanOrEqual(Z * binomialSd(pBest, n));
  });
});

describe('argument checks (numerics)', () => {
  it('rejects NaN draws, unequal lengths and a bad k', () => {
    const ok = Float64Array.from([1, 2]);
    const opts = { level: 0.95, top: 1, target: null, pairs: 'none' as const };
    expect(() => compareSites({ sites: [ok, Float64Array.from([1, NaN])], chains: 1, drawsPerChain: 2 }, opts)).toThrow(/NaN/);
    expect(() => compareSites({ sites: [ok, Float64Array.from([1])], chains: 1, drawsPerChain: 2 }, opts)).toThrow(/expected 2/);
    expect(() => compareSites({ sites: [ok, ok], chains: 1, drawsPerChain: 2 }, { ...opts, top: 3 })).toThrow(/top/);
    expect(() => compareSites({ sites: [ok, ok], chains: 1, drawsPerChain: 2 }, { ...opts, pairs: [[0, 2]] })).toThrow(/out of range/);
  });
});
