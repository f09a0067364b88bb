/**
 * The closed forms of the unit model (src/models/unit.ts, src/summaries/exact-unit.ts), which work
 * on per-site sufficient statistics only, against dense computations on the individual units:
 *
 * - the marginal likelihood of (σ_u², σ_e²) with β integrated out: for a flat prior the restricted
 *   likelihood −½[log|V| + log|XᵀV⁻¹X| + (y − Xβ̂)ᵀV⁻¹(y − Xβ̂)] (Harville 1974, Biometrika 61(2),
 *   "Bayesian inference for variance components using only error contrasts"); for a normal prior
 *   the Gaussian density N(y; Xβ₀, V + XSXᵀ) (common practice). Both with the full N × N matrix V.
 * - the conditionals of β and of each site target given the variances: Henderson's mixed-model
 *   equations (Henderson 1975, Biometrics 31(2), 423–447), whose inverse coefficient matrix is the
 *   posterior covariance of (β, u) given the variances under a flat (or normal) prior on β.
 *
 * And the 2-D quadrature itself: halving the grid spacing changes nothing that matters.
 */
import { describe, expect, it } from 'vitest';
import type { CoefficientPrior } from '../src/config/types.js';
import { cholesky, choleskyInverse, choleskyLogDet } from '../src/models/linalg.js';
import { createRng } from '../src/sampler/rng.js';
import { normal } from '../src/sampler/variates.js';
import { logPriorLogSigma } from '../src/models/area.js';
import { exactUnitPosterior, unitGivenVariances } from '../src/summaries/exact-unit.js';
import { unitData, type UnitRow, type UnitSiteRow } from './support/unit-fit.js';

/** 6 sites (one unsampled), sample sizes 1–5, two covariates; values simulated once (seeded). */
function tinyProblem() {
  const rng = createRng(5150, 0);
  const sizes = [3, 1, 5, 0, 2, 4];
  const sites: UnitSiteRow[] = [];
  const rows: UnitRow[] = [];
  sizes.forEach((n, i) => {
    const c = [10 + 3 * normal(rng), 50 + 20 * normal(rng)];
    sites.push({ id: `t${i}`, means: [c[0] + normal(rng), c[1] + 5 * normal(rng)], size: n + 3 + i });
    const u = 1.5 * normal(rng);
    for (let j = 0; j < n; j++) {
      const x = [c[0] + normal(rng), c[1] + 10 * normal(rng)];
      rows.push({ site: `t${i}`, x, y: 4 + 0.8 * x[0] - 0.05 * x[1] + u + normal(rng) });
    }
  });
  return { sites, rows };
}

/** Dense symmetric matrix helpers (row-major, order k). */
function inverseOf(a: Float64Array, k: number): { inverse: Float64Array; logDet: number } {
  const l = new Float64Array(k * k);
  if (!cholesky(a, k, l)) throw new Error('not positive definite');
  const logDet = choleskyLogDet(l, k);
  const inverse = new Float64Array(k * k);
  choleskyInverse(l, k, inverse);
  return { inverse, logDet };
}

/** The restricted (or, with a normal prior, marginal) log likelihood on the units, densely. */
function denseLogMarginal(sites: UnitSiteRow[], rows: UnitRow[], su2: number, se2: number, prior: CoefficientPrior): number {
  const N = rows.length;
  const p = rows[0].x.length + 1;
  const X = new Float64Array(N * p);
  const y = Float64Array.from(rows, (r) => r.y);
  rows.forEach((r, a) => {
    X[a * p] = 1;
    r.x.forEach((v, j) => (X[a * p + j + 1] = v));
  });
  const V = new Float64Array(N * N);
  for (let a = 0; a < N; a++) for (let b = 0; b < N; b++) V[a * N + b] = (rows[a].site === rows[b].site ? su2 : 0) + (a === b ? se2 : 0);
  if (prior.kind === 'normal') {
    // y ~ N(X b0, V + X S Xᵀ), S = sd² I.
    const s2 = prior.sd * prior.sd;
    const mean = new Float64Array(N);
    for (let a = 0; a < N; a++) {
      for (let j = 0; j < p; j++) mean[a] += X[a * p + j] * prior.mean;
      for (let b = 0; b < N; b++) for (let j = 0; j < p; j++) V[a * N + b] += s2 * X[a * p + j] * X[b * p + j];
    }
    const { inverse, logDet } = inverseOf(V, N);
    let quad = 0;
    for (let a = 0; a < N; a++) for (let b = 0; b < N; b++) quad += (y[a] - mean[a]) * inverse[a * N + b] * (y[b] - mean[b]);
    return -0.5 * (logDet + quad);
  }
  const { inverse: Vi, logDet: logDetV } = inverseOf(V, N);
  const XtViX = new Float64Array(p * p);
  const XtViy = new Float64Array(p);
  for (let j = 0; j < p; j++) {
    for (let a = 0; a < N; a++) {
      for (let b = 0; b < N; b++) {
        const w = X[a * p + j] * Vi[a * N + b];
        XtViy[j] += w * y[b];
        for (let l = 0; l < p; l++) XtViX[j * p + l] += w * X[b * p + l];
      }
    }
  }
  const { inverse: C, logDet: logDetP } = inverseOf(XtViX, p);
  const beta = new Float64Array(p);
  for (let j = 0; j < p; j++) for (let l = 0; l < p; l++) beta[j] += C[j * p + l] * XtViy[l];
  let quad = 0;
  for (let a = 0; a < N; a++) {
    for (let b = 0; b < N; b++) {
      let ra = y[a];
      let rb = y[b];
      for (let j = 0; j < p; j++) {
        ra -= X[a * p + j] * beta[j];
        rb -= X[b * p + j] * beta[j];
      }
      quad += ra * Vi[a * N + b] * rb;
    }
  }
  return -0.5 * (logDetV + logDetP + quad);
}

/**
 * Henderson's mixed-model equations for (β, u): coefficient matrix
 * [[XᵀX/σ_e² + Λ, XᵀZ/σ_e²], [ZᵀX/σ_e², ZᵀZ/σ_e² + I/σ_u²]], right side [Xᵀy/σ_e² + Λb₀, Zᵀy/σ_e²].
 * Its inverse is the posterior covariance of (β, u) given the variances.
 */
function henderson(sites: UnitSiteRow[], rows: UnitRow[], su2: number, se2: number, prior: CoefficientPrior) {
  const m = sites.length;
  const p = rows[0].x.length + 1;
  const k = p + m;
  const M = new Float64Array(k * k);
  const rhs = new Float64Array(k);
  const index = new Map(sites.map((s, i) => [s.id, i]));
  for (const r of rows) {
    const z = new Float64Array(k);
    z[0] = 1;
    r.x.forEach((v, j) => (z[j + 1] = v));
    z[p + index.get(r.site)!] = 1;
    for (let a = 0; a < k; a++) {
      rhs[a] += (z[a] * r.y) / se2;
      for (let b = 0; b < k; b++) M[a * k + b] += (z[a] * z[b]) / se2;
    }
  }
  for (let i = 0; i < m; i++) M[(p + i) * k + p + i] += 1 / su2;
  if (prior.kind === 'normal') {
    for (let j = 0; j < p; j++) {
      M[j * k + j] += 1 / prior.sd ** 2;
      rhs[j] += prior.mean / prior.sd ** 2;
    }
  }
  const { inverse } = inverseOf(M, k);
  const mean = new Float64Array(k);
  for (let a = 0; a < k; a++) for (let b = 0; b < k; b++) mean[a] += inverse[a * k + b] * rhs[b];
  return { k, p, mean, cov: inverse };
}

const priorsToTry: Array<[string, CoefficientPrior]> = [
  ['flat coefficient prior', { kind: 'flat' }],
  ['normal coefficient prior', { kind: 'normal', mean: 0.5, sd: 2 }],
];
const variancePoints: Array<[number, number]> = [
  [2.5, 1.1],
  [0.01, 0.7],
  [40, 3.3],
];

describe('closed forms on sufficient statistics vs dense computations on the units', () => {
  const { sites, rows } = tinyProblem();
  for (const [label, prior] of priorsToTry) {
    it(`${label}: marginal likelihood differences between variance points (N × N matrices)`, () => {
      const data = unitData(sites, rows, ['a', 'b']);
      const ours = variancePoints.map(([su2, se2]) => {
        const g = unitGivenVariances(data, prior, su2, se2);
        return -0.5 * (g.logDetV + g.logDetP + g.quad);
      });
      const dense = variancePoints.map(([su2, se2]) => denseLogMarginal(sites, rows, su2, se2, prior));
      for (let k = 1; k < variancePoints.length; k++) {
        // Both are exact up to rounding: 1e-9 of the size of the terms.
        expect(ours[k] - ours[0]).toBeCloseTo(dense[k] - dense[0], 8);
      }
    });

    for (const finitePopulation of [false, true]) {
      it(`${label}, ${finitePopulation ? 'finite-population' : 'model-mean'} targets: β and every site's conditional mean and variance (Henderson's equations)`, () => {
        const data = unitData(sites, rows, ['a', 'b'], { finitePopulation });
        for (const [su2, se2] of variancePoints) {
          const ours = unitGivenVariances(data, prior, su2, se2);
          const h = henderson(sites, rows, su2, se2, prior);
          const { k, p } = h;
          for (let j = 0; j < p; j++) {
            expect(ours.beta[j]).toBeCloseTo(h.mean[j], 7);
            expect(ours.betaCov[j * p + j] / h.cov[j * k + j]).toBeCloseTo(1, 8);
          }
          sites.forEach((s, i) => {
            // μ_i = c + lᵀ(β, u) + independent noise (finite population: the units not sampled).
            const n = rows.filter((r) => r.site === s.id).length;
            const ybar = n > 0 ? rows.filter((r) => r.site === s.id).reduce((t, r) => t + r.y, 0) / n : 0;
            const xbar = [1, 0, 0];
            for (const r of rows.filter((r) => r.site === s.id)) r.x.forEach((v, j) => (xbar[j + 1] += v / n));
            const popMeans = [1, ...s.means];
            const N = s.size!;
            const f = finitePopulation ? n / N : 0;
            const l = new Float64Array(k);
            for (let j = 0; j < p; j++) l[j] = popMeans[j] - f * (n > 0 ? xbar[j] : 0); // (1 − f) X̄ʳ
            l[p + i] = 1 - f;
            const noise = finitePopulation ? ((1 - f) ** 2 * se2) / (N - n) : 0;
            let mean = f * ybar;
            let variance = noise;
            for (let a = 0; a < k; a++) {
              mean += l[a] * h.mean[a];
              for (let b = 0; b < k; b++) variance += l[a] * h.cov[a * k + b] * l[b];
            }
            expect(ours.siteMean[i], `site ${s.id} mean`).toBeCloseTo(mean, 7);
            expect(ours.siteVar[i] / variance, `site ${s.id} variance`).toBeCloseTo(1, 8);
          });
        }
      });
    }
  }
});

describe('2-D quadrature of the exact posterior', () => {
  const { sites, rows } = tinyProblem();
  const data = unitData(sites, rows, ['a', 'b']);
  const priors = { coefficients: { kind: 'flat' as const }, site_sd: { kind: 'half_cauchy' as const, scale: 2 }, unit_sd: { kind: 'uniform' as const } };
  it('σ_u near zero: the analytic left tail of log σ_u equals the plain grid reaching far left', () => {
    const rng = createRng(99, 3);
    const near: UnitRow[] = rows.map((r) => ({ ...r, y: 4 + 0.8 * r.x[0] - 0.05 * r.x[1] + normal(rng) }));
    const d = unitData(sites, near, ['a', 'b']);
    const merged = exactUnitPosterior(d, priors);
    const plain = exactUnitPosterior(d, priors, { mergeLeftTail: false });
    expect(merged.grid.leftTail).toBe(true);
    expect(merged.grid.siteSteps).toBeLessThan(plain.grid.siteSteps);
    const pairs = [[merged.siteSd, plain.siteSd], [merged.unitSd, plain.unitSd], ...merged.coefficients.map((c, j) => [c, plain.coefficients[j]]), ...merged.sites.map((c, i) => [c, plain.sites[i]])];
    for (const [a, b] of pairs) {
      expect(Math.abs(a.mean - b.mean)).toBeLessThan(1e-7 * b.sd);
      expect(Math.abs(a.sd - b.sd)).toBeLessThan(1e-7 * b.sd);
    }
  });

  it('halving the grid spacing changes no mean or sd by more than 1e-7 of the sd', () => {
    const coarse = exactUnitPosterior(data, priors);
    const fine = exactUnitPosterior(data, priors, { spacingFactor: 0.5 });
    const pairs = [
      [coarse.siteSd, fine.siteSd],
      [coarse.unitSd, fine.unitSd],
      ...coarse.coefficients.map((c, j) => [c, fine.coefficients[j]]),
      ...coarse.sites.map((c, i) => [c, fine.sites[i]]),
    ];
    for (const [a, b] of pairs) {
      expect(Math.abs(a.mean - b.mean)).toBeLessThan(1e-7 * b.sd);
      expect(Math.abs(a.sd - b.sd)).toBeLessThan(1e-7 * b.sd);
    }
    expect(fine.grid.siteSteps).toBeGreaterThan(1.9 * coarse.grid.siteSteps);
  });

  for (const finitePopulation of [false, true]) {
    it(`${finitePopulation ? 'finite-population' : 'model-mean'} targets: the per-sample-size moments equal the plain per-site normal mixture on the same grid`, () => {
      const d = unitData(sites, rows, ['a', 'b'], { finitePopulation });
      const exact = exactUnitPosterior(d, priors, { spacingFactor: 4 }); // a coarse grid: the algebra, not the integral, is checked
      const { siteFrom, siteSteps, spacingSite, unitFrom, unitSteps, spacingUnit } = exact.grid;
      const logs: number[] = [];
      const points: Array<ReturnType<typeof unitGivenVariances>> = [];
      const trapezoid: number[] = [];
      for (let a = 0; a <= siteSteps; a++) {
        for (let b = 0; b <= unitSteps; b++) {
          const tu = siteFrom + a * spacingSite;
          const te = unitFrom + b * spacingUnit;
          const g = unitGivenVariances(d, priors.coefficients, Math.exp(2 * tu), Math.exp(2 * te));
          logs.push(-0.5 * (g.logDetV + g.logDetP + g.quad) + logPriorLogSigma(tu, priors.site_sd) + logPriorLogSigma(te, priors.unit_sd));
          points.push(g);
          trapezoid.push((a === 0 || a === siteSteps ? 0.5 : 1) * (b === 0 || b === unitSteps ? 0.5 : 1));
        }
      }
      const top = Math.max(...logs);
      const w = logs.map((l, k) => Math.exp(l - top) * trapezoid[k]);
      if (exact.grid.leftTail) {
        // The analytic left tail: mass e^{rel}/(slope·h) on the first column (module doc).
        for (let b = 0; b <= unitSteps; b++) {
          const slope = Math.max((logs[unitSteps + 1 + b] - logs[b]) / spacingSite, 0.5);
          w[b] += (Math.exp(logs[b] - top) * (b === 0 || b === unitSteps ? 0.5 : 1)) / (slope * spacingSite);
        }
      }
      const total = w.reduce((x, y) => x + y, 0);
      d.siteIds.forEach((id, i) => {
        let m1 = 0;
        for (let k = 0; k < w.length; k++) m1 += w[k] * points[k].siteMean[i];
        m1 /= total;
        let m2 = 0;
        for (let k = 0; k < w.length; k++) m2 += w[k] * (points[k].siteVar[i] + (points[k].siteMean[i] - m1) ** 2);
        const sd = Math.sqrt(m2 / total);
        expect(Math.abs(exact.sites[i].mean - m1), `${id} mean`).toBeLessThan(1e-9 * sd);
        expect(Math.abs(exact.sites[i].sd - sd), `${id} sd`).toBeLessThan(1e-9 * sd);
      });
    });
  }
});
