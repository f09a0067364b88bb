import { resolve } from 'node:path';
import { InvalidArgumentError, type Command } from 'commander';
import { EXIT } from '../errors.js';
import { runFit, type FitOutcome } from '../pipeline/fit.js';
import { progressBar } from './progress.js';

export function describeOutcome(outcome: FitOutcome): string {
  const counts = { publish: 0, caution: 0, suppress: 0 };
  for (const s of outcome.sites) counts[s.flag]++;
  const status = outcome.converged
    ? 'converged'
    : `NOT CONVERGED (${outcome.gate.failing.length} quantities fail the gate, e.g. ${outcome.gate.failing.slice(0, 3).join(', ')}); figures are not final`;
  return (
    `${outcome.runDir}: ${outcome.sites.length} sites — ${counts.publish} publish, ${counts.caution} caution, ` +
    `${counts.suppress} suppress; ${status}; worst R-hat ${outcome.gate.worstRhat.value.toFixed(4)}, ` +
    `lowest bulk ESS ${Math.round(outcome.gate.lowestEssBulk.value)} (${(outcome.timingsMs.total / 1000).toFixed(1)} s)\n`
  );
}

/**
 * Fits with a progress bar. The manifest records the `fit` command that reproduces the run
 * (for a demo too), with absolute paths so it works from any folder.
 */
export async function fitAndReport(configPath: string, outDir: string, threads?: number): Promise<FitOutcome> {
  const bar = progressBar('sampling');
  try {
    return await runFit({
      configPath,
      outDir,
      threads,
      command: ['shrinkwell', 'fit', resolve(configPath), '--out', resolve(outDir)],
      onWarning: (w) => process.stderr.write(`shrinkwell: warning: ${w}\n`),
      onProgress: bar.update,
    });
  } finally {
    bar.finish();
  }
}

export function fitCommand(program: Command): void {
  program
    .command('fit')
    .argument('<config>', 'the run config (YAML)')
    .option('-o, --out <dir>', 'run folder to write', 'shrinkwell-run')
    .option('--threads <n>', 'worker threads (default: one per chain up to the cores); results do not depend on it', (v) => {
      const n = Number(v);
      if (!Number.isInteger(n) || n < 1) throw new InvalidArgumentError('must be a whole number ≥ 1');
      return n;
    })
    .summary('fit the model and write the run folder')
    .description(
      'Fits the hierarchical model of the config by Gibbs sampling and writes the run folder:\n' +
        'estimates.csv (every site: survey figure beside the model estimate, interval, CV, weight\n' +
        'on own data, reliability flag and reasons), parameters.csv, diagnostics.csv, summary.json,\n' +
        'manifest.json and the draws. The folder appears only when complete. If any quantity fails\n' +
        `the convergence gate the outputs are still written, marked not converged, and the exit\n` +
        `code is ${EXIT.notConverged}.`,
    )
    .action(async (configPath: string, opts: { out: string; threads?: number }) => {
      const outcome = await fitAndReport(configPath, opts.out, opts.threads);
      process.stdout.write(describeOutcome(outcome));
      if (!outcome.converged) process.exitCode = EXIT.notConverged;
    });
}
