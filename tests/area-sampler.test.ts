/**
 * The area model's Gibbs samplers against exact answers.
 *
 * Reference: the exact posterior by numerical integration over σ_u with β and θ integrated out
 * analytically (src/summaries/exact.ts, itself checked against independent quadrature values
 * and a brute-force grid in tests/exact.test.ts). The sampler must agree on every site, every
 * coefficient and σ_u, for every hyperprior and both samplers, within Monte Carlo error: the
 * tolerance is a multiple of the run's own Monte Carlo standard error (Vehtari et al. 2021),
 * never a fixed number picked to pass.
 */
import { readFileSync } from 'node:fs';
import { describe, expect, it } from 'vitest';
import type { ScalePrior } from '../src/config/types.js';
import { mcseQuantile } from '../src/diagnostics/quantile-mcse.js';
import { areaQuantities } from '../src/models/area.js';
import { sampleChains } from '../src/sampler/parallel.js';
import { exactAreaPosterior } from '../src/summaries/exact.js';
import { areaData, fitInMemory, type SiteRow } from './support/area-fit.js';

/**
 * z for a two-sided check: with ~15 comparisons per fit and 6 fits, 4.5 MCSE keeps the
 * family-wise false-alarm rate near 90 × 6.8e-6 ≈ 6e-4 (normal tails).
 */
const Z = 4.5;

function fourthCentralMoment(chains: Float64Array[], mean: number): number {
  let sum = 0;
  let count = 0;
  for (const c of chains) for (const v of c) {
    sum += (v - mean) ** 4;
    count++;
  }
  return sum / count;
}

/** A small data set generated once (seeded) from the area model: 10 sites, 2 unsampled. */
function smallData() {
  const rows: SiteRow[] = [
    { id: 'a', x: [-1.2], y: 2.1, psi: 0.8 },
    { id: 'b', x: [-0.7], y: 3.9, psi: 1.5 },
    { id: 'c', x: [-0.2], y: 2.6, psi: 0.4 },
    { id: 'd', x: [0.1], y: 4.4, psi: 2.2 },
    { id: 'e', x: [0.4], y: 3.3, psi: 0.6 },
    { id: 'f', x: [0.8], y: 5.2, psi: 1.1 },
    { id: 'g', x: [1.1], y: 4.1, psi: 0.9 },
    { id: 'h', x: [1.6], y: 6.3, psi: 3.0 },
    { id: 'u1', x: [0.3] },
    { id: 'u2', x: [2.4] },
  ];
  return areaData(rows, ['x']);
}

const priors: Array<[string, ScalePrior]> = [
  ['uniform on σ_u', { kind: 'uniform' }],
  ['half-Cauchy(1)', { kind: 'half_cauchy', scale: 1 }],
  ['inverse-gamma(2, 1) on σ_u²', { kind: 'inverse_gamma', shape: 2, scale: 1 }],
];

describe('area model Gibbs sampler vs exact posterior (numerical integration)', () => {
  const data = smallData();
  for (const method of ['collapsed', 'plain'] as const) {
    for (const [label, siteSd] of priors) {
      it(`${method} sampler, ${label}: every site, coefficient and σ_u within ${Z} MCSE`, async () => {
        const exact = exactAreaPosterior(data, { coefficients: { kind: 'flat' }, site_sd: siteSd });
        const fit = await fitInMemory(data, { siteSd, method, draws: 5000, warmup: 1000, seed: 42 });
        const checks: Array<[string, { mean: number; sd: number }]> = [
          ...data.siteIds.map((id, i) => [`site:${id}`, exact.sites[i]] as [string, { mean: number; sd: number }]),
          ...data.coefficientNames.map((n, j) => [`coef:${n}`, exact.coefficients[j]] as [string, { mean: number; sd: number }]),
          ['site_sd', exact.siteSd],
        ];
        for (const [name, ref] of checks) {
          const q = fit.get(name)!;
          expect(q.essBulk, `${name} bulk ESS`).toBeGreaterThan(400);
          expect(Math.abs(q.mean - ref.mean), `${name} mean ${q.mean} vs exact ${ref.mean}`).toBeLessThan(Z * q.mcseMean);
          // Monte Carlo se of a sample sd: √((μ₄ − σ⁴) / (4σ² ESS)) (delta method), with the
          // fourth central moment from the draws — posteriors of unsampled sites have heavy tails.
          const draws = fit.chainsOf(name);
          const mu4 = fourthCentralMoment(draws, q.mean);
          const seSd = Math.sqrt(Math.max(mu4 - q.sd ** 4, 0) / (4 * q.sd ** 2 * q.essBulk));
          expect(Math.abs(q.sd - ref.sd), `${name} sd`).toBeLessThan(Z * seSd);
        }
      });
    }
  }

  it('normal prior on the coefficients is honoured (fixed prior, not learned)', async () => {
    const coefficients = { kind: 'normal' as const, mean: 0, sd: 0.5 };
    const siteSd: ScalePrior = { kind: 'half_cauchy', scale: 1 };
    const exact = exactAreaPosterior(data, { coefficients, site_sd: siteSd });
    const fit = await fitInMemory(data, { siteSd, coefficients, draws: 5000, seed: 7 });
    data.coefficientNames.forEach((n, j) => {
      const q = fit.get(`coef:${n}`)!;
      expect(Math.abs(q.mean - exact.coefficients[j].mean)).toBeLessThan(Z * q.mcseMean);
    });
    // A tight prior pulls the intercept well below its flat-prior value.
    const flat = exactAreaPosterior(data, { coefficients: { kind: 'flat' }, site_sd: siteSd });
    expect(exact.coefficients[0].mean).toBeLessThan(flat.coefficients[0].mean - 1);
  });
});

describe('eight schools (Rubin 1981, Table 1; Gelman et al. 2013, BDA3 §5.5)', () => {
  // Exact posterior under p(μ, τ) ∝ 1 by independent quadrature: /work/shared/checks
  // eight_schools_posterior_exact.csv (accuracy 1e-3, SOURCES.md §1).
  const checks = new URL('../../shared/checks/', import.meta.url);
  const csv = (name: string) =>
    readFileSync(new URL(name, checks), 'utf8').trim().split('\n').map((l) => l.split(','));
  const dataRows = csv('eight_schools_data.csv').slice(1);
  const exactRows = csv('eight_schools_posterior_exact.csv').slice(1);

  for (const version of ['bda_rounded', 'rubin1981_unrounded'] as const) {
    it(`${version}: Gibbs posterior means and quantiles of θ, μ, τ match the exact values`, async () => {
      const rows: SiteRow[] = dataRows.map((r) =>
        version === 'bda_rounded'
          ? { id: r[0], x: [], y: Number(r[1]), psi: Number(r[2]) ** 2 }
          : { id: r[0], x: [], y: Number(r[3]), psi: Number(r[4]) ** 2 },
      );
      const data = areaData(rows);
      const fit = await fitInMemory(data, { siteSd: { kind: 'uniform' }, draws: 10000, seed: 8, interval: 0.95 });
      const ref = new Map(exactRows.filter((r) => r[0] === version).map((r) => [r[1], r.slice(2).map(Number)]));
      const pairs: Array<[string, string]> = [
        ...rows.map((r) => [`site:${r.id}`, `theta_${r.id}`] as [string, string]),
        ['coef:intercept', 'mu'],
        ['site_sd', 'tau'],
      ];
      for (const [ours, theirs] of pairs) {
        const q = fit.get(ours)!;
        const [mean, sd, q025, , q50, , q975] = ref.get(theirs)!;
        // 1e-3 quadrature accuracy of the reference, plus Monte Carlo error.
        expect(Math.abs(q.mean - mean), `${ours} mean`).toBeLessThan(Z * q.mcseMean + 2e-3);
        // Quantiles within Z of their own Monte Carlo standard errors (Vehtari et al. 2021 §4.3).
        const chains = fit.chainsOf(ours);
        const tol = (prob: number) => Z * mcseQuantile(chains, prob) + 2e-3;
        expect(Math.abs(q.median - q50), `${ours} median`).toBeLessThan(tol(0.5));
        expect(Math.abs(q.lower - q025), `${ours} 2.5%`).toBeLessThan(tol(0.025));
        expect(Math.abs(q.upper - q975), `${ours} 97.5%`).toBeLessThan(tol(0.975));
        expect(sd).toBeGreaterThan(0);
      }
    });
  }
});

describe('Efron & Morris (1975) baseball averages, Table 1', () => {
  // 18 players' batting averages after 45 at-bats, and their rest-of-season averages.
  // On the arcsine scale X_i = √45·arcsin(2y_i − 1) is approximately N(θ_i, 1) (Efron & Morris 1975).
  const rows = readFileSync(new URL('../../shared/checks/baseball_efron_morris_1975.csv', import.meta.url), 'utf8')
    .trim()
    .split('\n')
    .slice(1)
    .map((l) => l.split(','));
  const X = rows.map((r) => Number(r[11]));
  const truth = rows.map((r) => Number(r[12]));
  const js = rows.map((r) => Number(r[13]));

  it('shrinks every player toward the pooled mean and beats the raw averages against the rest of the season', async () => {
    const data = areaData(rows.map((r, i) => ({ id: `p${r[0]}`, x: [], y: X[i], psi: 1 })));
    const fit = await fitInMemory(data, { siteSd: { kind: 'uniform' }, draws: 5000, seed: 3 });
    const grand = X.reduce((a, b) => a + b, 0) / X.length;
    let sseRaw = 0;
    let sseModel = 0;
    data.siteIds.forEach((id, i) => {
      const est = fit.get(`site:${id}`)!.mean;
      // Shrinkage: the estimate lies between the raw value and the pooled mean.
      expect(Math.abs(est - grand)).toBeLessThan(Math.abs(X[i] - grand) + 1e-9);
      sseRaw += (X[i] - truth[i]) ** 2;
      sseModel += (est - truth[i]) ** 2;
    });
    // Published (computed from EM 1975 Table 1, SOURCES.md §2): SSE 17.57 raw vs 5.00 James–Stein.
    expect(sseRaw).toBeCloseTo(17.57, 1);
    expect(sseModel).toBeLessThan(sseRaw / 2);
    // The hierarchical Bayes estimates land close to the James–Stein ones (shrinkage 0.209):
    // both shrink strongly toward the grand mean; the Bayes rule averages over σ_u.
    data.siteIds.forEach((id, i) => expect(Math.abs(fit.get(`site:${id}`)!.mean - js[i])).toBeLessThan(0.5));
  });
});

describe('draws do not depend on the thread count', () => {
  it('4 chains on 1 thread and on 2 worker threads give identical draws', async () => {
    const data = smallData();
    const request = {
      spec: { kind: 'area' as const, data, coefficients: { kind: 'flat' as const }, siteSd: { kind: 'half_cauchy' as const, scale: 1 }, method: 'collapsed' as const },
      plan: { warmup: 50, draws: 200, seed: 99 },
      chains: 4,
    };
    const one = await sampleChains({ ...request, threads: 1 });
    const two = await sampleChains({ ...request, threads: 2 });
    expect(two.length).toBe(4);
    for (let c = 0; c < 4; c++) expect(Buffer.from(two[c].values.buffer).equals(Buffer.from(one[c].values.buffer))).toBe(true);
    // and chains differ from each other (independent streams)
    expect(one[0].values[areaQuantities(data).length]).not.toBe(one[1].values[areaQuantities(data).length]);
  });
});
