/**
 * Unit-model benchmark (part of `npm run bench`; alone: `node dist/bench/unit.js [--repeats N]`).
 *
 * Generates a units file of 1,000,000 rows over 3,000 sites (2,900 sampled, uneven sizes, rows in
 * random site order) with 3 covariates, and one of 100,000 rows, then reports:
 * - ingest: seconds to stream the file into per-site statistics, rows per second, peak RSS —
 *   for 100k and 1M rows, to show that memory does not grow with the rows;
 * - one chain of 3,500 sweeps in one thread: the sampler's own cost;
 * - fit: 4 chains × (1,000 warmup + 2,500 draws) through the whole pipeline (sampling,
 *   diagnostics, sampler certificate, outputs), with ESS per draw for σ_u, σ_e and the median
 *   site, and peak RSS — for a clear between-site spread and for σ_u near zero (the corner where
 *   plain Gibbs stalls).
 * Targets on a 2-core machine: ingest ≥ 200,000 rows/s; fit ≤ 5 s; peak RSS ≤ 600 MB and flat in
 * the number of rows. Every measurement runs in its own process, so each peak RSS is its own;
 * ingest runs are repeated (median shown) because the machine is shared.
 */
import { spawnSync } from 'node:child_process';
import { closeSync, mkdtempSync, openSync, readFileSync, rmSync, statSync, writeFileSync, writeSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { performance } from 'node:perf_hooks';
import { fileURLToPath } from 'node:url';
import { loadConfig } from '../src/config/load.js';
import { loadUnitData } from '../src/data/unit-data.js';
import { unitKernel, type UnitState } from '../src/models/unit.js';
import { runFit } from '../src/pipeline/fit.js';
import { runChain } from '../src/sampler/driver.js';
import { createRng } from '../src/sampler/rng.js';
import { normal } from '../src/sampler/variates.js';

const SITES = 3000;
const SAMPLED = 2900;
const CHAINS = 4;
const WARMUP = 1000;
const DRAWS = 2500;

/**
 * Writes sites.csv (population means and sizes of all 3,000 sites) and units.csv (`rows` rows),
 * simulated from the unit model, plus a config. Written in blocks: the generator's own memory
 * does not grow with the rows either.
 */
function writeScenario(dir: string, rows: number, siteSd: number): string {
  const rng = createRng(17, 0);
  const centres = Array.from({ length: SITES }, () => [normal(rng), normal(rng), normal(rng)]);
  const effects = Array.from({ length: SITES }, () => siteSd * normal(rng));
  const sites = ['site,x1,x2,x3,N'];
  centres.forEach((c, i) => sites.push(`S${i + 1},${c.map((v) => (v + 0.05 * normal(rng)).toFixed(5)).join(',')},${5000 + i}`));
  writeFileSync(join(dir, 'sites.csv'), sites.join('\n') + '\n');
  const fd = openSync(join(dir, 'units.csv'), 'w');
  writeSync(fd, 'site,x1,x2,x3,y\n');
  let block: string[] = [];
  for (let r = 0; r < rows; r++) {
    const i = Math.floor(SAMPLED * rng.uniform() ** 1.3); // uneven site sizes
    const c = centres[i];
    const x1 = c[0] + normal(rng);
    const x2 = c[1] + normal(rng);
    const x3 = c[2] + normal(rng);
    const y = 10 + 0.8 * x1 - 0.5 * x2 + 0.3 * x3 + effects[i] + 2 * normal(rng);
    block.push(`S${i + 1},${x1.toFixed(4)},${x2.toFixed(4)},${x3.toFixed(4)},${y.toFixed(4)}`);
    if (block.length === 10_000) {
      writeSync(fd, block.join('\n') + '\n');
      block = [];
    }
  }
  if (block.length > 0) writeSync(fd, block.join('\n') + '\n');
  closeSync(fd);
  const config = [
    `title: unit benchmark, ${rows} rows, σ_u = ${siteSd}`,
    'measure: { name: Simulated mean, unit: units, decimals: 2 }',
    'sites: { file: sites.csv, id: site }',
    'units: { file: units.csv, site: site }',
    'model:',
    '  kind: unit',
    '  response: y',
    '  covariates: [x1, x2, x3]',
    '  priors: { coefficients: flat, site_sd: { half_cauchy: { scale: 1 } }, unit_sd: { uniform: {} } }',
    `sampling: { chains: ${CHAINS}, warmup: ${WARMUP}, draws: ${DRAWS}, seed: 11 }`,
  ].join('\n');
  writeFileSync(join(dir, 'config.yaml'), config + '\n');
  return join(dir, 'config.yaml');
}

const peakRssMb = (): number => process.resourceUsage().maxRSS / 1024;

function median(values: number[]): number {
  const v = [...values].sort((a, b) => a - b);
  const h = (v.length - 1) / 2;
  return (v[Math.floor(h)] + v[Math.ceil(h)]) / 2;
}

/** Child: stream the units file into statistics; prints one JSON line. */
async function ingest(config: string): Promise<void> {
  const { settings } = await loadConfig(config);
  const start = performance.now();
  const { data } = await loadUnitData(settings);
  const seconds = (performance.now() - start) / 1000;
  console.log(JSON.stringify({ rows: data.units, seconds, rss: peakRssMb() }));
}

/** Child: one chain of warmup + draws in this thread (the sampler's own cost); prints one JSON line. */
async function chain(config: string): Promise<void> {
  const { settings } = await loadConfig(config);
  const { data } = await loadUnitData(settings);
  const { priors } = settings.model;
  const kernel = unitKernel({ data, coefficients: priors.coefficients, siteSd: priors.site_sd, unitSd: priors.unit_sd });
  let state: UnitState | undefined;
  const watched = { ...kernel, init: (rng: Parameters<typeof kernel.init>[0]) => (state = kernel.init(rng)) };
  const start = performance.now();
  runChain(watched, { warmup: WARMUP, draws: DRAWS, seed: 11 }, 0);
  const seconds = (performance.now() - start) / 1000;
  console.log(JSON.stringify({ seconds, evaluations: state!.evaluations, groups: new Set(data.n.filter((n) => n > 0)).size }));
}

/** Child: the whole fit; prints one JSON line. */
async function fit(config: string): Promise<void> {
  const start = performance.now();
  const outcome = await runFit({ configPath: config, outDir: join(config, '..', `run-${process.pid}`), command: ['bench'] });
  const seconds = (performance.now() - start) / 1000;
  const rows = readFileSync(join(outcome.runDir, 'diagnostics.csv'), 'utf8').trim().split('\n').slice(1).map((l) => l.split(','));
  const ess = (name: string) => Number(rows.find((r) => r[0] === name)![2]);
  const siteEss = rows.filter((r) => r[0].startsWith('site:')).map((r) => Number(r[2]));
  rmSync(outcome.runDir, { recursive: true, force: true });
  console.log(
    JSON.stringify({
      seconds,
      timings: outcome.timingsMs,
      essSiteSd: ess('site_sd'),
      essUnitSd: ess('unit_sd'),
      essMedianSite: median(siteEss),
      converged: outcome.converged,
      rss: peakRssMb(),
    }),
  );
}

function child(args: string[]): Record<string, unknown> {
  const r = spawnSync(process.execPath, [fileURLToPath(import.meta.url), ...args], { encoding: 'utf8', maxBuffer: 1 << 24 });
  if (r.status !== 0) throw new Error(`benchmark child ${args.join(' ')} failed: ${r.stderr}`);
  const line = r.stdout.trim().split('\n').pop()!;
  return JSON.parse(line) as Record<string, unknown>;
}

async function main(): Promise<void> {
  const at = process.argv.indexOf('--repeats');
  const repeats = at >= 0 ? Number(process.argv[at + 1]) : 3;
  const dir = mkdtempSync(join(tmpdir(), 'shrinkwell-bench-unit-'));
  try {
    console.log(`unit model: ${SITES} sites (${SAMPLED} sampled), 3 covariates; ingest median of ${repeats} runs`);
    const scenarios: Array<{ rows: number; siteSd: number; config: string }> = [];
    for (const [rows, siteSd] of [[100_000, 0.5], [1_000_000, 0.5], [1_000_000, 0.02]] as const) {
      const sub = mkdtempSync(join(dir, 's-'));
      const begin = performance.now();
      const config = writeScenario(sub, rows, siteSd);
      const mb = statSync(join(sub, 'units.csv')).size / 1e6;
      console.log(`  generated ${rows.toLocaleString('en')} rows (${mb.toFixed(0)} MB) in ${((performance.now() - begin) / 1000).toFixed(1)} s`);
      scenarios.push({ rows, siteSd, config });
    }
    for (const s of scenarios.slice(0, 2)) {
      const runs = Array.from({ length: repeats }, () => child(['--ingest', s.config]));
      const seconds = median(runs.map((r) => r.seconds as number));
      const rss = median(runs.map((r) => r.rss as number));
      console.log(
        `  ingest ${s.rows.toLocaleString('en').padStart(9)} rows: ${seconds.toFixed(2)} s (runs ${runs.map((r) => (r.seconds as number).toFixed(2)).join(', ')}), ` +
          `${Math.round(s.rows / seconds).toLocaleString('en')} rows/s, peak RSS ${rss.toFixed(0)} MB`,
      );
    }
    for (const s of [scenarios[1], scenarios[2]]) {
      const runs = Array.from({ length: repeats }, () => child(['--chain', s.config]));
      const seconds = median(runs.map((r) => r.seconds as number));
      const sweeps = WARMUP + DRAWS;
      console.log(
        `  one chain, ${s.rows.toLocaleString('en')} rows, σ_u = ${String(s.siteSd).padEnd(4)}: ${sweeps} sweeps in ${seconds.toFixed(2)} s ` +
          `(runs ${runs.map((r) => (r.seconds as number).toFixed(2)).join(', ')}), ${(runs[0].evaluations as number / sweeps).toFixed(1)} evaluations ` +
          `of the marginal per sweep over ${runs[0].groups} distinct sample sizes`,
      );
    }
    for (const s of [scenarios[1], scenarios[2], scenarios[0]]) {
      const r = child(['--fit', s.config]);
      const t = r.timings as Record<string, number>;
      const draws = CHAINS * DRAWS;
      const per = (v: unknown) => ((v as number) / draws).toFixed(2);
      console.log(
        `  fit ${s.rows.toLocaleString('en').padStart(9)} rows, σ_u = ${String(s.siteSd).padEnd(4)}: ` +
          `read ${(t.read / 1000).toFixed(2)} s, sample ${(t.sample / 1000).toFixed(2)} s, summarize ${(t.summarize / 1000).toFixed(2)} s, write ${(t.write / 1000).toFixed(2)} s; ` +
          `fit (sample + summarize + write) ${((t.sample + t.summarize + t.write) / 1000).toFixed(2)} s; ` +
          `ESS/draw σ_u ${per(r.essSiteSd)}, σ_e ${per(r.essUnitSd)}, median site ${per(r.essMedianSite)}; ` +
          `converged ${r.converged}; peak RSS ${(r.rss as number).toFixed(0)} MB`,
      );
    }
  } finally {
    rmSync(dir, { recursive: true, force: true });
  }
}

const ingestAt = process.argv.indexOf('--ingest');
const fitAt = process.argv.indexOf('--fit');
const chainAt = process.argv.indexOf('--chain');
const generateAt = process.argv.indexOf('--generate'); // --generate DIR ROWS SITE_SD: write one scenario and stop (for profiling)
if (ingestAt >= 0) await ingest(process.argv[ingestAt + 1]);
else if (fitAt >= 0) await fit(process.argv[fitAt + 1]);
else if (chainAt >= 0) await chain(process.argv[chainAt + 1]);
else if (generateAt >= 0) console.log(writeScenario(process.argv[generateAt + 1], Number(process.argv[generateAt + 2]), Number(process.argv[generateAt + 3])));
else await main();
