#!/usr/bin/env node
/**
 * The `shrinkwell` command: a thin shell that parses arguments, calls the pipeline and maps
 * failures to the exit codes of src/errors.ts. User mistakes print one line, never a stack.
 */
import { Command, CommanderError } from 'commander';
import { EXIT, UserError } from '../errors.js';
import { VERSION } from '../version.js';
import { compareCommand } from './compare.js';
import { demoCommand } from './demo.js';
import { fitCommand } from './fit.js';
import { reportCommand } from './report.js';
import { validateCommand } from './validate.js';

function buildProgram(): Command {
  const program = new Command()
    .name('shrinkwell')
    .description(
      'Small-area estimates for every site (district) from a survey too thin for raw site means:\n' +
        'a hierarchical model borrows strength across sites, and every figure comes with its\n' +
        'interval, coefficient of variation and a reliability flag.',
    )
    .version(VERSION)
    .showHelpAfterError('(run "shrinkwell --help" for the commands)')
    .exitOverride();
  validateCommand(program);
  fitCommand(program);
  reportCommand(program);
  compareCommand(program);
  demoCommand(program);
  return program;
}

export async function main(argv: string[]): Promise<number> {
  const program = buildProgram();
  try {
    await program.parseAsync(argv);
    return process.exitCode === undefined ? EXIT.ok : Number(process.exitCode);
  } catch (error) {
    if (error instanceof CommanderError) {
      // --help and --version end here too, with exit code 0.
      return error.exitCode === 0 ? EXIT.ok : EXIT.usage;
    }
    if (error instanceof UserError) {
      process.stderr.write(`shrinkwell: ${error.message}\n`);
      return EXIT[error.kind];
    }
    process.stderr.write(
      `shrinkwell: internal error (please report it with the command and config that caused it)\n` +
        `${(error as Error)?.stack ?? String(error)}\n`,
    );
    return EXIT.internal;
  }
}

process.exitCode = await main(process.argv);
