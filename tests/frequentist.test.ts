/**
 * The frequentist cross-check (EBLUP with REML / ML / Prasad–Rao variance, Prasad–Rao MSE)
 * against published random-effects examples, closed forms, independent dense-matrix brute force,
 * simulation, and the exact posterior as the number of sites grows.
 *
 * Published values come from /work/shared/checks (provenance in its SOURCES.md): values marked
 * [V] there were read in a located copy, [C] were computed there from verified data, [M] are
 * recalled. The formulas under test are FORMULAS.md §2, itself recalled ([M]).
 */
import { readFileSync } from 'node:fs';
import { describe, expect, it } from 'vitest';
import type { AreaData } from '../src/data/types.js';
import { UserError } from '../src/errors.js';
import { frequentistCsv, frequentistJson } from '../src/output/frequentist.js';
import { createRng } from '../src/sampler/rng.js';
import { normal } from '../src/sampler/variates.js';
import { exactAreaPosterior } from '../src/summaries/exact.js';
import {
  areaEblup,
  areaLogLikelihood,
  areaMseParts,
  compareWithPosterior,
  prasadRaoVariance,
  type FrequentistFit,
} from '../src/summaries/frequentist.js';
import { areaData, type SiteRow } from './support/area-fit.js';

// ---------------------------------------------------------------------------------------------
// Check files

const checks = new URL('../../shared/checks/', import.meta.url);
/** Rows of a check CSV as string arrays (the first two columns never hold quoted commas). */
function readRows(name: string): string[][] {
  return readFileSync(new URL(name, checks), 'utf8').trim().split('\n').slice(1).map((l) => l.split(','));
}
function quantityValues(name: string): Map<string, number> {
  return new Map(readRows(name).map((r) => [r[0], Number(r[1])]));
}

// ---------------------------------------------------------------------------------------------
// Independent dense linear algebra (Gauss–Jordan with partial pivoting), used only here so the
// brute-force references share no code with src/models/linalg.ts.

type Matrix = number[][];

function matMul(a: Matrix, b: Matrix): Matrix {
  return a.map((row) => b[0].map((_, j) => row.reduce((s, v, k) => s + v * b[k][j], 0)));
}
function transpose(a: Matrix): Matrix {
  return a[0].map((_, j) => a.map((row) => row[j]));
}
/** Inverse and log |det| of a square matrix. */
function inverseLogDet(a: Matrix): { inverse: Matrix; logDet: number } {
  const n = a.length;
  const w = a.map((row, i) => [...row, ...row.map((_, j) => (i === j ? 1 : 0))]);
  let logDet = 0;
  for (let c = 0; c < n; c++) {
    let pivot = c;
    for (let r = c + 1; r < n; r++) if (Math.abs(w[r][c]) > Math.abs(w[pivot][c])) pivot = r;
    [w[c], w[pivot]] = [w[pivot], w[c]];
    const d = w[c][c];
    logDet += Math.log(Math.abs(d));
    for (let j = 0; j < 2 * n; j++) w[c][j] /= d;
    for (let r = 0; r < n; r++) {
      if (r === c) continue;
      const f = w[r][c];
      for (let j = 0; j < 2 * n; j++) w[r][j] -= f * w[c][j];
    }
  }
  return { inverse: w.map((row) => row.slice(n)), logDet };
}

/** The sites with data of an AreaData as dense matrices. */
function denseProblem(data: AreaData): { X: Matrix; y: number[]; D: number[] } {
  const X: Matrix = [];
  const y: number[] = [];
  const D: number[] = [];
  for (let i = 0; i < data.m; i++) {
    if (!data.hasData[i]) continue;
    X.push(Array.from(data.X.subarray(i * data.p, (i + 1) * data.p)));
    y.push(data.direct[i]);
    D.push(data.variance[i]);
  }
  return { X, y, D };
}

/**
 * Restricted (REML) or ordinary (ML) log-likelihood written directly from the textbook
 * definitions with n × n matrices (Harville 1977, JASA 72, 320–338 — recalled):
 *   ℓ_R = −½[(n − p) log 2π + log|V| + log|XᵀV⁻¹X| + yᵀΠy],  ℓ = −½[n log 2π + log|V| + yᵀΠy],
 *   Π = V⁻¹ − V⁻¹X(XᵀV⁻¹X)⁻¹XᵀV⁻¹ (yᵀΠy = the GLS residual sum of squares).
 */
function denseLogLikelihood(data: AreaData, A: number, method: 'REML' | 'ML'): number {
  const { X, y, D } = denseProblem(data);
  const n = y.length;
  const p = X[0].length;
  const V: Matrix = D.map((d, i) => D.map((_, j) => (i === j ? A + d : 0)));
  const { inverse: Vi, logDet: logDetV } = inverseLogDet(V);
  const XtVi = matMul(transpose(X), Vi);
  const { inverse: F, logDet: logDetF } = inverseLogDet(matMul(XtVi, X));
  const Pi = matMul(matMul(transpose(XtVi), F), XtVi).map((row, i) => row.map((v, j) => Vi[i][j] - v));
  const quad = y.reduce((s, yi, i) => s + yi * Pi[i].reduce((t, v, j) => t + v * y[j], 0), 0);
  const c = Math.log(2 * Math.PI);
  return method === 'ML' ? -0.5 * (n * c + logDetV + quad) : -0.5 * ((n - p) * c + logDetV + logDetF + quad);
}

/** Brute-force maximiser of the dense criterion over [0, upper]: a grid, then a finer grid around the best point. */
function gridMaximum(f: (A: number) => number, upper: number, points = 4001): { A: number; step: number } {
  let lo = 0;
  let hi = upper;
  let best = 0;
  let step = 0;
  for (let round = 0; round < 2; round++) {
    step = (hi - lo) / (points - 1);
    let bestValue = -Infinity;
    for (let k = 0; k < points; k++) {
      const A = lo + k * step;
      const v = f(A);
      if (v > bestValue) [best, bestValue] = [A, v];
    }
    [lo, hi] = [Math.max(0, best - step), best + step];
  }
  return { A: best, step };
}

// ---------------------------------------------------------------------------------------------
// Data

/** Dyestuff (Davies 1947; Box & Tiao 1973 §5.1.2): six batches × five preparations [V]. */
function dyestuff() {
  const byBatch = new Map<string, number[]>();
  for (const [batch, , value] of readRows('dyestuff_data.csv')) {
    if (!byBatch.has(batch)) byBatch.set(batch, []);
    byBatch.get(batch)!.push(Number(value));
  }
  const batches = [...byBatch.keys()];
  const a = batches.length;
  const b = byBatch.get(batches[0])!.length;
  const means = batches.map((k) => byBatch.get(k)!.reduce((s, v) => s + v, 0) / b);
  const grand = means.reduce((s, v) => s + v, 0) / a;
  const ssb = b * means.reduce((s, v) => s + (v - grand) ** 2, 0);
  const ssw = batches.reduce((s, k, i) => s + byBatch.get(k)!.reduce((t, v) => t + (v - means[i]) ** 2, 0), 0);
  return { batches, a, b, means, grand, msb: ssb / (a - 1), msw: ssw / (a * (b - 1)), ssw };
}

/** Eight schools (Rubin 1981 Table 1; BDA3 §5.5): both versions of the data [V]. */
function eightSchools(version: 'bda_rounded' | 'rubin1981_unrounded'): AreaData {
  return areaData(
    readRows('eight_schools_data.csv').map(([id, y, s, yu, su]) => {
      const [est, se] = version === 'bda_rounded' ? [y, s] : [yu, su];
      return { id, x: [], y: Number(est), psi: Number(se) ** 2 };
    }),
  );
}

/** Area-model data simulated from fixed (β, A) with the project's seeded generator. */
function simulatedArea(
  seed: number,
  m: number,
  A: number,
  options: { unsampled?: number; spread?: 'cycle' | 'uniform' } = {},
): { data: AreaData; theta: number[] } {
  const rng = createRng(seed, 0);
  const rows: SiteRow[] = [];
  const theta: number[] = [];
  for (let i = 0; i < m; i++) {
    const x1 = -1 + (2 * i) / (m - 1);
    const x2 = normal(rng);
    const D = options.spread === 'uniform' ? 0.5 + 1.5 * rng.uniform() : 0.5 + (i % 4) * 0.5;
    const t = 1 + 0.5 * x1 - 0.3 * x2 + Math.sqrt(A) * normal(rng);
    theta.push(t);
    const sampled = i >= (options.unsampled ?? 0);
    rows.push(sampled ? { id: `s${i}`, x: [x1, x2], y: t + Math.sqrt(D) * normal(rng), psi: D } : { id: `s${i}`, x: [x1, x2] });
  }
  return { data: areaData(rows, ['x1', 'x2']), theta };
}

// ---------------------------------------------------------------------------------------------

describe('dyestuff: balanced one-way layout as an area model (Davies 1947; Box & Tiao 1973)', () => {
  // Balanced data, a batches of b: with y_i = batch mean and D = σ_e²/b every site has the same
  // variance A + D, so with S = Σ(ȳ_i − ȳ)² = SSB/b the criteria are, up to constants,
  //   ℓ_R(A) = −½[(a − 1) log(A + D) + S/(A + D)]  →  Â + D = S/(a − 1) = MSB/b,
  //   ℓ(A)   = −½[a log(A + D) + S/(A + D)]        →  Â + D = S/a = (a − 1)MSB/(a b).
  // With σ_e² fixed at MSW: Â_REML = (MSB − MSW)/b and Â_ML = ((a − 1)/a · MSB − MSW)/b. These
  // are also the full-data REML and ML estimates of σ_b², because in a balanced one-way layout
  // both give σ̂_e² = MSW when σ̂_b² > 0 (Searle, Casella & McCulloch 1992, Variance Components,
  // §3.7 and §4.7 — recalled), so here the area-level ML does reproduce the published ML value.
  const d = dyestuff();
  const published = quantityValues('dyestuff_estimates.csv');
  const data = areaData(d.batches.map((id, i) => ({ id, x: [], y: d.means[i], psi: d.msw / d.b })));
  const reml = areaEblup(data, 'REML');
  const ml = areaEblup(data, 'ML');

  it('reads the ANOVA mean squares of dyestuff_estimates.csv [C] from the data', () => {
    expect(d.msb).toBeCloseTo(published.get('MS_between_5df')!, 6);
    expect(d.msw).toBeCloseTo(published.get('MS_within_24df')!, 6);
  });

  it('REML of A equals (MSB − MSW)/b = 1764.05 (closed form; lme4 1764 recalled)', () => {
    expect(reml.converged).toBe(true);
    expect(reml.atBoundary).toBe(false);
    expect(reml.siteVariance).toBeCloseTo((d.msb - d.msw) / d.b, 8);
    expect(reml.siteVariance).toBeCloseTo(published.get('sigma2_between_ANOVA_equals_REML')!, 8);
    // Balanced data: the Prasad–Rao moment estimator is the ANOVA estimator, the same number.
    expect(prasadRaoVariance(data)).toBeCloseTo(reml.siteVariance, 8);
  });

  it('ML of A equals ((a−1)/a·MSB − MSW)/b = 1388.33, the published ML between-batch variance', () => {
    expect(ml.converged).toBe(true);
    expect(ml.siteVariance).toBeCloseTo(((d.a - 1) / d.a * d.msb - d.msw) / d.b, 8);
    expect(ml.siteVariance).toBeCloseTo(published.get('sigma2_between_ML')!, 4);
  });

  it('grand mean and its standard error under REML and ML (19.3834 / 17.6946; lme4 19.38 recalled)', () => {
    expect(reml.coefficients[0].estimate).toBeCloseTo(published.get('grand_mean')!, 9);
    expect(reml.coefficients[0].se).toBeCloseTo(published.get('se_mean_REML')!, 4);
    expect(ml.coefficients[0].se).toBeCloseTo(published.get('se_mean_ML')!, 4);
  });

  it('EBLUP − grand mean = the REML BLUPs of the batch effects (BLUP_REML_A..F, 3 decimals)', () => {
    d.batches.forEach((id, i) => {
      expect(reml.eblup[i] - reml.coefficients[0].estimate).toBeCloseTo(published.get(`BLUP_REML_${id}`)!, 3);
    });
  });

  it('full-data −2 log-likelihoods from the area-level ones: REML 319.6543 [C], ML 327.3271 [V: OpenMx test vs lme4]', () => {
    // The data split into batch means and within-batch contrasts; the contrasts add
    // a(b−1) log(2π σ_e²) + SSW/σ_e², and √b·ȳ_i (an orthonormal transform) adds a log b.
    // XᵀV⁻¹X is a/(A + D) in both, so the REML determinant terms agree too.
    const within = d.a * Math.log(d.b) + d.a * (d.b - 1) * Math.log(2 * Math.PI * d.msw) + d.ssw / d.msw;
    expect(-2 * reml.logLikelihood + within).toBeCloseTo(published.get('REML_criterion_minus2logRL')!, 4);
    expect(-2 * ml.logLikelihood + within).toBeCloseTo(published.get('minus2logL_ML')!, 4);
  });
});

describe('eight schools: the between-school variance estimate is 0 (Rubin 1981; Gelman et al. 2013 §5.5)', () => {
  const classical = new Map(readRows('eight_schools_classical.csv').map((r) => [`${r[0]}:${r[1]}`, Number(r[2])]));
  for (const version of ['bda_rounded', 'rubin1981_unrounded'] as const) {
    const data = eightSchools(version);
    const pooledMean = classical.get(`${version}:pooled_mean`)!;
    const pooledVar = classical.get(`${version}:pooled_var`)!;
    const digits = version === 'bda_rounded' ? 4 : 3; // 16.5805 vs 17.352 as printed in the file

    it(`${version}: Q = ${classical.get(`${version}:Q_homogeneity_7df`)} < 7, so DerSimonian–Laird τ² = 0; REML, ML and PR give 0 too`, () => {
      const { y, D } = denseProblem(data);
      const w = D.map((v) => 1 / v);
      const mu = y.reduce((s, v, i) => s + w[i] * v, 0) / w.reduce((s, v) => s + v, 0);
      const Q = y.reduce((s, v, i) => s + w[i] * (v - mu) ** 2, 0);
      expect(Q).toBeCloseTo(classical.get(`${version}:Q_homogeneity_7df`)!, 4);
      expect(classical.get(`${version}:tau2_DerSimonianLaird`)).toBe(0);
      for (const method of ['REML', 'ML', 'PR'] as const) {
        const fit = areaEblup(data, method);
        expect(fit.siteVariance, method).toBe(0);
        expect(fit.atBoundary, method).toBe(true);
        expect(fit.converged, method).toBe(true);
      }
      // The restricted likelihood really is highest at 0: brute force with dense matrices.
      const brute = gridMaximum((A) => denseLogLikelihood(data, A, 'REML'), 400, 2001);
      expect(brute.A).toBe(0);
    });

    it(`${version}: every EBLUP is the pooled mean ${pooledMean}; its MSE is the pooled variance ${pooledVar} (g2 only)`, () => {
      const fit = areaEblup(data, 'REML');
      expect(fit.coefficients[0].estimate).toBeCloseTo(pooledMean, 4);
      expect(fit.coefficients[0].se).toBeCloseTo(classical.get(`${version}:pooled_se`)!, 4);
      for (let i = 0; i < data.m; i++) {
        expect(fit.eblup[i]).toBeCloseTo(pooledMean, 4);
        expect(fit.weightDirect[i]).toBe(0);
        expect(fit.parts.g1[i]).toBe(0);
        expect(fit.parts.g3[i]).toBe(0);
        expect(fit.mse[i]).toBeCloseTo(pooledVar, digits);
      }
      expect(fit.mseNote).toMatch(/estimated as 0/);
    });
  }
});

describe('closed forms: equal sampling variances, intercept only (Efron & Morris 1975 Table 1, arcsine scale)', () => {
  // X_i = √45 arcsin(2y_i − 1) ≈ N(θ_i, 1), 18 players [C from EM 1975 Table 1]; D = 1.
  const X = readRows('baseball_efron_morris_1975.csv').map((r) => Number(r[11]));
  const k = X.length;
  const data = areaData(X.map((y, i) => ({ id: `p${i + 1}`, x: [], y, psi: 1 })));
  const mean = X.reduce((s, v) => s + v, 0) / k;
  const S = X.reduce((s, v) => s + (v - mean) ** 2, 0);

  it('S = 18.963 and the James–Stein factor 1 − (k − 3)/S = 0.2090 [C, SOURCES.md §2]', () => {
    expect(S).toBeCloseTo(18.963, 2);
    expect(1 - (k - 3) / S).toBeCloseTo(0.209, 3);
  });

  // Â + D = S/(k − 1) (REML, PR) or S/k (ML), so γ = 1 − (k − 1)/S or 1 − k/S: the EBLUP is the
  // James–Stein-type rule X̄ + γ(X_i − X̄), with k − 1 or k where James–Stein has k − 3.
  for (const [method, dof] of [['REML', k - 1], ['PR', k - 1], ['ML', k]] as const) {
    it(`${method}: EBLUP_i = X̄ + (1 − ${dof}/S)(X_i − X̄), weight A/(A + D) for every site`, () => {
      const fit = areaEblup(data, method);
      const gamma = 1 - dof / S;
      expect(fit.siteVariance).toBeCloseTo(S / dof - 1, 10);
      for (let i = 0; i < k; i++) {
        expect(fit.weightDirect[i]).toBeCloseTo(gamma, 10);
        expect(fit.eblup[i]).toBeCloseTo(mean + gamma * (X[i] - mean), 10);
      }
    });
  }

  it('ML bias term b_ML(A) = −(A + D)/m, the exact bias of the untruncated balanced ML estimate', () => {
    // Balanced case: E S = (k − 1)(A + D), so E[S/k − D] − A = −(A + D)/k.
    const A = 0.4;
    const parts = areaMseParts(data, A, 'ML');
    const shrink = 1 / (A + 1);
    for (let i = 0; i < k; i++) expect(parts.biasCorrection[i]).toBeCloseTo(((A + 1) / k) * shrink * shrink, 12);
    expect(areaMseParts(data, A, 'REML').biasCorrection.every((v) => v === 0)).toBe(true);
  });
});

describe('REML and ML against brute-force maximisation of the dense (restricted) likelihood', () => {
  const { data } = simulatedArea(2026, 14, 3, { unsampled: 2, spread: 'uniform' });

  for (const method of ['REML', 'ML'] as const) {
    it(`${method}: Fisher scoring lands on the grid maximum; the criterion equals the dense one`, () => {
      const fit = areaEblup(data, method);
      expect(fit.converged).toBe(true);
      expect(fit.iterations).toBeLessThan(30);
      const brute = gridMaximum((A) => denseLogLikelihood(data, A, method), 20, 2001);
      expect(brute.A).toBeGreaterThan(0);
      expect(Math.abs(fit.siteVariance - brute.A)).toBeLessThanOrEqual(2 * brute.step);
      for (const A of [0, 0.3, fit.siteVariance, 7]) {
        expect(areaLogLikelihood(data, A, method)).toBeCloseTo(denseLogLikelihood(data, A, method), 9);
      }
      expect(fit.logLikelihood).toBeCloseTo(denseLogLikelihood(data, fit.siteVariance, method), 9);
    });
  }

  it('the moment start is the OLS formula [Σu² − ΣD(1 − h)]/(n − p), computed densely', () => {
    const { X, y, D } = denseProblem(data);
    const n = y.length;
    const p = X[0].length;
    const { inverse: F } = inverseLogDet(matMul(transpose(X), X));
    const H = matMul(matMul(X, F), transpose(X));
    const u = y.map((yi, i) => yi - H[i].reduce((s, v, j) => s + v * y[j], 0));
    const raw = (u.reduce((s, v) => s + v * v, 0) - D.reduce((s, d, i) => s + d * (1 - H[i][i]), 0)) / (n - p);
    expect(prasadRaoVariance(data)).toBeCloseTo(Math.max(0, raw), 10);
    expect(areaEblup(data, 'REML').startValue).toBe(prasadRaoVariance(data));
  });

  it('without iterations left it says so instead of pretending to have converged', () => {
    const fit = areaEblup(data, 'REML', { maxIterations: 1, tolerance: 1e-14 });
    expect(fit.converged).toBe(false);
    expect(compareWithPosterior(fit, Array.from(fit.eblup, (m) => ({ mean: m, sd: 1 }))).reading).toMatch(/did not converge/);
  });
});

describe('MSE parts against a direct computation (Prasad & Rao 1990; FORMULAS.md §2 [M])', () => {
  // Three sampled sites and one without data; A fixed, so every part is a plain function of A.
  const data = areaData(
    [
      { id: 'a', x: [0.2], y: 1.1, psi: 0.5 },
      { id: 'b', x: [-0.7], y: 0.3, psi: 1.2 },
      { id: 'c', x: [1.4], y: 2.6, psi: 2.0 },
      { id: 'u', x: [0.9] },
    ],
    ['x'],
  );
  const { X, D } = denseProblem(data);
  const A = 0.7;
  const V: Matrix = D.map((d, i) => D.map((_, j) => (i === j ? A + d : 0)));
  const { inverse: Vi } = inverseLogDet(V);
  const { inverse: F } = inverseLogDet(matMul(matMul(transpose(X), Vi), X)); // Var(β̃) = (XᵀV⁻¹X)⁻¹
  const xAt = (i: number) => Array.from(data.X.subarray(i * 2, i * 2 + 2));
  const quadForm = (x: number[]) => x.reduce((s, a, r) => s + a * x.reduce((t, b, c) => t + F[r][c] * b, 0), 0);

  it('g1 + g2 is the exact MSE of the BLUP at known A (quadratic form in (u, e)); g1 that with β known', () => {
    const parts = areaMseParts(data, A, 'REML');
    // θ̃_i = c_iᵀy with c_i = γ_i e_i + (1 − γ_i) V⁻¹X F x_i; c_iᵀX = x_iᵀ, so
    // θ̃_i − θ_i = (c_i − e_i)ᵀu + c_iᵀe and MSE = A‖c_i − e_i‖² + Σ_j c_ij² D_j.
    const G = matMul(matMul(Vi, X), F);
    for (let i = 0; i < 3; i++) {
      const gamma = A / (A + D[i]);
      const c = G.map((row, j) => (1 - gamma) * (row[0] * X[i][0] + row[1] * X[i][1]) + (i === j ? gamma : 0));
      const exact = c.reduce((s, cj, j) => s + A * (cj - (i === j ? 1 : 0)) ** 2 + cj * cj * D[j], 0);
      expect(parts.g1[i] + parts.g2[i]).toBeCloseTo(exact, 12);
      expect(parts.g1[i]).toBeCloseTo(gamma * gamma * D[i] + (1 - gamma) ** 2 * A, 12);
    }
  });

  it('g3 = (∂γ_i/∂A)² (A + D_i) V̄ with a numerical derivative; V̄ = 2/Σ(A + D)⁻² (REML) or 2Σ(A + D)²/n² (PR)', () => {
    const h = 1e-5;
    for (const [method, vbar] of [
      ['REML', 2 / D.reduce((s, d) => s + (A + d) ** -2, 0)],
      ['PR', (2 * D.reduce((s, d) => s + (A + d) ** 2, 0)) / 9],
    ] as const) {
      const parts = areaMseParts(data, A, method);
      expect(parts.varianceOfSiteVariance).toBeCloseTo(vbar, 12);
      for (let i = 0; i < 3; i++) {
        const dGamma = ((A + h) / (A + h + D[i]) - (A - h) / (A - h + D[i])) / (2 * h);
        expect(parts.g3[i] / (dGamma * dGamma * (A + D[i]) * vbar)).toBeCloseTo(1, 8);
        expect(parts.mse[i]).toBeCloseTo(parts.g1[i] + parts.g2[i] + 2 * parts.g3[i], 12);
      }
    }
  });

  it('a site without data: g1 = A, g2 = xᵀVar(β̃)x, g3 = 0 — the limit of a sampled site with D → ∞', () => {
    const parts = areaMseParts(data, A, 'REML');
    expect(parts.g1[3]).toBe(A);
    expect(parts.g2[3]).toBeCloseTo(quadForm(xAt(3)), 12);
    expect(parts.g3[3]).toBe(0);
    const far = areaData(
      [
        { id: 'a', x: [0.2], y: 1.1, psi: 0.5 },
        { id: 'b', x: [-0.7], y: 0.3, psi: 1.2 },
        { id: 'c', x: [1.4], y: 2.6, psi: 2.0 },
        { id: 'u', x: [0.9], y: 5, psi: 1e12 },
      ],
      ['x'],
    );
    const limit = areaMseParts(far, A, 'REML');
    expect(limit.mse[3]).toBeCloseTo(parts.mse[3], 8);
    const ml = areaMseParts(data, A, 'ML');
    expect(ml.mse[3]).toBeCloseTo(A + quadForm(xAt(3)) + ml.biasCorrection[3], 12);
    expect(ml.biasCorrection[3]).toBeGreaterThan(0);
  });

  it('unsampled EBLUP is the synthetic x_iᵀβ̂', () => {
    const fit = areaEblup(data, 'REML');
    const beta = fit.coefficients.map((c) => c.estimate);
    expect(fit.eblup[3]).toBeCloseTo(beta[0] + 0.9 * beta[1], 12);
    expect(fit.weightDirect[3]).toBe(0);
  });
});

describe('the MSE estimate by simulation (mean of estimates ≈ empirical MSE of the EBLUP)', () => {
  /**
   * R data sets from the model; per data set the site average of (mse estimate − squared
   * error). Its mean over data sets estimates the bias of the MSE estimator; its Monte Carlo
   * standard error is sd/√R. The estimator is second-order unbiased (bias o(1/m); Prasad &
   * Rao 1990, Datta & Lahiri 2000): with m = 60 sites and A = 1 the remaining bias measured
   * here is about 1% of the MSE (−0.008 ± 0.004 REML, +0.004 ± 0.004 ML), inside 4 standard
   * errors, while the naive g1 + g2 (no allowance for estimating A) is about 10 standard errors low.
   */
  function simulate(method: 'REML' | 'ML', m: number, A: number, R: number, seed: number) {
    const full: number[] = [];
    const naive: number[] = [];
    for (let r = 0; r < R; r++) {
      const { data, theta } = simulatedArea(seed + r, m, A);
      const fit = areaEblup(data, method);
      let d = 0;
      let dn = 0;
      for (let i = 0; i < m; i++) {
        const error2 = (fit.eblup[i] - theta[i]) ** 2;
        d += fit.mse[i] - error2;
        dn += fit.parts.g1[i] + fit.parts.g2[i] - error2;
      }
      full.push(d / m);
      naive.push(dn / m);
    }
    const stats = (v: number[]) => {
      const mean = v.reduce((s, x) => s + x, 0) / v.length;
      const sd = Math.sqrt(v.reduce((s, x) => s + (x - mean) ** 2, 0) / (v.length - 1));
      return { mean, se: sd / Math.sqrt(v.length) };
    };
    return { full: stats(full), naive: stats(naive) };
  }

  for (const method of ['REML', 'ML'] as const) {
    it(`${method}: bias of g1 + g2 + 2g3${method === 'ML' ? ' − b·∂g1' : ''} within 4 MC se; g1 + g2 alone is biased low`, () => {
      const { full, naive } = simulate(method, 60, 1, 1500, method === 'REML' ? 100_000 : 200_000);
      expect(Math.abs(full.mean), `bias ${full.mean} ± ${full.se}`).toBeLessThan(4 * full.se);
      expect(naive.mean, `naive bias ${naive.mean} ± ${naive.se}`).toBeLessThan(-4 * naive.se);
    });
  }

  it('at the boundary with true A = 0 the MSE of the synthetic EBLUP is g2, as reported; 2g3 would overstate it', () => {
    // With A = 0 the REML estimate depends only on error contrasts, which are independent of the
    // GLS β̂ when V = D; so given Â = 0 the error x_iᵀ(β̂ − β) has variance exactly g2.
    const m = 10;
    const R = 3000;
    let boundary = 0;
    const diffs: number[] = [];
    let keptG3 = 0;
    for (let r = 0; r < R; r++) {
      const { data, theta } = simulatedArea(300_000 + r, m, 0);
      const fit = areaEblup(data, 'REML');
      if (!fit.atBoundary) continue;
      boundary++;
      let d = 0;
      for (let i = 0; i < m; i++) {
        d += fit.mse[i] - (fit.eblup[i] - theta[i]) ** 2;
        keptG3 += (2 * fit.parts.varianceOfSiteVariance) / data.variance[i] / m;
      }
      diffs.push(d / m);
    }
    expect(boundary).toBeGreaterThan(R / 4);
    const mean = diffs.reduce((s, x) => s + x, 0) / diffs.length;
    const se = Math.sqrt(diffs.reduce((s, x) => s + (x - mean) ** 2, 0) / (diffs.length - 1) / diffs.length);
    expect(Math.abs(mean), `bias ${mean} ± ${se}`).toBeLessThan(4 * se);
    expect(mean + keptG3 / boundary).toBeGreaterThan(20 * se);
  });
});

describe('agreement with the exact posterior mean as the number of sites grows', () => {
  // Under a flat β prior and a uniform prior on σ_u the marginal posterior of σ_u² is the
  // restricted likelihood times (σ_u²)^{−1/2}, so the posterior concentrates around the REML
  // estimate; the posterior mean of θ_i averages the EBLUP formula over it. The difference is of
  // the order of the posterior variance of A (≈ 2(A + D)²/m) times |∂θ̂_i/∂A|, which grows like
  // the largest standardised residual (≈ √(2 log m)): loosely O(√log m / m), against a posterior
  // sd of order 1. Expected: a clear decrease from 20 to 200 to 2000 sites and, at 2000, less
  // than 1% of a posterior sd (the bound: a hundredth of a posterior sd is far below anything
  // a report would show).
  it('max |EBLUP − posterior mean| / posterior sd decreases with m = 20, 200, 2000 and ends below 0.01', () => {
    const largest: number[] = [];
    for (const m of [20, 200, 2000]) {
      const rng = createRng(5, m);
      const rows: SiteRow[] = Array.from({ length: m }, (_, i) => {
        const x = normal(rng);
        const D = 0.5 + 1.5 * rng.uniform();
        const theta = 1 + 0.5 * x + normal(rng);
        return { id: `s${i}`, x: [x], y: theta + Math.sqrt(D) * normal(rng), psi: D };
      });
      const data = areaData(rows, ['x']);
      const fit = areaEblup(data, 'REML');
      const exact = exactAreaPosterior(data, { coefficients: { kind: 'flat' }, site_sd: { kind: 'uniform' } }, [0.5]);
      let max = 0;
      for (let i = 0; i < m; i++) max = Math.max(max, Math.abs(fit.eblup[i] - exact.sites[i].mean) / exact.sites[i].sd);
      const comparison = compareWithPosterior(fit, exact.sites);
      expect(comparison.largestDifference.value).toBeCloseTo(max, 12);
      largest.push(max);
      if (m === 2000) {
        // The MSE estimate and the posterior variance differ by terms of order 1/m too (g3 and
        // the posterior spread of A): at 2000 sites the rmse is the posterior sd within 2%.
        expect(comparison.rmseOverSd.min).toBeGreaterThan(0.98);
        expect(comparison.rmseOverSd.max).toBeLessThan(1.02);
      }
    }
    expect(largest[1]).toBeLessThan(largest[0]);
    expect(largest[2]).toBeLessThan(largest[1]);
    expect(largest[2]).toBeLessThan(0.01);
  });

  it('eight schools: the plain reading says the zero variance estimate makes the posterior the better guide', () => {
    const data = eightSchools('bda_rounded');
    const fit = areaEblup(data, 'REML');
    const exact = exactAreaPosterior(data, { coefficients: { kind: 'flat' }, site_sd: { kind: 'uniform' } });
    const c = compareWithPosterior(fit, exact.sites);
    // School A: EBLUP 7.69 vs exact posterior mean 11.40 (sd 8.34) [C, eight_schools_posterior_exact.csv].
    expect(c.largestDifference.site).toBe('A');
    expect(c.largestDifference.value).toBeCloseTo(Math.abs(7.6856 - 11.4) / 8.341, 2);
    expect(c.reading).toMatch(/estimated as zero/);
  });
});

describe('run-folder text: frequentist.csv and frequentist.json', () => {
  const d = dyestuff();
  const data = areaData(d.batches.map((id, i) => ({ id, x: [], y: d.means[i], psi: d.msw / d.b })));
  const fit = areaEblup(data, 'REML');

  it('csv: site,eblup,rmse with rmse = √mse, one row per site in order', () => {
    const lines = frequentistCsv(fit).trimEnd().split('\n');
    expect(lines[0]).toBe('site,eblup,rmse');
    expect(lines).toHaveLength(1 + d.a);
    lines.slice(1).forEach((line, i) => {
      const [site, eblup, rmse] = line.split(',');
      expect(site).toBe(d.batches[i]);
      expect(Number(eblup)).toBeCloseTo(fit.eblup[i], 4);
      expect(Number(rmse)).toBeCloseTo(Math.sqrt(fit.mse[i]), 4);
    });
  });

  it('json: site_variance, coefficients by name, method; unit_variance only where it applies', () => {
    const json = JSON.parse(frequentistJson(fit));
    expect(json.method).toBe('REML');
    expect(json.site_variance).toBeCloseTo(1764.05, 8);
    expect(json.coefficients.intercept.estimate).toBeCloseTo(1527.5, 9);
    expect(json.coefficients.intercept.se).toBeCloseTo(19.3834, 4);
    expect('unit_variance' in json).toBe(false);
    const unit: FrequentistFit = { ...fit, model: 'unit', unitVariance: 2451.25 };
    expect(JSON.parse(frequentistJson(unit)).unit_variance).toBe(2451.25);
    expect(JSON.parse(frequentistJson(areaEblup(data, 'PR'))).log_likelihood).toBeNull();
  });
});

describe('bad input gets a one-line error', () => {
  it('no more sites with data than coefficients', () => {
    const data = areaData([{ id: 'a', x: [1], y: 1, psi: 1 }, { id: 'b', x: [2], y: 2, psi: 1 }, { id: 'c', x: [3] }], ['x']);
    expect(() => areaEblup(data)).toThrow(UserError);
    expect(() => areaEblup(data)).toThrow(/more sites with a direct estimate \(2\) than coefficients \(2\)/);
  });

  it('collinear covariates among the sampled sites', () => {
    const rows: SiteRow[] = [0, 1, 2, 3].map((i) => ({ id: `s${i}`, x: [i, 2 * i], y: i, psi: 1 }));
    expect(() => areaEblup(areaData(rows, ['x', 'twice_x']))).toThrow(/collinear/);
  });
});
