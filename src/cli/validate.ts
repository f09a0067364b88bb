import type { Command } from 'commander';
import { loadConfig } from '../config/load.js';
import { loadAreaData } from '../data/area.js';

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
      const { data, files } = await loadAreaData(settings);
      const sampled = data.hasData.reduce((a, b) => a + b, 0);
      process.stdout.write(
        `${configPath}: ok — ${settings.model.kind} model, ${data.m} sites (${sampled} with a sample, ` +
          `${data.m - sampled} synthetic), coefficients: ${data.coefficientNames.join(', ')}\n` +
          `sampling variances: ${data.varianceNote}\n` +
          files.map((f) => `input ${f.role}: ${f.path} (${f.rows} rows, sha256 ${f.sha256.slice(0, 12)}…)\n`).join(''),
      );
    });
}
