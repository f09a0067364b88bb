/**
 * `node dist/bench/exact.js [sites] [coefficients]`: speed of the exact area posterior
 * (src/summaries/exact.ts), which runs inside every fit as the auditor's certificate. Not a test.
 *
 * Generated data (seeded): 3,000 sites, p = 4 (intercept + 3 covariates), σ_u = 0.7, ψ_i in
 * (0.1, 2.1). Scenarios: every site sampled; 90% sampled; 10% sampled; 1% sampled (the wide
 * posterior of σ_u with its long tail, the slowest case). Each is timed for the three site_sd
 * priors with no quantiles (means and sds only, as the certificate needs), 2 and 5 probabilities
 * (the median of 5 repeats).
 * Target on a 2-core machine: ≤ 0.5 s for 3,000 sites, p = 4, all or most sites sampled.
 */
import { performance } from 'node:perf_hooks';
import type { ScalePrior } from '../src/config/types.js';
import type { AreaData } from '../src/data/types.js';
import { createRng } from '../src/sampler/rng.js';
import { normal } from '../src/sampler/variates.js';
import { exactAreaPosterior } from '../src/summaries/exact.js';

function makeData(m: number, p: number, sampledShare: number, seed: number): AreaData {
  const rng = createRng(seed, 0);
  const X = new Float64Array(m * p);
  const direct = new Float64Array(m).fill(Number.NaN);
  const variance = new Float64Array(m).fill(Number.NaN);
  const hasData = new Uint8Array(m);
  for (let i = 0; i < m; i++) {
    X[i * p] = 1;
    let eta = 2;
    for (let j = 1; j < p; j++) {
      X[i * p + j] = normal(rng);
      eta += 0.5 * X[i * p + j];
    }
    const theta = eta + 0.7 * normal(rng);
    const psi = 0.1 + 2 * rng.uniform();
    if (rng.uniform() < sampledShare || i < p + 3) {
      hasData[i] = 1;
      variance[i] = psi;
      direct[i] = theta + Math.sqrt(psi) * normal(rng);
    }
  }
  return {
    m,
    p,
    siteIds: Array.from({ length: m }, (_, i) => `s${i}`),
    labels: Array.from({ length: m }, (_, i) => `Site ${i}`),
    coefficientNames: ['intercept', ...Array.from({ length: p - 1 }, (_, j) => `x${j + 1}`)],
    X,
    direct,
    variance,
    sampleSize: new Float64Array(m).fill(Number.NaN),
    hasData,
    varianceNote: 'generated',
  };
}

const m = Number(process.argv[2] ?? 3000);
const p = Number(process.argv[3] ?? 4);
const priors: [string, ScalePrior][] = [
  ['half_cauchy(1)', { kind: 'half_cauchy', scale: 1 }],
  ['uniform', { kind: 'uniform' }],
  ['inverse_gamma(1, 0.1)', { kind: 'inverse_gamma', shape: 1, scale: 0.1 }],
];
process.stdout.write(`exact area posterior, ${m} sites, p = ${p} (median of 5, ms)\n`);
process.stdout.write(
  `${'sampled'.padEnd(9)}${'site_sd prior'.padEnd(24)}${'means'.padStart(9)}${'2 probs'.padStart(9)}${'5 probs'.padStart(9)}${'grid'.padStart(7)}\n`,
);
for (const share of [1, 0.9, 0.1, 0.01]) {
  const data = makeData(m, p, share, 20261201);
  for (const [name, site_sd] of priors) {
    const times: Record<number, number[]> = { 0: [], 2: [], 5: [] };
    let grid = 0;
    for (let repeat = 0; repeat < 5; repeat++) {
      for (const probs of [[], [0.025, 0.975], [0.025, 0.25, 0.5, 0.75, 0.975]]) {
        const t0 = performance.now();
        const post = exactAreaPosterior(data, { coefficients: { kind: 'flat' }, site_sd }, probs);
        times[probs.length].push(performance.now() - t0);
        grid = post.logDensityGrid?.sigma.length ?? 0;
      }
    }
    const median = (v: number[]) => [...v].sort((a, b) => a - b)[Math.floor(v.length / 2)];
    process.stdout.write(
      `${`${Math.round(share * 100)}%`.padEnd(9)}${name.padEnd(24)}` +
        [0, 2, 5].map((k) => median(times[k]).toFixed(0).padStart(9)).join('') +
        `${String(grid).padStart(7)}\n`,
    );
  }
}
