import { readFileSync } from 'node:fs';
import { describe, expect, test } from 'vitest';
import type { AreaData } from '../src/data/types.js';
import { UserError } from '../src/errors.js';
import {
  exactAreaPosterior,
  logMarginalSiteVariance,
  normalCdf,
  type AreaPriors,
  type ExactAreaPosterior,
} from '../src/summaries/exact.js';

const PROBS = [0.025, 0.25, 0.5, 0.75, 0.975];
const CHECKS = new URL('../../shared/checks/', import.meta.url);

// ---------------------------------------------------------------------------------------------
// Helpers

/** AreaData from rows; `x` holds the covariates (the intercept column is added). */
function areaData(rows: { id: string; x: number[]; y?: number; psi?: number }[]): AreaData {
  const m = rows.length;
  const p = rows[0].x.length + 1;
  const X = new Float64Array(m * p);
  const direct = new Float64Array(m).fill(Number.NaN);
  const variance = new Float64Array(m).fill(Number.NaN);
  const hasData = new Uint8Array(m);
  rows.forEach((r, i) => {
    X[i * p] = 1;
    r.x.forEach((v, j) => (X[i * p + j + 1] = v));
    if (r.y !== undefined && r.psi !== undefined) {
      direct[i] = r.y;
      variance[i] = r.psi;
      hasData[i] = 1;
    }
  });
  return {
    m,
    p,
    siteIds: rows.map((r) => r.id),
    labels: rows.map((r) => r.id),
    coefficientNames: ['intercept', ...rows[0].x.map((_, j) => `x${j + 1}`)],
    X,
    direct,
    variance,
    sampleSize: new Float64Array(m).fill(Number.NaN),
    hasData,
    varianceNote: 'given',
  };
}

function readCsv(name: string): Record<string, string>[] {
  const [header, ...lines] = readFileSync(new URL(name, CHECKS), 'utf8').trim().split(/\r?\n/);
  const keys = header.split(',');
  return lines.map((line) => Object.fromEntries(line.split(',').map((v, k) => [keys[k], v])));
}

/**
 * Φ(x) computed independently of src: erf series for |x|/√2 < 1 (1 − erf ≥ 0.157, so no
 * cancellation) and the continued fraction for erfc otherwise, taken 5000 terms deep (Abramowitz & Stegun 1964, 7.1.6 and 7.1.14).
 */
function referenceCdf(x: number): number {
  if (x > 0) return 1 - referenceCdf(-x);
  const z = -x / Math.SQRT2;
  // e^{−z²} = e^{−x²/2} with x² split as u² + (x − u)(x + u), u = x to 1/16, so that rounding
  // x² does not cost relative accuracy far out in the tail.
  const u = Math.trunc(x * 16) / 16;
  const gauss = Math.exp(-0.5 * u * u) * Math.exp(-0.5 * (x - u) * (x + u));
  if (z < 1) {
    // erf z = (2/√π) e^{−z²} Σ_n 2ⁿ z^{2n+1} / (1·3·…·(2n+1)), all terms positive.
    let term = z;
    let sum = z;
    for (let n = 1; n < 500 && term > 1e-18 * sum; n++) {
      term *= (2 * z * z) / (2 * n + 1);
      sum += term;
    }
    return 0.5 * (1 - (2 / Math.sqrt(Math.PI)) * gauss * sum);
  }
  let f = z; // erfc z = e^{−z²}/√π · 1/(z + ½/(z + 1/(z + (3/2)/(z + …))))
  for (let k = 5000; k >= 1; k--) f = z + k / 2 / f;
  return (0.5 * gauss) / (Math.sqrt(Math.PI) * f);
}

function expectUserError(f: () => unknown, kind: string, pattern: RegExp): void {
  let caught: unknown;
  try {
    f();
  } catch (e) {
    caught = e;
  }
  expect(caught).toBeInstanceOf(UserError);
  expect((caught as UserError).kind).toBe(kind);
  expect((caught as UserError).message).toMatch(pattern);
}

// ---------------------------------------------------------------------------------------------

describe('standard normal distribution function', () => {
  test('matches the series / continued-fraction reference to 1e-14 relative in the lower tail and one ulp above', () => {
    for (let x = -37; x <= 8; x += 0.0625 + 1e-3) {
      const ref = referenceCdf(x);
      if (x < 0) expect(Math.abs(normalCdf(x) - ref) / ref).toBeLessThan(1e-14);
      else expect(Math.abs(normalCdf(x) - ref)).toBeLessThanOrEqual(2 ** -52); // one ulp of 1
    }
  });

  test('tabulated values (recalled: Φ(1) = 0.8413447460685429; Φ(−1.959963984540054) = 0.025)', () => {
    expect(normalCdf(1)).toBeCloseTo(0.8413447460685429, 15);
    expect(normalCdf(-1.959963984540054)).toBeCloseTo(0.025, 15);
    expect(normalCdf(0)).toBe(0.5);
  });
});

describe('eight schools (Rubin 1981 Table 1; Gelman et al. 2013, BDA3 §5.5) under p(μ, τ) ∝ 1', () => {
  // Reference: shared/checks/eight_schools_posterior_exact.csv, an independent quadrature over τ
  // (BDA3 eqs. 5.17–5.21) accurate to better than 1e-3 and printed to 3 decimals (±5e-4). Ours
  // is accurate to ~1e-9 (halving test below), so the two may differ by up to 1.5e-3: 2e-3.
  const data = readCsv('eight_schools_data.csv');
  const exact = readCsv('eight_schools_posterior_exact.csv');
  const versions = { bda_rounded: ['y', 'sigma'], rubin1981_unrounded: ['y_rubin1981', 'se_rubin1981'] };
  for (const [version, [yCol, sCol]] of Object.entries(versions)) {
    test(`${version}: every θ, μ and τ mean, sd and quantile within 2e-3`, () => {
      const d = areaData(data.map((r) => ({ id: r.school, x: [], y: Number(r[yCol]), psi: Number(r[sCol]) ** 2 })));
      const post = exactAreaPosterior(d, { coefficients: { kind: 'flat' }, site_sd: { kind: 'uniform' } }, PROBS);
      const rows = exact.filter((r) => r.data_version === version);
      expect(rows).toHaveLength(10);
      for (const row of rows) {
        const q = row.quantity;
        const summary = q === 'mu' ? post.coefficients[0] : q === 'tau' ? post.siteSd : post.sites[d.siteIds.indexOf(q.slice(6))];
        expect(summary, q).toBeDefined();
        const want = [row.mean, row.sd, row['q2.5'], row.q25, row.q50, row.q75, row['q97.5']].map(Number);
        const got = [summary.mean, summary.sd, ...summary.quantiles];
        for (let k = 0; k < want.length; k++) expect(Math.abs(got[k] - want[k]), `${q} column ${k}`).toBeLessThan(2e-3);
      }
    });
  }
});

// ---------------------------------------------------------------------------------------------
// Independent brute-force integration over (σ, β0, β1)

/** Three sampled sites and one without data, p = 2. */
const SMALL = areaData([
  { id: 'a', x: [-1], y: 0.2, psi: 0.5 },
  { id: 'b', x: [0], y: 1.1, psi: 0.3 },
  { id: 'c', x: [1.5], y: 2.9, psi: 0.8 },
  { id: 'd', x: [0.7] },
]);
/** Six sampled sites and one without data, p = 2. */
const SIX = areaData([
  { id: 'a', x: [-1.2], y: -0.9, psi: 0.4 },
  { id: 'b', x: [-0.4], y: 0.6, psi: 0.9 },
  { id: 'c', x: [0.1], y: 0.1, psi: 0.3 },
  { id: 'd', x: [0.8], y: 2.2, psi: 0.6 },
  { id: 'e', x: [1.3], y: 1.4, psi: 0.5 },
  { id: 'f', x: [2.0], y: 3.9, psi: 1.1 },
  { id: 'g', x: [0.5] },
]);

/** log p(σ) (density of σ, up to a constant) for the three hyperpriors. */
function logPriorSigma(prior: AreaPriors['site_sd'], sigma: number): number {
  switch (prior.kind) {
    case 'uniform':
      return 0;
    case 'half_cauchy':
      return -Math.log1p((sigma / prior.scale) ** 2);
    case 'inverse_gamma': // p(σ²) dσ²/dσ ∝ (σ²)^{−a−1} e^{−b/σ²} σ
      return -(prior.shape + 1) * Math.log(sigma * sigma) - prior.scale / (sigma * sigma) + Math.log(sigma);
  }
}

/** Midpoint cells on [a, b]. */
function cells(a: number, b: number, n: number): { at: number[]; width: number[] } {
  const h = (b - a) / n;
  return { at: Array.from({ length: n }, (_, c) => a + (c + 0.5) * h), width: new Array(n).fill(h) };
}

/**
 * 4-point Gauss–Legendre panels on [a, b] (nodes ±0.3399810435848563, ±0.8611363115940526,
 * weights 0.6521451548625461, 0.3478548451374538; Abramowitz & Stegun 1964, Table 25.4), cut at
 * `splits` so that indicators jumping there are integrated exactly.
 */
function panels(a: number, b: number, n: number, splits: number[]): { at: number[]; width: number[] } {
  const x = [-0.8611363115940526, -0.3399810435848563, 0.3399810435848563, 0.8611363115940526];
  const w = [0.3478548451374538, 0.6521451548625461, 0.6521451548625461, 0.3478548451374538];
  const cuts = [a, ...splits.filter((s) => s > a && s < b).sort((u, v) => u - v), b];
  const at: number[] = [];
  const width: number[] = [];
  for (let k = 0; k + 1 < cuts.length; k++) {
    const count = Math.max(1, Math.round((n * (cuts[k + 1] - cuts[k])) / (b - a)));
    const h = (cuts[k + 1] - cuts[k]) / count;
    for (let c = 0; c < count; c++) {
      for (let g = 0; g < 4; g++) {
        at.push(cuts[k] + (c + 0.5 + 0.5 * x[g]) * h);
        width.push(0.5 * w[g] * h);
      }
    }
  }
  return { at, width };
}

/**
 * What the brute force averages: `cell` over the joint posterior of (σ, β0, β1); `givenB1` over
 * the joint of (σ, β1) — for quantities in which β0 is integrated in closed form given σ and β1 —
 * and `givenB0` likewise over (σ, β0).
 */
interface Functionals {
  cell: (sigma: number, b0: number, b1: number) => number[];
  givenB1: (sigma: number, b1: number) => number[];
  givenB0: (sigma: number, b0: number) => number[];
}

/**
 * Posterior expectations by a product rule over the joint posterior
 * p(σ, β | y) ∝ p(σ) p(β) Π N(y_i | x_iᵀβ, σ² + ψ_i): Gauss–Legendre panels in v = σ/(1 + σ)
 * ∈ (0, 1) (nV panels, cut at `sigmaSplits` so that indicators of σ are exact), and for each σ a
 * 2-D midpoint grid of nB × nB cells over β̃(σ) ± 9 sd (β̃ and sd from the 2 × 2 normal
 * equations, only to place the box; the midpoint rule over the whole box converges geometrically
 * for the Gaussian-shaped integrand). Nothing is shared with src/summaries/exact.ts: no
 * t = log σ grid, no analytic integration over β, no normal mixtures.
 * Returns the `cell`, then `givenB0`, then `givenB1` expectations.
 */
function bruteForce(data: AreaData, priors: AreaPriors, nV: number, nB: number, sigmaSplits: number[], f: Functionals): number[] {
  const rows = [...Array(data.m).keys()].filter((i) => data.hasData[i]);
  const lambda = priors.coefficients.kind === 'normal' ? 1 / priors.coefficients.sd ** 2 : 0;
  const mu0 = priors.coefficients.kind === 'normal' ? priors.coefficients.mean : 0;
  const vCells = panels(0, 1, nV, sigmaSplits.map((s) => s / (1 + s)));
  const logMass: number[] = [];
  const inner: number[][] = [];
  for (let c = 0; c < vCells.at.length; c++) {
    const v = vCells.at[c];
    const sigma = v / (1 - v);
    const jacobian = 1 / (1 - v) ** 2;
    const s2 = rows.map((i) => sigma * sigma + data.variance[i]);
    // 2 × 2 normal equations, only to centre and size the β box.
    let p00 = lambda, p01 = 0, p11 = lambda, r0 = lambda * mu0, r1 = lambda * mu0;
    rows.forEach((i, k) => {
      const x = data.X[i * 2 + 1];
      const w = 1 / s2[k];
      p00 += w;
      p01 += w * x;
      p11 += w * x * x;
      r0 += w * data.direct[i];
      r1 += w * x * data.direct[i];
    });
    const det = p00 * p11 - p01 * p01;
    const centre = [(p11 * r0 - p01 * r1) / det, (p00 * r1 - p01 * r0) / det];
    const sd = [Math.sqrt(p11 / det), Math.sqrt(p00 / det)];
    const axes = [0, 1].map((j) => cells(centre[j] - 9 * sd[j], centre[j] + 9 * sd[j], nB));
    const logJoint = (b0: number, b1: number) => {
      let s = logPriorSigma(priors.site_sd, sigma) - 0.5 * lambda * ((b0 - mu0) ** 2 + (b1 - mu0) ** 2);
      rows.forEach((i, k) => {
        const r = data.direct[i] - b0 - b1 * data.X[i * 2 + 1];
        s -= 0.5 * (Math.log(s2[k]) + (r * r) / s2[k]);
      });
      return s;
    };
    const reference = logJoint(centre[0], centre[1]);
    let mass = 0;
    let sums: number[] = [];
    const marginal0 = new Array(nB).fill(0);
    const marginal1 = new Array(nB).fill(0);
    for (let a = 0; a < nB; a++) {
      for (let b = 0; b < nB; b++) {
        const b0 = axes[0].at[a];
        const b1 = axes[1].at[b];
        const w = Math.exp(logJoint(b0, b1) - reference) * axes[0].width[a] * axes[1].width[b];
        const values = f.cell(sigma, b0, b1);
        if (sums.length === 0) sums = new Array(values.length).fill(0);
        mass += w;
        marginal0[a] += w;
        marginal1[b] += w;
        for (let k = 0; k < values.length; k++) sums[k] += w * values[k];
      }
    }
    for (const [marginal, axis, g] of [[marginal0, axes[0], f.givenB0], [marginal1, axes[1], f.givenB1]] as const) {
      let partial: number[] = [];
      for (let a = 0; a < nB; a++) {
        const values = g(sigma, axis.at[a]);
        if (partial.length === 0) partial = new Array(values.length).fill(0);
        for (let k = 0; k < values.length; k++) partial[k] += marginal[a] * values[k];
      }
      sums.push(...partial);
    }
    logMass.push(reference + Math.log(mass * jacobian * vCells.width[c]));
    inner.push(sums.map((s) => s / mass));
  }
  const top = Math.max(...logMass.filter(Number.isFinite));
  const weights = logMass.map((l) => (Number.isFinite(l) ? Math.exp(l - top) : 0));
  const total = weights.reduce((a, b) => a + b, 0);
  return inner[0].map((_, k) => inner.reduce((s, row, c) => s + (weights[c] ? weights[c] * row[k] : 0), 0) / total);
}

/**
 * Checks every finite summary of `post` against the brute force at two resolutions: moments
 * (mean, second moment), the brute-force CDF at the exact quantiles (must equal the
 * probabilities) and the mean weight on the direct estimate. Both rules converge geometrically,
 * so the finer run's error is far below |fine − coarse|; the tolerance is 2|fine − coarse| plus
 * 1e-9 for the exact method's own error (see the halving tests), and the brute force must itself
 * have settled to 1e-6 for the check to count.
 */
function checkAgainstBruteForce(data: AreaData, priors: AreaPriors, post: ExactAreaPosterior): void {
  const sampled = [...Array(data.m).keys()].map((i) => data.hasData[i] === 1);
  const rows = [...Array(data.m).keys()].filter((i) => sampled[i]);
  const lambda = priors.coefficients.kind === 'normal' ? 1 / priors.coefficients.sd ** 2 : 0;
  const mu0 = priors.coefficients.kind === 'normal' ? priors.coefficients.mean : 0;
  type Summary = { mean: number; sd: number; quantiles: number[] };
  const names: string[] = [];
  const targets: number[] = [];
  const add = (name: string, value: number) => {
    names.push(name);
    targets.push(value);
  };
  const addMoments = (label: string, s: Summary) => {
    if (Number.isFinite(s.mean)) add(`${label} mean`, s.mean);
    if (Number.isFinite(s.sd)) add(`${label} second moment`, s.sd * s.sd + s.mean * s.mean);
  };
  const addCdf = (label: string, s: Summary) => s.quantiles.forEach((_, k) => add(`${label} P(≤ q${PROBS[k]})`, PROBS[k]));
  const moments = (value: number, second: number, s: Summary, out: number[]) => {
    if (Number.isFinite(s.mean)) out.push(value);
    if (Number.isFinite(s.sd)) out.push(second);
  };
  const sites = post.sites;

  // Expected order: cell (σ moments and CDF, β moments, θ moments and γ), givenB0 (β1 CDF),
  // givenB1 (β0 CDF, θ CDFs).
  addMoments('sigma', post.siteSd);
  addCdf('sigma', post.siteSd);
  addMoments('beta0', post.coefficients[0]);
  addMoments('beta1', post.coefficients[1]);
  sites.forEach((s, i) => {
    addMoments(`theta_${data.siteIds[i]}`, s);
    if (sampled[i]) add(`gamma_${data.siteIds[i]}`, post.weightDirect[i]);
  });
  addCdf('beta1', post.coefficients[1]);
  addCdf('beta0', post.coefficients[0]);
  sites.forEach((s, i) => addCdf(`theta_${data.siteIds[i]}`, s));

  const cell = (sigma: number, b0: number, b1: number): number[] => {
    const out: number[] = [];
    moments(sigma, sigma * sigma, post.siteSd, out);
    for (const q of post.siteSd.quantiles) out.push(sigma <= q ? 1 : 0);
    moments(b0, b0 * b0, post.coefficients[0], out);
    moments(b1, b1 * b1, post.coefficients[1], out);
    for (let i = 0; i < data.m; i++) {
      const eta = b0 + b1 * data.X[i * 2 + 1];
      if (sampled[i]) {
        const gamma = (sigma * sigma) / (sigma * sigma + data.variance[i]);
        const mean = gamma * data.direct[i] + (1 - gamma) * eta;
        moments(mean, gamma * data.variance[i] + mean * mean, sites[i], out);
        out.push(gamma);
      } else moments(eta, sigma * sigma + eta * eta, sites[i], out);
    }
    return out;
  };
  // Given σ and one coefficient, the joint is Gaussian in the other alone: precision
  // Σ w x_j² + λ, mean (Σ w x_j (y − x_other β_other) + λ μ₀) / precision. Integrating it in
  // closed form keeps the CDFs smooth on the grid (given β0 too, θ_i | σ, β has variance γψ → 0
  // as σ → 0, a step the midpoint grid could not resolve).
  const conditional = (sigma: number, other: number, j: 0 | 1) => {
    let precision = lambda;
    let weighted = lambda * mu0;
    for (const i of rows) {
      const w = 1 / (sigma * sigma + data.variance[i]);
      const x = [1, data.X[i * 2 + 1]];
      precision += w * x[j] * x[j];
      weighted += w * x[j] * (data.direct[i] - x[1 - j] * other);
    }
    return { mean: weighted / precision, variance: 1 / precision };
  };
  const givenB0 = (sigma: number, b0: number): number[] => {
    const c = conditional(sigma, b0, 1);
    return post.coefficients[1].quantiles.map((q) => normalCdf((q - c.mean) / Math.sqrt(c.variance)));
  };
  const givenB1 = (sigma: number, b1: number): number[] => {
    const c = conditional(sigma, b1, 0);
    const out = post.coefficients[0].quantiles.map((q) => normalCdf((q - c.mean) / Math.sqrt(c.variance)));
    for (let i = 0; i < data.m; i++) {
      const x = data.X[i * 2 + 1];
      let mean = c.mean + b1 * x;
      let variance = sigma * sigma + c.variance;
      if (sampled[i]) {
        const gamma = (sigma * sigma) / (sigma * sigma + data.variance[i]);
        mean = gamma * data.direct[i] + (1 - gamma) * mean;
        variance = gamma * data.variance[i] + (1 - gamma) ** 2 * c.variance;
      }
      for (const q of sites[i].quantiles) out.push(normalCdf((q - mean) / Math.sqrt(variance)));
    }
    return out;
  };
  const functionals = { cell, givenB0, givenB1 };
  const coarse = bruteForce(data, priors, 20, 30, post.siteSd.quantiles, functionals);
  const fine = bruteForce(data, priors, 40, 40, post.siteSd.quantiles, functionals);
  expect(fine).toHaveLength(targets.length);
  for (let k = 0; k < targets.length; k++) {
    const difference = Math.abs(fine[k] - coarse[k]);
    const scale = Math.max(1, Math.abs(fine[k]));
    expect(difference / scale, `${names[k]}: brute force not converged`).toBeLessThan(1e-6);
    expect(Math.abs(targets[k] - fine[k]), names[k]).toBeLessThanOrEqual(2 * difference + 1e-9 * scale);
  }
}

describe('against brute-force integration over (σ, β) (independent quadrature; common practice)', () => {
  const normal = { kind: 'normal', mean: 0, sd: 5 } as const;
  const flat = { kind: 'flat' } as const;
  const cases: [string, AreaData, AreaPriors][] = [
    ['3 sites, normal β, uniform σ (κ = 2: sd of σ infinite)', SMALL, { coefficients: normal, site_sd: { kind: 'uniform' } }],
    ['3 sites, normal β, half-Cauchy(1)', SMALL, { coefficients: normal, site_sd: { kind: 'half_cauchy', scale: 1 } }],
    ['3 sites, normal β, inverse-gamma(2, 1)', SMALL, { coefficients: normal, site_sd: { kind: 'inverse_gamma', shape: 2, scale: 1 } }],
    ['3 sites, flat β, half-Cauchy(1) (κ = 2)', SMALL, { coefficients: flat, site_sd: { kind: 'half_cauchy', scale: 1 } }],
    ['3 sites, flat β, inverse-gamma(2, 1)', SMALL, { coefficients: flat, site_sd: { kind: 'inverse_gamma', shape: 2, scale: 1 } }],
    ['6 sites, flat β, uniform σ', SIX, { coefficients: flat, site_sd: { kind: 'uniform' } }],
    ['6 sites, flat β, half-Cauchy(0.5)', SIX, { coefficients: flat, site_sd: { kind: 'half_cauchy', scale: 0.5 } }],
    ['6 sites, normal β, inverse-gamma(1, 0.5)', SIX, { coefficients: normal, site_sd: { kind: 'inverse_gamma', shape: 1, scale: 0.5 } }],
  ];
  for (const [name, data, priors] of cases) {
    test(name, () => {
      const post = exactAreaPosterior(data, priors, PROBS);
      checkAgainstBruteForce(data, priors, post);
    });
  }

  test('infinite moments are reported as Infinity where the tail exponent says so', () => {
    // 3 sites, normal β, uniform σ: p(t | y) ~ e^{−2t}, so E σ is finite, E σ² is not.
    const a = exactAreaPosterior(SMALL, { coefficients: { kind: 'normal', mean: 0, sd: 5 }, site_sd: { kind: 'uniform' } });
    expect(Number.isFinite(a.siteSd.mean)).toBe(true);
    expect(a.siteSd.sd).toBe(Infinity);
    expect(a.sites[3].sd).toBe(Infinity); // unsampled: variance σ² + …
    expect(Number.isFinite(a.sites[0].sd)).toBe(true);
    expect(Number.isFinite(a.coefficients[1].sd)).toBe(true); // normal prior bounds Var(β | σ)
    // 3 sites, flat β, half-Cauchy: same exponent; now Var(β | σ) grows like σ² too.
    const b = exactAreaPosterior(SMALL, { coefficients: { kind: 'flat' }, site_sd: { kind: 'half_cauchy', scale: 1 } });
    expect(b.coefficients[1].sd).toBe(Infinity);
    expect(Number.isFinite(b.coefficients[1].mean)).toBe(true);
  });
});

// ---------------------------------------------------------------------------------------------
// Closed-form limits

/** BLUP of θ_i and its MSE g1 + g2 at a known σ² (Rao & Molina 2015 §6.1; Prasad & Rao 1990). */
function blup(data: AreaData, priors: AreaPriors, sigma2: number): { mean: number[]; sd: number[] } {
  const lambda = priors.coefficients.kind === 'normal' ? 1 / priors.coefficients.sd ** 2 : 0;
  const mu0 = priors.coefficients.kind === 'normal' ? priors.coefficients.mean : 0;
  let p00 = lambda, p01 = 0, p11 = lambda, r0 = lambda * mu0, r1 = lambda * mu0;
  for (let i = 0; i < data.m; i++) {
    if (!data.hasData[i]) continue;
    const x = data.X[i * 2 + 1];
    const w = 1 / (sigma2 + data.variance[i]);
    p00 += w;
    p01 += w * x;
    p11 += w * x * x;
    r0 += w * data.direct[i];
    r1 += w * x * data.direct[i];
  }
  const det = p00 * p11 - p01 * p01;
  const beta = [(p11 * r0 - p01 * r1) / det, (p00 * r1 - p01 * r0) / det];
  const mean: number[] = [];
  const sd: number[] = [];
  for (let i = 0; i < data.m; i++) {
    const x = data.X[i * 2 + 1];
    const eta = beta[0] + beta[1] * x;
    const g2 = (p11 - 2 * p01 * x + p00 * x * x) / det; // x_iᵀ P⁻¹ x_i
    if (data.hasData[i]) {
      const gamma = sigma2 / (sigma2 + data.variance[i]);
      mean.push(gamma * data.direct[i] + (1 - gamma) * eta);
      sd.push(Math.sqrt(gamma * data.variance[i] + (1 - gamma) ** 2 * g2));
    } else {
      mean.push(eta);
      sd.push(Math.sqrt(sigma2 + g2));
    }
  }
  return { mean, sd };
}

describe('closed-form limits', () => {
  test('inverse-gamma prior concentrating at σ₀² = 0.5: θ means tend to the BLUP, sds to √(g1 + g2) (Rao & Molina 2015 §6.1, recalled)', () => {
    // σ² ~ IG(a, a σ₀²) has E σ² = σ₀² a/(a − 1), Var σ² ≈ σ₀⁴/a. The posterior of σ² is then
    // within O(1/a) of σ₀² as well, so by the delta method mean − BLUP ≈ BLUP′·δ + ½BLUP″·V with
    // δ, V = O(σ₀²/a). Tolerance: 10 × that first-order bound (derivatives by central differences).
    const sigma0 = 0.5;
    for (const coefficients of [{ kind: 'flat' } as const, { kind: 'normal', mean: 0, sd: 5 } as const]) {
      const priorsFor = (a: number): AreaPriors => ({ coefficients, site_sd: { kind: 'inverse_gamma', shape: a, scale: a * sigma0 } });
      const base = blup(SIX, priorsFor(1), sigma0);
      const e = 1e-3 * sigma0;
      const up = blup(SIX, priorsFor(1), sigma0 + e);
      const down = blup(SIX, priorsFor(1), sigma0 - e);
      const deviations: number[] = [];
      for (const a of [1e4, 1e6]) {
        const post = exactAreaPosterior(SIX, priorsFor(a));
        let worst = 0;
        for (let i = 0; i < SIX.m; i++) {
          const d1 = (up.mean[i] - down.mean[i]) / (2 * e);
          const d2 = (up.mean[i] - 2 * base.mean[i] + down.mean[i]) / (e * e);
          const s1 = (up.sd[i] - down.sd[i]) / (2 * e);
          const s2 = (up.sd[i] - 2 * base.sd[i] + down.sd[i]) / (e * e);
          const shift = (2 * sigma0) / a; // ≥ |E σ² − σ₀²| for prior and posterior at this a
          const spread = (4 * sigma0 * sigma0) / a; // ≥ Var σ²
          expect(Math.abs(post.sites[i].mean - base.mean[i])).toBeLessThan(10 * (Math.abs(d1) * shift + 0.5 * Math.abs(d2) * spread) + 1e-9);
          expect(Math.abs(post.sites[i].sd - base.sd[i])).toBeLessThan(10 * (Math.abs(s1) * shift + 0.5 * Math.abs(s2) * spread) + 1e-9);
          worst = Math.max(worst, Math.abs(post.sites[i].mean - base.mean[i]));
        }
        deviations.push(worst);
      }
      // …and the approach is O(1/a): a hundred times the shape, a hundredth of the deviation.
      const ratio = deviations[1] / deviations[0];
      expect(ratio).toBeGreaterThan(0.005);
      expect(ratio).toBeLessThan(0.02);
    }
  });

  test('half-Cauchy prior with scale A → 0: θ tends to the regression-synthetic estimate at σ = 0, and the weight on the data to 0, both O(A)', () => {
    // With A ≪ 1 all but O(A) of the posterior mass of σ sits within a few A of 0, where
    // γ_i = σ²/(σ² + ψ_i) ≈ 0 (common practice: the half-Cauchy tail beyond ε has mass ≈ 2A/(πε)).
    const flat = { kind: 'flat' } as const;
    const limit = blup(SIX, { coefficients: flat, site_sd: { kind: 'uniform' } }, 0);
    const deviations: number[] = [];
    for (const scale of [1e-4, 1e-6]) {
      const post = exactAreaPosterior(SIX, { coefficients: flat, site_sd: { kind: 'half_cauchy', scale } });
      let worst = 0;
      for (let i = 0; i < SIX.m; i++) {
        worst = Math.max(worst, Math.abs(post.sites[i].mean - limit.mean[i]), Math.abs(post.sites[i].sd - limit.sd[i]));
        expect(post.weightDirect[i]).toBeLessThan(100 * scale);
      }
      deviations.push(worst);
    }
    expect(deviations[1]).toBeLessThan(1e-4);
    const ratio = deviations[1] / deviations[0];
    expect(ratio).toBeGreaterThan(0.005);
    expect(ratio).toBeLessThan(0.02);
  });
});

// ---------------------------------------------------------------------------------------------

describe('the marginal density of σ²', () => {
  /** log N(y | X μ₀1, V + s₀² X Xᵀ) by Gaussian elimination (independent of src). */
  function logMarginalLikelihood(data: AreaData, sigma2: number, mu0: number, s0: number): number {
    const rows = [...Array(data.m).keys()].filter((i) => data.hasData[i]);
    const n = rows.length;
    const p = data.p;
    const c = rows.map((i, a) =>
      rows.map((k, b) => {
        let s = a === b ? sigma2 + data.variance[i] : 0;
        for (let j = 0; j < p; j++) s += s0 * s0 * data.X[i * p + j] * data.X[k * p + j];
        return s;
      }),
    );
    const residual = rows.map((i) => {
      let mean = 0;
      for (let j = 0; j < p; j++) mean += data.X[i * p + j] * mu0;
      return data.direct[i] - mean;
    });
    // Eliminate to upper-triangular form (C is SPD: no pivoting needed), accumulating log|C|,
    // then back-substitute z = C⁻¹ r and form rᵀ z.
    const r = [...residual];
    let logDet = 0;
    for (let col = 0; col < n; col++) {
      logDet += Math.log(c[col][col]);
      for (let row = col + 1; row < n; row++) {
        const f = c[row][col] / c[col][col];
        for (let k = col; k < n; k++) c[row][k] -= f * c[col][k];
        r[row] -= f * r[col];
      }
    }
    const z = new Array(n).fill(0);
    for (let row = n - 1; row >= 0; row--) {
      let s = r[row];
      for (let k = row + 1; k < n; k++) s -= c[row][k] * z[k];
      z[row] = s / c[row][row];
    }
    let quad = 0;
    for (let a = 0; a < n; a++) quad += residual[a] * z[a];
    return -0.5 * (logDet + quad);
  }

  test('normal β prior: differences in σ² equal those of log p(σ²) + log N(y | Xμ₀, V + s₀²XXᵀ) (standard Gaussian marginal)', () => {
    const priors: AreaPriors = { coefficients: { kind: 'normal', mean: 0.3, sd: 2 }, site_sd: { kind: 'half_cauchy', scale: 1 } };
    const logPrior = (s2: number) => -0.5 * Math.log(s2) - Math.log1p(s2);
    const at = (s2: number) => logPrior(s2) + logMarginalLikelihood(SIX, s2, 0.3, 2);
    for (const [s2a, s2b] of [[0.01, 1], [0.3, 5], [2, 40]]) {
      const ours = logMarginalSiteVariance(SIX, priors, s2a) - logMarginalSiteVariance(SIX, priors, s2b);
      expect(ours).toBeCloseTo(at(s2a) - at(s2b), 10);
    }
  });

  test('flat β prior is the limit of normal priors as s₀ → ∞ (up to a constant; common practice)', () => {
    const priors: AreaPriors = { coefficients: { kind: 'flat' }, site_sd: { kind: 'inverse_gamma', shape: 1.5, scale: 0.4 } };
    const logPrior = (s2: number) => -2.5 * Math.log(s2) - 0.4 / s2;
    const s0 = 1e4;
    const at = (s2: number) => logPrior(s2) + logMarginalLikelihood(SIX, s2, 0, s0);
    for (const [s2a, s2b] of [[0.05, 1], [0.5, 3]]) {
      const ours = logMarginalSiteVariance(SIX, priors, s2a) - logMarginalSiteVariance(SIX, priors, s2b);
      // The normal prior perturbs the difference by O(1/s₀²) = 1e-8.
      expect(Math.abs(ours - (at(s2a) - at(s2b)))).toBeLessThan(1e-6);
    }
  });
});

describe('numerical convergence', () => {
  function flatten(post: ExactAreaPosterior): number[] {
    const out: number[] = [];
    for (const s of [post.siteSd, ...post.coefficients, ...post.sites]) out.push(s.mean, s.sd, ...s.quantiles);
    out.push(...post.weightDirect);
    return out.filter(Number.isFinite);
  }
  const schools = areaData(
    [28, 8, -3, 7, -1, 1, 18, 12].map((y, i) => ({ id: 'ABCDEFGH'[i], x: [], y, psi: [15, 10, 16, 11, 9, 11, 10, 18][i] ** 2 })),
  );
  const cases: [string, AreaData, AreaPriors][] = [
    ['eight schools, uniform', schools, { coefficients: { kind: 'flat' }, site_sd: { kind: 'uniform' } }],
    ['eight schools, inverse-gamma(0.001, 0.001)', schools, { coefficients: { kind: 'flat' }, site_sd: { kind: 'inverse_gamma', shape: 0.001, scale: 0.001 } }],
    ['six sites, half-Cauchy(0.5)', SIX, { coefficients: { kind: 'normal', mean: 0, sd: 5 }, site_sd: { kind: 'half_cauchy', scale: 0.5 } }],
    ['three sites, uniform', SMALL, { coefficients: { kind: 'normal', mean: 0, sd: 5 }, site_sd: { kind: 'uniform' } }],
  ];
  for (const [name, data, priors] of cases) {
    test(`${name}: halving the grid spacing changes nothing beyond 1e-8 (relative)`, () => {
      const a = flatten(exactAreaPosterior(data, priors, PROBS));
      const b = flatten(exactAreaPosterior(data, priors, PROBS, { spacingFactor: 0.5 }));
      expect(b).toHaveLength(a.length);
      for (let k = 0; k < a.length; k++) expect(Math.abs(a[k] - b[k]) / Math.max(1, Math.abs(b[k]))).toBeLessThan(1e-8);
    });
  }

  test('the σ density returned for plots agrees with log p(σ² | y) + log 2σ (change of variables)', () => {
    const priors: AreaPriors = { coefficients: { kind: 'flat' }, site_sd: { kind: 'uniform' } };
    const post = exactAreaPosterior(schools, priors);
    const { sigma, logDensity } = post.logDensityGrid!;
    const k0 = logDensity.indexOf(Math.max(...logDensity));
    const reference = (k: number) => logMarginalSiteVariance(schools, priors, sigma[k] ** 2) + Math.log(2 * sigma[k]);
    for (const k of [0, Math.floor(k0 / 2), k0, Math.floor((k0 + sigma.length) / 2), sigma.length - 1]) {
      expect(logDensity[k] - logDensity[k0]).toBeCloseTo(reference(k) - reference(k0), 9);
    }
    // Normalised: ∫ p(σ) dσ = ∫ p(σ) σ d(log σ), trapezoid on the uniform log σ grid.
    const h = Math.log(sigma[1] / sigma[0]);
    let integral = 0;
    for (let k = 0; k < sigma.length; k++) integral += Math.exp(logDensity[k]) * sigma[k] * h * (k === 0 || k === sigma.length - 1 ? 0.5 : 1);
    expect(integral).toBeCloseTo(1, 12);
  });
});

describe('units do not matter (equivariance of the flat-β model; common practice)', () => {
  const rel = (a: number, b: number) => Math.abs(a - b) / Math.max(1e-300, Math.abs(b));
  test('y and √ψ in other units (× 1e4), a large offset (+1e6) and a covariate × 1e6 give the transformed posterior', () => {
    const base = exactAreaPosterior(SIX, { coefficients: { kind: 'flat' }, site_sd: { kind: 'half_cauchy', scale: 0.5 } });
    const c = 1e4;
    const d = 1e6;
    const moved = areaData(
      [...Array(SIX.m).keys()].map((i) => ({
        id: SIX.siteIds[i],
        x: [SIX.X[i * 2 + 1] * 1e6],
        ...(SIX.hasData[i] ? { y: c * SIX.direct[i] + d, psi: c * c * SIX.variance[i] } : {}),
      })),
    );
    const post = exactAreaPosterior(moved, { coefficients: { kind: 'flat' }, site_sd: { kind: 'half_cauchy', scale: 0.5 * c } });
    expect(rel(post.siteSd.mean, c * base.siteSd.mean)).toBeLessThan(1e-9);
    expect(rel(post.siteSd.sd, c * base.siteSd.sd)).toBeLessThan(1e-9);
    post.siteSd.quantiles.forEach((q, k) => expect(rel(q, c * base.siteSd.quantiles[k])).toBeLessThan(1e-9));
    expect(rel(post.coefficients[0].mean, c * base.coefficients[0].mean + d)).toBeLessThan(1e-9);
    expect(rel(post.coefficients[1].sd, (c / 1e6) * base.coefficients[1].sd)).toBeLessThan(1e-9);
    for (let i = 0; i < SIX.m; i++) {
      expect(rel(post.sites[i].mean, c * base.sites[i].mean + d)).toBeLessThan(1e-9);
      expect(rel(post.sites[i].sd, c * base.sites[i].sd)).toBeLessThan(1e-8);
      post.sites[i].quantiles.forEach((q, k) => expect(Math.abs(q - (c * base.sites[i].quantiles[k] + d)) / (c * base.sites[i].sd)).toBeLessThan(1e-8));
      expect(Math.abs(post.weightDirect[i] - base.weightDirect[i])).toBeLessThan(1e-10);
    }
  });
});

describe('improper posteriors and bad input', () => {
  test('uniform σ prior with a flat β prior needs p + 2 sites with data', () => {
    expectUserError(
      () => exactAreaPosterior(SMALL, { coefficients: { kind: 'flat' }, site_sd: { kind: 'uniform' } }),
      'data',
      /improper.*at least 4 sites with a direct estimate \(found 3\)/,
    );
  });

  test('a flat β prior needs covariates of full rank among the sites with data', () => {
    const collinear = areaData([
      { id: 'a', x: [1, 2], y: 0.2, psi: 0.5 },
      { id: 'b', x: [2, 4], y: 1.1, psi: 0.3 },
      { id: 'c', x: [3, 6], y: 2.9, psi: 0.8 },
      { id: 'd', x: [4, 8], y: 2.0, psi: 0.8 },
      { id: 'e', x: [5, 11] }, // breaks the collinearity, but has no data
    ]);
    expectUserError(
      () => exactAreaPosterior(collinear, { coefficients: { kind: 'flat' }, site_sd: { kind: 'half_cauchy', scale: 1 } }),
      'data',
      /covariate 'x2' is collinear/,
    );
    // A normal prior identifies β anyway.
    const post = exactAreaPosterior(collinear, { coefficients: { kind: 'normal', mean: 0, sd: 3 }, site_sd: { kind: 'half_cauchy', scale: 1 } });
    expect(Number.isFinite(post.sites[4].mean)).toBe(true);
  });

  test('prior parameters out of range and bad sampling variances are named', () => {
    expectUserError(
      () => exactAreaPosterior(SIX, { coefficients: { kind: 'flat' }, site_sd: { kind: 'inverse_gamma', shape: 1, scale: 0 } }),
      'config',
      /inverse_gamma shape and scale must be positive/,
    );
    const bad = areaData([
      { id: 'a', x: [1], y: 0.2, psi: 0.5 },
      { id: 'b', x: [2], y: 1.1, psi: 0 },
      { id: 'c', x: [3], y: 2.9, psi: 0.8 },
    ]);
    expectUserError(
      () => exactAreaPosterior(bad, { coefficients: { kind: 'normal', mean: 0, sd: 1 }, site_sd: { kind: 'half_cauchy', scale: 1 } }),
      'data',
      /site 'b': sampling variance must be positive/,
    );
    expect(() => exactAreaPosterior(SIX, { coefficients: { kind: 'flat' }, site_sd: { kind: 'uniform' } }, [0.5, 1])).toThrow(RangeError);
  });
});
