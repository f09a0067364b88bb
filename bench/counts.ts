/**
 * Counts model benchmark (part of `npm run bench`; not a test): 3,000 sites with 5–500 trials
 * each, 2 covariates, 4 chains × (1,000 warmup + 2,500 draws). Wall seconds for fit +
 * diagnostics + outputs, bulk ESS per draw and per second for σ_u and the median site, peak
 * RSS. Two truths — a clear between-site spread (σ_u = 0.5 on the logit scale) and σ_u near
 * zero (0.01, the corner where plain Gibbs stalls) — each with the default collapsed sampler and
 * with plain Gibbs after the same Pólya–Gamma draws. Target on a 2-core machine: ≤ 15 s.
 *
 * Each scenario runs in its own process, so its peak RSS is its own.
 */
import { writeFileSync } from 'node:fs';
import { join } from 'node:path';
import { fileURLToPath } from 'node:url';
import { childScenario, printPeakRss, runInChildren, timeFit, type FitScenario } from './fit-scenario.js';
import { createRng } from '../src/sampler/rng.js';
import { normal } from '../src/sampler/variates.js';

interface Scenario extends FitScenario {
  sites: number;
  siteSd: number;
}

const CHAINS = 4;
const WARMUP = 1000;
const DRAWS = 2500;

/** Binomial(n, p) as n Bernoulli trials (set-up only, n ≤ 500). */
function binomial(rng: ReturnType<typeof createRng>, n: number, p: number): number {
  let cases = 0;
  for (let j = 0; j < n; j++) if (rng.uniform() < p) cases++;
  return cases;
}

/** Writes a sites file simulated from the counts model, and its config. */
function writeScenario(dir: string, s: Scenario): string {
  const rng = createRng(17, 0);
  const lines = ['site,x1,x2,trials,cases'];
  for (let i = 0; i < s.sites; i++) {
    const x = [normal(rng), normal(rng)];
    const trials = 5 + Math.floor(rng.uniform() * 496);
    const eta = -1.2 + 0.5 * x[0] - 0.3 * x[1] + s.siteSd * normal(rng);
    const cases = binomial(rng, trials, 1 / (1 + Math.exp(-eta)));
    lines.push(`S${i + 1},${x.map((v) => v.toFixed(5)).join(',')},${trials},${cases}`);
  }
  writeFileSync(join(dir, 'sites.csv'), lines.join('\n') + '\n');
  const config = [
    `title: counts benchmark ${s.name}`,
    'measure: { name: Simulated share, unit: share, decimals: 3 }',
    'sites: { file: sites.csv, id: site }',
    'model:',
    '  kind: counts',
    '  cases: cases',
    '  trials: trials',
    '  covariates: [x1, x2]',
    '  priors: { coefficients: flat, site_sd: { half_cauchy: { scale: 1 } } }',
    `sampling: { chains: ${CHAINS}, warmup: ${WARMUP}, draws: ${DRAWS}, seed: 11, method: ${s.method} }`,
  ].join('\n');
  writeFileSync(join(dir, 'config.yaml'), config + '\n');
  return join(dir, 'config.yaml');
}

async function runScenario(s: Scenario): Promise<void> {
  await timeFit(s, CHAINS * DRAWS, (dir) => writeScenario(dir, s));
}

const scenarios: Scenario[] = [
  { name: '3000 sites, σ_u = 0.5', sites: 3000, siteSd: 0.5, method: 'collapsed' },
  { name: '3000 sites, σ_u = 0.01', sites: 3000, siteSd: 0.01, method: 'collapsed' },
  { name: '3000 sites, σ_u = 0.5', sites: 3000, siteSd: 0.5, method: 'plain' },
  { name: '3000 sites, σ_u = 0.01', sites: 3000, siteSd: 0.01, method: 'plain' },
];

/** Runs every scenario (or those of one method), each in a child process of this file. */
export function countsBenchmark(only?: string): void {
  console.log(`counts model: ${CHAINS} chains × (${WARMUP} warmup + ${DRAWS} draws), trials 5–500, 2 covariates`);
  runInChildren(fileURLToPath(import.meta.url), '--counts-scenario', scenarios, only);
}

const child = childScenario('--counts-scenario');
if (child >= 0) {
  await runScenario(scenarios[child]);
  printPeakRss();
} else if (process.argv[1] === fileURLToPath(import.meta.url)) {
  countsBenchmark(process.argv[2]);
}
