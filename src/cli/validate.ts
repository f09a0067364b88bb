import type { Command } from 'commander';
import { loadConfig } from '../config/load.js';
import { prepareFit } from '../pipeline/prepare.js';

export function validateCommand(program: Command): void {
  program
    .command('validate')
    .argument('<config>', 'the run config (YAML)')
    .summary('check a config and its data files without fitting')
    .description(
      'Reads the config and every data file it names and runs all the checks a fit would:\n' +
        'keys and values, columns, numbers, duplicate sites, variances, collinear covariates.\n' +
        'Prints what would be fitted, or the first problem as one line. Writes nothing.',
    )
    .action(async (configPath: string) => {
      const { settings, warnings } = await loadConfig(configPath);
      for (const w of warnings) process.stderr.write(`shrinkwell: warning: ${w}\n`);
      const prepared = await prepareFit(settings);
      const { sites, files } = prepared;
      const sampled = sites.sampled.reduce((a, b) => a + b, 0);
      process.stdout.write(
        `${configPath}: ok — ${settings.model.kind} model, ${sites.m} sites (${sampled} with a sample, ` +
          `${sites.m - sampled} synthetic), coefficients: ${prepared.coefficientNames.join(', ')}\n` +
          (prepared.varianceNote ? `sampling variances: ${prepared.varianceNote}\n` : '') +
          files.map((f) => `input ${f.role}: ${f.path} (${f.rows} rows, sha256 ${f.sha256.slice(0, 12)}…)\n`).join(''),
      );
    });
}
