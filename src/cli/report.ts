import type { Command } from 'commander';
import { EXIT, UserError } from '../errors.js';
import { renderReport, type ReportResult } from '../report/index.js';

export function describeReport(result: ReportResult): string {
  const parts = [`${result.html}`];
  if (result.pdf) parts.push(`${result.pdf} (${result.pages} pages)`);
  if (result.geojson) parts.push(result.geojson);
  return parts.join(', ') + '\n';
}

/** Renders a run folder's report; returns the exit code (7 when no PDF could be printed). */
export async function reportAndTell(runDir: string, options: Parameters<typeof renderReport>[1] = {}): Promise<number> {
  const result = await renderReport(runDir, options);
  process.stdout.write(`report: ${describeReport(result)}`);
  if (result.warning) process.stderr.write(`shrinkwell: warning: ${result.warning}\n`);
  return options.pdf !== false && !result.pdf ? EXIT.report : EXIT.ok;
}

export function reportCommand(program: Command): void {
  program
    .command('report')
    .argument('<run_dir>', 'a run folder written by "shrinkwell fit"')
    .option('-o, --out <dir>', 'folder for report.html, report.pdf and estimates.geojson (default: the run folder)')
    .option('--paper <size>', 'A4 or Letter (default: the config\'s report.paper, else A4)')
    .option('--template <dir>', 'an office\'s own folder of templates (default: the config\'s report.template)')
    .option('--html-only', 'write report.html only; no browser needed')
    .summary('write the publication report (HTML and PDF) of a run folder')
    .description(
      'Renders the run folder into report.html and prints it to report.pdf with headless Chromium:\n' +
        'front page with counts by reliability flag and convergence status, the site table (survey\n' +
        'figure beside the model estimate, interval, CV, weight on own data, flag and reasons),\n' +
        'charts, maps when the config gives site boundaries, cautions, and a methodology appendix\n' +
        'an auditor can re-run. Reads only the run folder. The page loads nothing from the network.\n' +
        `Without a browser the HTML is still written and the exit code is ${EXIT.report}.`,
    )
    .action(async (runDir: string, opts: { out?: string; paper?: string; template?: string; htmlOnly?: boolean }) => {
      if (opts.paper !== undefined && opts.paper !== 'A4' && opts.paper !== 'Letter')
        throw new UserError('usage', `--paper must be A4 or Letter, not "${opts.paper}"`);
      process.exitCode = await reportAndTell(runDir, {
        outDir: opts.out,
        paper: opts.paper as 'A4' | 'Letter' | undefined,
        templateDir: opts.template,
        pdf: !opts.htmlOnly,
      });
    });
}
