/**
 * `npm run bench`: speed, mixing and memory of a full fit on generated data (not a test).
 *
 * Area model, 3,000 sites, 3 covariates, 4 chains × (1,000 warmup + 2,500 draws): wall seconds
 * for fit + diagnostics + outputs, bulk ESS per draw and per second for σ_u and for the median
 * site, peak RSS. Run twice: a clear between-site spread, and σ_u near zero (the corner where
 * plain Gibbs stalls), each with the default collapsed sampler and with plain Gibbs beside it.
 * Targets on a 2-core machine: ≤ 5 s, ESS per draw for σ_u ≥ 0.5, peak RSS ≤ 600 MB.
 * The first scenario also renders its PDF report (target ≤ 60 s) and counts its pages.
 */
import { spawnSync } from 'node:child_process';
import { writeFileSync } from 'node:fs';
import { join } from 'node:path';
import { fileURLToPath } from 'node:url';
import { createRng } from '../src/sampler/rng.js';
import { normal } from '../src/sampler/variates.js';
import { childScenario, printPeakRss, runInChildren, timeFit, type FitScenario } from './fit-scenario.js';

interface Scenario extends FitScenario {
  sites: number;
  siteSd: number;
}

const CHAINS = 4;
const WARMUP = 1000;
const DRAWS = 2500;

/** Writes a sites file simulated from the area model, and its config. */
function writeScenario(dir: string, s: Scenario): string {
  const rng = createRng(7, 0);
  const lines = ['site,x1,x2,x3,n,direct,var_direct'];
  for (let i = 0; i < s.sites; i++) {
    const x = [normal(rng), normal(rng), normal(rng)];
    const n = 2 + Math.floor(rng.uniform() * 60);
    const psi = 4 / n;
    const theta = 10 + 0.8 * x[0] - 0.5 * x[1] + 0.3 * x[2] + s.siteSd * normal(rng);
    const y = theta + Math.sqrt(psi) * normal(rng);
    lines.push(`S${i + 1},${x.map((v) => v.toFixed(5)).join(',')},${n},${y.toFixed(6)},${psi.toFixed(6)}`);
  }
  writeFileSync(join(dir, 'sites.csv'), lines.join('\n') + '\n');
  const config = [
    `title: benchmark ${s.name}`,
    'measure: { name: Simulated mean, unit: units, decimals: 2 }',
    'sites: { file: sites.csv, id: site }',
    'model:',
    '  kind: area',
    '  direct: direct',
    '  variance: var_direct',
    '  sample_size: n',
    '  covariates: [x1, x2, x3]',
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
  { name: '3000 sites, σ_u = 0.5', sites: 3000, siteSd: 0.5, method: 'collapsed', report: true },
  { name: '3000 sites, σ_u = 0.01', sites: 3000, siteSd: 0.01, method: 'collapsed' },
  { name: '3000 sites, σ_u = 0.5', sites: 3000, siteSd: 0.5, method: 'plain' },
  { name: '3000 sites, σ_u = 0.01', sites: 3000, siteSd: 0.01, method: 'plain' },
];

const child = childScenario('--scenario');
if (child >= 0) {
  await runScenario(scenarios[child]);
  printPeakRss();
} else {
  const only = process.argv[2];
  console.log(`area model: ${CHAINS} chains × (${WARMUP} warmup + ${DRAWS} draws), 3 covariates`);
  runInChildren(fileURLToPath(import.meta.url), '--scenario', scenarios, only);
  // Unit model: streaming ingest and fit at 100k and 1M rows (bench/unit.ts); `npm run bench -- unit` alone.
  if (!only || only === 'unit') spawnSync(process.execPath, [fileURLToPath(new URL('./unit.js', import.meta.url))], { stdio: 'inherit' });
  // Counts model: 3,000 sites, trials 5–500 (bench/counts.ts); `npm run bench -- counts` alone.
  if (!only || only === 'counts') spawnSync(process.execPath, [fileURLToPath(new URL('./counts.js', import.meta.url))], { stdio: 'inherit' });
}
