/**
 * Posterior predictive checks of the unit and counts models (src/summaries/model-checks-unit.ts,
 * src/summaries/model-checks-counts.ts): the binomial distribution function and sampler against
 * exact integer arithmetic and a chi-square goodness-of-fit test, the per-site p-values against
 * closed forms, the wording per model kind, and the demo runs writing model_checks.csv.
 */
import { existsSync, mkdtempSync, readFileSync, rmSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { afterAll, describe, expect, it } from 'vitest';
import type { UnitData } from '../src/data/unit-data.js';
import { unitSampleMeanDraws } from '../src/models/unit-prepare.js';
import { modelChecksNote } from '../src/output/contents.js';
import { runFit } from '../src/pipeline/fit.js';
import { modelChecksWords, pppReading } from '../src/report/audit.js';
import { renderReport } from '../src/report/index.js';
import { createRng } from '../src/sampler/rng.js';
import { normal } from '../src/sampler/variates.js';
import { normalCdf } from '../src/summaries/exact.js';
import {
  binomialCdf,
  binomialMidP,
  binomialPmf,
  binomialVariate,
  checkCounts,
  countsModelChecks,
  logGamma,
  logitNormalMoments,
} from '../src/summaries/model-checks-counts.js';
import { unitModelChecks } from '../src/summaries/model-checks-unit.js';

const work = mkdtempSync(join(tmpdir(), 'shrinkwell-model-checks-'));
afterAll(() => rmSync(work, { recursive: true, force: true }));

// ---------------------------------------------------------------------------------------------
// Exact binomial arithmetic (BigInt), the reference for the floating-point functions.

/** P(X ≤ k), P(X = k) for X ~ Binomial(n, a/b), exactly, rounded to a double at the end. */
function exactBinomial(k: number, n: number, a: number, b: number): { cdf: number; pmf: number } {
  const A = BigInt(a);
  const B = BigInt(b - a);
  const den = BigInt(b) ** BigInt(n);
  let cdf = 0n;
  let pmf = 0n;
  let c = 1n; // C(n, j), updated as j grows
  for (let j = 0; j <= k; j++) {
    if (j > 0) c = (c * BigInt(n - j + 1)) / BigInt(j);
    pmf = c * A ** BigInt(j) * B ** BigInt(n - j);
    cdf += pmf;
  }
  // v/den to a double with relative precision: scale so the integer quotient has about 64 bits.
  const toNumber = (v: bigint) => {
    if (v === 0n) return 0;
    const shift = den.toString(2).length - v.toString(2).length + 64;
    const q = shift >= 0 ? (v << BigInt(shift)) / den : v / (den << BigInt(-shift));
    return Number(q) * 2 ** -Math.ceil(shift / 2) * 2 ** -Math.floor(shift / 2);
  };
  return { cdf: toNumber(cdf), pmf: toNumber(pmf) };
}

/** Upper 0.1% point of χ²_df by Wilson & Hilferty (1931, PNAS 17), z₀.₉₉₉ = 3.0902 (A&S 26.2.23 table, recalled). */
function chiSquare999(df: number): number {
  const c = 2 / (9 * df);
  return df * (1 - c + 3.0902 * Math.sqrt(c)) ** 3;
}

describe('binomial distribution function', () => {
  it('ln Γ: ln n! exactly for n ≤ 25, Γ(½) = √π (Abramowitz & Stegun 1964, 6.1.8)', () => {
    let logFactorial = 0;
    for (let n = 0; n <= 25; n++) {
      if (n > 0) logFactorial += Math.log(n);
      expect(Math.abs(logGamma(n + 1) - logFactorial)).toBeLessThan(1e-12 * Math.max(1, logFactorial));
    }
    expect(logGamma(0.5)).toBeCloseTo(0.5 * Math.log(Math.PI), 13);
    expect(logGamma(0.25)).toBeCloseTo(Math.log(3.6256099082219083), 12); // Γ(¼) (A&S 6.1 table, recalled)
  });

  it('P(X ≤ 2 | n = 10, p = ½) = (1 + 10 + 45)/1024 = 56/1024 (exact arithmetic; binomial tables give 0.0547)', () => {
    expect(binomialCdf(2, 10, 0.5)).toBeCloseTo(56 / 1024, 15);
    expect(binomialPmf(2, 10, 0.5)).toBeCloseTo(45 / 1024, 15);
  });

  it('CDF and PMF agree with exact integer sums, n up to 2000, both tails', () => {
    const cases: Array<[number, number, number]> = [[1, 2, 30], [3, 10, 25], [1, 50, 200], [7, 10, 120], [499, 1000, 2000], [3, 100, 1500]];
    for (const [a, b, n] of cases) {
      const p = a / b;
      const mean = n * p;
      const sd = Math.sqrt(n * p * (1 - p));
      const ks = [0, Math.floor(mean - 4 * sd), Math.floor(mean - sd), Math.floor(mean), Math.ceil(mean + sd), Math.ceil(mean + 4 * sd), n - 1]
        .filter((k) => k >= 0 && k < n);
      // The pmf is exp of a sum of log-gammas of size ≈ ln n!: its relative error is about
      // ln n! times the rounding unit (a few units each, hence the factor 50).
      const rel = 50 * Number.EPSILON * (logGamma(n + 1) + 1);
      for (const k of ks) {
        const exact = exactBinomial(k, n, a, b);
        const cdf = binomialCdf(k, n, p);
        // relative accuracy on the smaller tail: the lower tail itself, or 1 − F
        if (exact.cdf < 0.5) expect(Math.abs(cdf - exact.cdf)).toBeLessThanOrEqual(rel * exact.cdf + 1e-300);
        else expect(Math.abs(1 - cdf - (1 - exact.cdf))).toBeLessThanOrEqual(rel * (1 - exact.cdf) + 4 * Number.EPSILON);
        expect(Math.abs(binomialPmf(k, n, p) - exact.pmf)).toBeLessThanOrEqual(rel * exact.pmf + 1e-300);
      }
    }
  });

  it('mid-p = P(X > y) + ½P(X = y), against the exact sums', () => {
    for (const [y, n, a, b] of [[2, 10, 1, 2], [0, 20, 1, 10], [20, 20, 9, 10], [37, 120, 1, 4]]) {
      const exact = exactBinomial(y, n, a, b);
      expect(binomialMidP(y, n, a / b)).toBeCloseTo(1 - exact.cdf + 0.5 * exact.pmf, 13);
    }
  });
});

describe('binomial sampler', () => {
  /** Pearson's χ² of N variates against the exact pmf, cells pooled so each expects ≥ 5. */
  function goodnessOfFit(n: number, p: number, N: number, seed: number): { statistic: number; df: number } {
    const rng = createRng(seed, 3);
    const counts = new Float64Array(n + 1);
    for (let d = 0; d < N; d++) counts[binomialVariate(rng, n, p)]++;
    const cells: Array<[number, number]> = [];
    let observed = 0;
    let expected = 0;
    for (let k = 0; k <= n; k++) {
      observed += counts[k];
      expected += N * binomialPmf(k, n, p);
      if (expected >= 5 && N * (1 - binomialCdf(k, n, p)) >= 5) {
        cells.push([observed, expected]);
        observed = 0;
        expected = 0;
      }
    }
    cells.push([observed, expected]); // the upper tail
    const statistic = cells.reduce((s, [o, e]) => s + ((o - e) * (o - e)) / e, 0);
    return { statistic, df: cells.length - 1 };
  }

  // Each check fails by chance with probability 0.1% (χ² upper 0.1% point); seeds fixed.
  it.each([
    [10, 0.5, 1],
    [40, 0.03, 2],
    [60, 0.97, 3],
    [2500, 0.03, 4],
    [3000, 0.5, 5],
  ])('Binomial(%i, %f): Pearson χ² within the 0.1%% point', (n, p, seed) => {
    const { statistic, df } = goodnessOfFit(n, p, 40000, seed);
    expect(df).toBeGreaterThan(2);
    expect(statistic).toBeLessThan(chiSquare999(df));
  });

  it('p = 0 and p = 1 give 0 and n', () => {
    const rng = createRng(1, 1);
    expect(binomialVariate(rng, 12, 0)).toBe(0);
    expect(binomialVariate(rng, 12, 1)).toBe(12);
  });
});

describe('counts model checks', () => {
  const input = {
    siteIds: ['a', 'b', 'c'],
    cases: Float64Array.from([2, 9, 0]),
    trials: Float64Array.from([10, 40, 0]),
    direct: Float64Array.from([0.2, 9 / 40, NaN]),
    X: Float64Array.from([1, 1, 1]),
    p: 1,
  };

  it('with p fixed per site the mid-p value is the exact binomial sum; residual with σ_u = 0 is (y/n − p)/√(p(1 − p)/n)', () => {
    const S = 200;
    const shares = [0.5, 0.3];
    const checks = countsModelChecks(input, (i) => new Float64Array(S).fill(shares[i] ?? NaN), [new Float64Array(S).fill(0)], new Float64Array(S), [0.5, 0.3, 0.5], createRng(2, 1));
    const a = exactBinomial(2, 10, 1, 2);
    expect(checks.sites[0].ppp).toBeCloseTo(1 - a.cdf + 0.5 * a.pmf, 13);
    const b = exactBinomial(9, 40, 3, 10);
    expect(checks.sites[1].ppp).toBeCloseTo(1 - b.cdf + 0.5 * b.pmf, 13);
    expect(Number.isNaN(checks.sites[2].ppp)).toBe(true);
    // β = 0 → p̄ = ½ for every site
    expect(checks.sites[0].residual).toBeCloseTo((0.2 - 0.5) / Math.sqrt(0.25 / 10), 12);
    expect(checks.meanDirect).toBeCloseTo((0.2 + 9 / 40) / 2, 15);
    expect(checks.meanModel).toBeCloseTo(0.4, 15);
  });

  it('the overall p-value is 0 when every site is far off, and 1 when the shares sit on the data', () => {
    const S = 4000;
    const off = countsModelChecks(input, (i) => new Float64Array(S).fill([0.95, 0.9][i] ?? NaN), [new Float64Array(S)], new Float64Array(S), [0, 0, 0], createRng(2, 2));
    expect(off.overallPpp).toBe(0);
    expect(off.sites[0].extreme && off.sites[1].extreme).toBe(true);
    // At p = y/n the realized discrepancy is 0, so every replicate is ≥ it: p-value 1.
    const exact = countsModelChecks(input, (i) => new Float64Array(S).fill([0.2, 9 / 40][i] ?? NaN), [new Float64Array(S)], new Float64Array(S), [0, 0, 0], createRng(2, 3));
    expect(exact.overallPpp).toBe(1);
  });

  it('logit-normal moments: mean ½ at η = 0 by symmetry; against Monte Carlo elsewhere', () => {
    expect(logitNormalMoments(0, 1.7).mean).toBeCloseTo(0.5, 14);
    const rng = createRng(9, 1);
    const N = 200000;
    let m1 = 0;
    let m2 = 0;
    for (let d = 0; d < N; d++) {
      const v = 1 / (1 + Math.exp(-(-1.2 + 0.8 * normal(rng))));
      m1 += v;
      m2 += v * v;
    }
    const mean = m1 / N;
    const variance = m2 / N - mean * mean;
    const moments = logitNormalMoments(-1.2, 0.8);
    // Monte Carlo se of the mean: sd/√N
    expect(Math.abs(moments.mean - mean)).toBeLessThan(4 * Math.sqrt(variance / N));
    expect(Math.abs(moments.variance - variance) / variance).toBeLessThan(0.02); // se ≈ √(2/N)·(kurtosis factor) ≪ 2%
  });

  it('effective counts are rounded, trials at least 1, cases never above trials', () => {
    const { cases, trials } = checkCounts(Float64Array.from([2.4, 0.3, 0, 1.6]), Float64Array.from([2.6, 0.4, 0, 1.6]), Uint8Array.from([1, 1, 0, 1]));
    expect(Array.from(trials)).toEqual([3, 1, 0, 2]);
    expect(Array.from(cases)).toEqual([2, 0, 0, 2]);
  });
});

describe('unit model checks', () => {
  const input = {
    siteIds: ['a', 'b', 'c'],
    n: Float64Array.from([4, 9, 0]),
    ybar: Float64Array.from([1, 3, NaN]),
    xbar: Float64Array.from([1, 0.5, 1, -1, 1, 0]),
    p: 2,
  };

  it('with x̄β + u ~ N(m, s²) a posteriori the p-value is Φ((m − ȳ)/√(σ_e²/n + s²)) (normal convolution, closed form)', () => {
    const rng = createRng(6, 0);
    const S = 40000;
    const m = [1.6, 2.1];
    const s = [0.4, 0.8];
    const sigmaE = 1.5;
    const draws = m.map((mi, i) => Float64Array.from({ length: S }, () => mi + s[i] * normal(rng)));
    const beta = [new Float64Array(S).fill(2), new Float64Array(S).fill(1)];
    const checks = unitModelChecks(input, (i) => draws[i], beta, new Float64Array(S).fill(0.5), new Float64Array(S).fill(sigmaE), [1.6, 2.1, 2], createRng(6, 1));
    m.forEach((mi, i) => {
      const exact = normalCdf((mi - input.ybar[i]) / Math.sqrt(sigmaE ** 2 / input.n[i] + s[i] ** 2));
      // Monte Carlo se of an average of values in [0, 1] over S iid draws is at most 0.5/√S.
      expect(Math.abs(checks.sites[i].ppp - exact)).toBeLessThan((4 * 0.5) / Math.sqrt(S));
    });
    expect(Number.isNaN(checks.sites[2].ppp)).toBe(true);
    // (ȳ − x̄β̄)/√(σ̄_u² + σ̄_e²/n): site a, x̄β̄ = 2 + 0.5
    expect(checks.sites[0].residual).toBeCloseTo((1 - 2.5) / Math.sqrt(0.25 + 2.25 / 4), 12);
    expect(checks.sites[1].residual).toBeCloseTo((3 - 1) / Math.sqrt(0.25 + 2.25 / 9), 12);
  });

  it('far-off sample means are extreme and the overall p-value is 0', () => {
    const S = 4000;
    const draws = [new Float64Array(S).fill(10), new Float64Array(S).fill(-10)];
    const checks = unitModelChecks(input, (i) => draws[i], [new Float64Array(S), new Float64Array(S)], new Float64Array(S), new Float64Array(S).fill(1), [0, 0, 0], createRng(6, 2));
    expect(checks.sites[0].extreme && checks.sites[1].extreme).toBe(true);
    expect(checks.overallPpp).toBe(0);
  });

  const unitData = (finitePopulation: boolean): UnitData => ({
    m: 1, p: 2, siteIds: ['a'], labels: ['A'], coefficientNames: ['intercept', 'x'], responseName: 'y',
    n: Float64Array.of(4), units: 4, sampledSites: 1, xbar: Float64Array.of(1, 0.5), ybar: Float64Array.of(3),
    withinY: Float64Array.of(1), withinXX: new Float64Array(4), withinXY: new Float64Array(2), withinYY: 1,
    populationMeans: Float64Array.of(1, 2), populationSize: Float64Array.of(100), finitePopulation,
  });

  it('sample-mean draws: μ + (x̄ − X̄)ᵀβ for the population-mean target (exact algebra)', () => {
    const pooled = (q: string) => ({
      'coef:intercept': Float64Array.of(1, 2), 'coef:x': Float64Array.of(0.5, -1), site_sd: Float64Array.of(1, 1), unit_sd: Float64Array.of(1, 1),
      'site:a': Float64Array.of(1 + 0.5 * 2 + 0.3, 2 - 1 * 2 - 0.7), // X̄ᵀβ + u with u = 0.3, −0.7
    })[q]!;
    const draws = unitSampleMeanDraws(unitData(false), pooled, createRng(1, 1))(0);
    expect(draws[0]).toBeCloseTo(1 + 0.5 * 0.5 + 0.3, 14);
    expect(draws[1]).toBeCloseTo(2 - 1 * 0.5 - 0.7, 14);
  });

  it('sample-mean draws for the finite-population target follow u | β, σ, y ~ N(γ(ȳ − x̄β), γσ_e²/n)', () => {
    const S = 20000;
    const pooled = (q: string) => ({
      'coef:intercept': new Float64Array(S).fill(1), 'coef:x': new Float64Array(S).fill(2),
      site_sd: new Float64Array(S).fill(1), unit_sd: new Float64Array(S).fill(2), 'site:a': new Float64Array(S),
    })[q]!;
    const draws = unitSampleMeanDraws(unitData(true), pooled, createRng(4, 4))(0);
    // x̄β = 2, σ_e²/n = 1, γ = ½: mean 2 + ½(3 − 2) = 2.5, variance ½
    const mean = draws.reduce((a, v) => a + v, 0) / S;
    const variance = draws.reduce((a, v) => a + (v - mean) ** 2, 0) / (S - 1);
    expect(Math.abs(mean - 2.5)).toBeLessThan(4 * Math.sqrt(0.5 / S));
    expect(Math.abs(variance - 0.5)).toBeLessThan(4 * 0.5 * Math.sqrt(2 / (S - 1)));
  });
});

describe('wording per model kind', () => {
  it('the area wording stays as it was; counts speak of survey shares and binomial sampling', () => {
    expect(modelChecksNote('area', 0.05)).toBe(
      'Posterior predictive p-value of each direct estimate, P(y_rep ≥ y | data), and of the discrepancy ' +
        'Σ (y − θ)²/ψ overall (Gelman, Meng & Stern 1996); standardized residuals (y − xβ)/√(ψ + σ_u²). ' +
        'Sites whose p-value lies in the outer 5% are listed as extreme (about that share of sites is expected by chance).',
    );
    expect(modelChecksNote('counts', 0.05)).toContain('Binomial(n, p)');
    expect(modelChecksNote('unit', 0.05)).toContain('σ_e²/n');
    expect(modelChecksWords('area').direct).toBe('direct estimate');
    expect(modelChecksWords('counts').direct).toBe('survey share');
    expect(pppReading(0.01, 'counts').text).toContain('binomial sampling');
    expect(pppReading(0.5, 'area').text.startsWith('The spread of the direct estimates')).toBe(true);
  });
});

describe('the demo runs write model checks', () => {
  const demo = (kind: string) => join(import.meta.dirname, '..', 'data-demo', kind, 'config.yaml');
  it.each(['unit', 'counts'])('%s demo: model_checks.csv with a row per site and summary.json model_checks', async (kind) => {
    const outcome = await runFit({ configPath: demo(kind), outDir: join(work, kind), command: ['test'], threads: 2 });
    const path = join(outcome.runDir, 'model_checks.csv');
    expect(existsSync(path)).toBe(true);
    const [header, ...rows] = readFileSync(path, 'utf8').trim().split('\n');
    expect(header).toBe('site,ppp,std_residual,extreme');
    expect(rows.length).toBe(outcome.sites.length);
    const summary = JSON.parse(readFileSync(join(outcome.runDir, 'summary.json'), 'utf8'));
    expect(summary.model_checks.note).toBe(modelChecksNote(kind, 0.05));
    expect(summary.model_checks.overall_ppp).toBeGreaterThanOrEqual(0);
    expect(summary.model_checks.overall_ppp).toBeLessThanOrEqual(1);
    for (const row of rows) {
      const [, ppp, , extreme] = row.split(',');
      if (ppp === '') expect(extreme).toBe('');
      else expect(Number(ppp)).toBeGreaterThanOrEqual(0);
    }
    // The appendix names the survey figure of this kind.
    const { html } = await renderReport(outcome.runDir, { outDir: join(work, `${kind}-report`), pdf: false });
    const text = readFileSync(html, 'utf8').replace(/\s+/g, ' ');
    const words = modelChecksWords(kind);
    expect(text).toContain(`Each ${words.direct} is set against its posterior predictive distribution`);
    expect(text).toContain(`Sites whose ${words.direct} is extreme under the model`);
    if (kind === 'counts') expect(text).not.toContain('Sites whose direct estimate is extreme');
  }, 120_000);
});
