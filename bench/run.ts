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
import { mkdtempSync, rmSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { performance } from 'node:perf_hooks';
import { runFit } from '../src/pipeline/fit.js';
import { renderReport } from '../src/report/index.js';
import { createRng } from '../src/sampler/rng.js';
import { normal } from '../src/sampler/variates.js';
import { readFile } from 'node:fs/promises';
import { spawnSync } from 'node:child_process';
import { fileURLToPath } from 'node:url';

interface Scenario {
  name: string;
  sites: number;
  siteSd: number;
  method: 'collapsed' | 'plain';
  /** Also render the PDF report of the run and time it. */
  report?: boolean;
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

function median(values: number[]): number {
  const v = [...values].sort((a, b) => a - b);
  const h = (v.length - 1) / 2;
  return (v[Math.floor(h)] + v[Math.ceil(h)]) / 2;
}

async function essFigures(runDir: string): Promise<{ sigma: number; medianSite: number }> {
  const text = await readFile(join(runDir, 'diagnostics.csv'), 'utf8');
  const rows = text.trim().split('\n').slice(1).map((l) => l.split(','));
  const sigma = Number(rows.find((r) => r[0] === 'site_sd')![2]);
  const sites = rows.filter((r) => r[0].startsWith('site:')).map((r) => Number(r[2]));
  return { sigma, medianSite: median(sites) };
}

async function runScenario(s: Scenario): Promise<void> {
  const dir = mkdtempSync(join(tmpdir(), 'shrinkwell-bench-'));
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
    if (s.report) {
      const begin = performance.now();
      const report = await renderReport(outcome.runDir);
      const reportSeconds = (performance.now() - begin) / 1000;
      console.log(
        `${''.padEnd(38)} report: ${reportSeconds.toFixed(1)} s, ${report.pages ?? 0} pages` +
          (report.warning ? ` (${report.warning})` : ''),
      );
    }
  } finally {
    rmSync(dir, { recursive: true, force: true });
  }
}

const scenarios: Scenario[] = [
  { name: '3000 sites, σ_u = 0.5', sites: 3000, siteSd: 0.5, method: 'collapsed', report: true },
  { name: '3000 sites, σ_u = 0.01', sites: 3000, siteSd: 0.01, method: 'collapsed' },
  { name: '3000 sites, σ_u = 0.5', sites: 3000, siteSd: 0.5, method: 'plain' },
  { name: '3000 sites, σ_u = 0.01', sites: 3000, siteSd: 0.01, method: 'plain' },
];

/**
 * Each scenario runs in its own process so its peak RSS is its own (worker threads included:
 * they share the process).
 */
const child = process.argv.indexOf('--scenario');
if (child >= 0) {
  await runScenario(scenarios[Number(process.argv[child + 1])]);
  console.log(`${''.padEnd(38)} peak RSS ${(process.resourceUsage().maxRSS / 1024).toFixed(0)} MB`);
} else {
  const only = process.argv[2];
  console.log(`area model: ${CHAINS} chains × (${WARMUP} warmup + ${DRAWS} draws), 3 covariates`);
  scenarios.forEach((s, k) => {
    if (only && s.method !== only) return;
    spawnSync(process.execPath, [fileURLToPath(import.meta.url), '--scenario', String(k)], { stdio: 'inherit' });
  });
  // Unit model: streaming ingest and fit at 100k and 1M rows (bench/unit.ts); `npm run bench -- unit` alone.
  if (!only || only === 'unit') spawnSync(process.execPath, [fileURLToPath(new URL('./unit.js', import.meta.url))], { stdio: 'inherit' });
  // Counts model: 3,000 sites, trials 5–500 (bench/counts.ts); `npm run bench -- counts` alone.
  if (!only || only === 'counts') spawnSync(process.execPath, [fileURLToPath(new URL('./counts.js', import.meta.url))], { stdio: 'inherit' });
}
