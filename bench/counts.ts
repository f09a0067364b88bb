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
import { mkdtempSync, rmSync, writeFileSync } from 'node:fs';
import { readFile } from 'node:fs/promises';
import { spawnSync } from 'node:child_process';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { performance } from 'node:perf_hooks';
import { fileURLToPath } from 'node:url';
import { runFit } from '../src/pipeline/fit.js';
import { createRng } from '../src/sampler/rng.js';
import { normal } from '../src/sampler/variates.js';

interface Scenario {
  name: string;
  sites: number;
  siteSd: number;
  method: 'collapsed' | 'plain';
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

function median(values: number[]): number {
  const v = [...values].sort((a, b) => a - b);
  const h = (v.length - 1) / 2;
  return (v[Math.floor(h)] + v[Math.ceil(h)]) / 2;
}

/** Bulk ESS of σ_u and the median bulk ESS over sites, from the run's diagnostics.csv. */
async function essFigures(runDir: string): Promise<{ sigma: number; medianSite: number }> {
  const text = await readFile(join(runDir, 'diagnostics.csv'), 'utf8');
  const rows = text.trim().split('\n').slice(1).map((l) => l.split(','));
  const sigma = Number(rows.find((r) => r[0] === 'site_sd')![2]);
  const sites = rows.filter((r) => r[0].startsWith('site:')).map((r) => Number(r[2]));
  return { sigma, medianSite: median(sites) };
}

async function runScenario(s: Scenario): Promise<void> {
  const dir = mkdtempSync(join(tmpdir(), 'shrinkwell-bench-counts-'));
  try {
    const config = writeScenario(dir, s);
    const start = performance.now();
    const outcome = await runFit({ configPath: config, outDir: join(dir, 'run'), command: ['bench'] });
    const seconds = (performance.now() - start) / 1000;
    const ess = await essFigures(outcome.runDir);
    const total = CHAINS * DRAWS;
    const t = outcome.timingsMs;
    console.log(
      `${s.name.padEnd(28)} ${s.method.padEnd(9)} wall ${seconds.toFixed(2)} s ` +
        `(read ${t.read} ms, sample ${t.sample} ms, summarize ${t.summarize} ms [diagnostics ${t.diagnostics}, estimates ${t.estimates}, frequentist ${t.frequentist ?? 0}, certificate ${t.certificate ?? 0}, checks ${t.checks ?? 0}], write ${t.write} ms)  ` +
        `ESS/draw σ_u ${(ess.sigma / total).toFixed(2)}, median site ${(ess.medianSite / total).toFixed(2)}  ` +
        `ESS/s σ_u ${Math.round(ess.sigma / seconds)}, median site ${Math.round(ess.medianSite / seconds)}  ` +
        `converged ${outcome.converged}`,
    );
  } finally {
    rmSync(dir, { recursive: true, force: true });
  }
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
  scenarios.forEach((s, k) => {
    if (only && s.method !== only) return;
    spawnSync(process.execPath, [fileURLToPath(import.meta.url), '--counts-scenario', String(k)], { stdio: 'inherit' });
  });
}

const child = process.argv.indexOf('--counts-scenario');
if (child >= 0) {
  await runScenario(scenarios[Number(process.argv[child + 1])]);
  console.log(`${''.padEnd(38)} peak RSS ${(process.resourceUsage().maxRSS / 1024).toFixed(0)} MB`);
} else if (process.argv[1] === fileURLToPath(import.meta.url)) {
  countsBenchmark(process.argv[2]);
}
