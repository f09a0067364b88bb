/**
 * What the model benchmarks share: time one fit of a generated data set through the whole
 * pipeline and print wall seconds, the time split, ESS per draw and per second for σ_u and the
 * median site; and run every scenario in a child process so each peak RSS is its own (worker
 * threads share the process).
 */
import { spawnSync } from 'node:child_process';
import { mkdtempSync, rmSync } from 'node:fs';
import { readFile } from 'node:fs/promises';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { performance } from 'node:perf_hooks';
import { runFit } from '../src/pipeline/fit.js';
import { renderReport } from '../src/report/index.js';

export interface FitScenario {
  name: string;
  method: 'collapsed' | 'plain';
  /** Also render the PDF report of the run and time it. */
  report?: boolean;
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

/** Writes the scenario's data and config into `dir` (returns the config path), fits it and prints the figures. */
export async function timeFit(s: FitScenario, totalDraws: number, write: (dir: string) => string): Promise<void> {
  const dir = mkdtempSync(join(tmpdir(), 'shrinkwell-bench-'));
  try {
    const config = write(dir);
    const start = performance.now();
    const outcome = await runFit({ configPath: config, outDir: join(dir, 'run'), command: ['bench'] });
    const seconds = (performance.now() - start) / 1000;
    const ess = await essFigures(outcome.runDir);
    const t = outcome.timingsMs;
    console.log(
      `${s.name.padEnd(28)} ${s.method.padEnd(9)} wall ${seconds.toFixed(2)} s ` +
        `(read ${t.read} ms, sample ${t.sample} ms, summarize ${t.summarize} ms [diagnostics ${t.diagnostics}, ` +
        `estimates ${t.estimates}, frequentist ${t.frequentist ?? 0}, certificate ${t.certificate ?? 0}, ` +
        `checks ${t.checks ?? 0}], write ${t.write} ms)  ` +
        `ESS/draw σ_u ${(ess.sigma / totalDraws).toFixed(2)}, median site ${(ess.medianSite / totalDraws).toFixed(2)}  ` +
        `ESS/s σ_u ${Math.round(ess.sigma / seconds)}, median site ${Math.round(ess.medianSite / seconds)}  ` +
        `converged ${outcome.converged}`,
    );
    if (s.report) {
      const begin = performance.now();
      const report = await renderReport(outcome.runDir);
      console.log(
        `${''.padEnd(38)} report: ${((performance.now() - begin) / 1000).toFixed(1)} s, ${report.pages ?? 0} pages` +
          (report.warning ? ` (${report.warning})` : ''),
      );
    }
  } finally {
    rmSync(dir, { recursive: true, force: true });
  }
}

/** In a child started by `runInChildren`: the scenario index it was given, else -1. */
export function childScenario(flag: string): number {
  const at = process.argv.indexOf(flag);
  return at >= 0 ? Number(process.argv[at + 1]) : -1;
}

export function printPeakRss(): void {
  console.log(`${''.padEnd(38)} peak RSS ${(process.resourceUsage().maxRSS / 1024).toFixed(0)} MB`);
}

/** Runs `script --flag k` for every scenario k (or those of one sampling method). */
export function runInChildren(script: string, flag: string, scenarios: readonly FitScenario[], only?: string): void {
  scenarios.forEach((s, k) => {
    if (only && s.method !== only) return;
    spawnSync(process.execPath, [script, flag, String(k)], { stdio: 'inherit' });
  });
}
