import { readdirSync, existsSync } from 'node:fs';
import { dirname, join, resolve } from 'node:path';
import { fileURLToPath } from 'node:url';
import type { Command } from 'commander';
import { EXIT } from '../errors.js';
import { describeOutcome, fitAndReport } from './fit.js';
import { reportAndTell } from './report.js';

/** The bundled demos: every `data-demo/<name>/config.yaml` of the package. */
export function demoConfigs(): Array<{ name: string; config: string }> {
  let dir = dirname(fileURLToPath(import.meta.url));
  while (!existsSync(join(dir, 'data-demo')) && dirname(dir) !== dir) dir = dirname(dir);
  const root = join(dir, 'data-demo');
  return readdirSync(root, { withFileTypes: true })
    .filter((e) => e.isDirectory() && existsSync(join(root, e.name, 'config.yaml')))
    .map((e) => ({ name: e.name, config: join(root, e.name, 'config.yaml') }))
    .sort((a, b) => a.name.localeCompare(b.name));
}

export function demoCommand(program: Command): void {
  program
    .command('demo')
    .option('-o, --out <dir>', 'folder for the demo run folders', 'shrinkwell-demo')
    .summary('run the bundled demos end to end')
    .description(
      'Fits every bundled demo (invented regions and districts) and leaves one run folder per\n' +
        'demo under --out, each with its estimates and its report (HTML and PDF). A quick way to see what a run gives.',
    )
    .action(async (opts: { out: string }) => {
      let worst: number = EXIT.ok;
      for (const demo of demoConfigs()) {
        const outcome = await fitAndReport(demo.config, resolve(opts.out, demo.name));
        process.stdout.write(`${demo.name}: ${describeOutcome(outcome)}`);
        if (!outcome.converged) worst = EXIT.notConverged;
        const reported = await reportAndTell(outcome.runDir);
        if (reported !== EXIT.ok && worst === EXIT.ok) worst = reported;
      }
      process.exitCode = worst;
    });
}
