/**
 * `shrinkwell compare RUN_DIR [RUN_DIR…]`: comparisons between sites from a run folder's stored
 * draws, written to `<run>/comparisons/` (see src/output/comparisons.ts) and shown by the report.
 *
 * Several run folders get the same comparisons each, independently: sites are compared within a
 * run, never across runs, because two runs' draws are not one joint posterior (the same survey
 * may feed both). Every folder and every argument is checked before anything is written.
 */
import { createHash } from 'node:crypto';
import { readFileSync } from 'node:fs';
import { join } from 'node:path';
import type { Command } from 'commander';
import { didYouMean } from '../config/suggest.js';
import { EXIT, UserError } from '../errors.js';
import {
  COMPARISONS_FORMAT,
  COMPARISONS_FORMAT_VERSION,
  COMPARISON_NOTES,
  comparisonFiles,
  writeComparisons,
  type ComparedSite,
  type ComparisonSettings,
} from '../output/comparisons.js';
import { readRunFolder, type RunFolder } from '../report/read-run.js';
import { MAX_MATRIX_SITES, compareSites, type SiteComparison } from '../summaries/compare.js';
import { VERSION } from '../version.js';

/** Options as commander hands them over (strings, unchecked). */
export interface CompareArguments {
  /** Each `--pairs` value ("a:b,c:d"); false for `--no-pairs`. */
  pairs?: string[] | false;
  allPairs?: boolean;
  top?: string;
  above?: string;
  /** true for --lower-is-better, false for --no-lower-is-better, undefined: the config decides. */
  lowerIsBetter?: boolean;
}

/** The checked comparison plan for one run folder. */
export interface ComparePlan {
  sites: ComparedSite[];
  pairs: 'all' | Array<[number, number]> | 'none';
  top: number;
  target: number | null;
  targetSource: 'command line' | 'config' | null;
  lowerIsBetter: boolean;
  level: number;
}

/** `compare:` settings recorded in the run's manifest, when the config had them. */
interface ConfigCompare {
  target?: unknown;
  top?: unknown;
  lower_is_better?: unknown;
}

const usage = (message: string): UserError => new UserError('usage', message);
const broken = (message: string): UserError => new UserError('runFolder', message);

const NUMBER = /^[-+]?(\d+\.?\d*|\.\d+)([eE][-+]?\d+)?$/;

/** A decimal number as typed on the command line; anything else is a one-line usage error. */
export function parseTarget(text: string, option = '--above'): number {
  const trimmed = text.trim();
  const value = Number(trimmed);
  if (!NUMBER.test(trimmed) || !Number.isFinite(value)) {
    throw usage(`${option}: "${text}" is not a number (give the target in the measure's unit, e.g. ${option} 2.5)`);
  }
  return value;
}

/** k of "top k": a whole number from 1 to the number of sites. */
export function parseTop(text: string, sites: number): number {
  const trimmed = text.trim();
  const value = Number(trimmed);
  if (!/^\d+$/.test(trimmed) || !Number.isSafeInteger(value) || value < 1) throw usage(`--top: "${text}" is not a whole number ≥ 1`);
  if (value > sites) throw usage(`--top ${value}: the run has only ${sites} sites`);
  return value;
}

/**
 * Site index of `word`; unknown ids are a one-line usage error with the closest id, when one is
 * close (site ids are matched exactly, letter case included, as in the sites file).
 */
function siteIndex(word: string, ids: readonly string[], index: ReadonlyMap<string, number>, runDir: string): number {
  const at = index.get(word);
  if (at !== undefined) return at;
  throw usage(`--pairs: site "${word}" is not in ${runDir}${didYouMean(word, ids)}`);
}

/**
 * Parses `--pairs` values ("a:b,c:d", repeatable) into site index pairs. An id that itself
 * contains ":" is found by trying every split point against the known ids.
 */
export function parsePairs(values: readonly string[], ids: readonly string[], runDir: string): Array<[number, number]> {
  const index = new Map(ids.map((id, i) => [id, i]));
  const pairs: Array<[number, number]> = [];
  const seen = new Set<string>();
  for (const value of values) {
    for (const raw of value.split(',')) {
      const item = raw.trim();
      if (item === '') continue;
      const splits: Array<[string, string]> = [];
      for (let at = item.indexOf(':'); at >= 0; at = item.indexOf(':', at + 1)) splits.push([item.slice(0, at).trim(), item.slice(at + 1).trim()]);
      if (splits.length === 0) throw usage(`--pairs: "${item}" is not a pair; write two site ids joined by a colon, e.g. ${ids[0]}:${ids[1] ?? ids[0]}`);
      const known = splits.find(([a, b]) => index.has(a) && index.has(b));
      const [a, b] = known ?? splits[0];
      if (a === '' || b === '') throw usage(`--pairs: "${item}" is missing a site id on one side of the colon`);
      const ia = siteIndex(a, ids, index, runDir);
      const ib = siteIndex(b, ids, index, runDir);
      if (ia === ib) throw usage(`--pairs: "${item}" compares site "${a}" with itself`);
      const key = `${ia}:${ib}`;
      if (!seen.has(key)) {
        seen.add(key);
        pairs.push([ia, ib]);
      }
    }
  }
  if (pairs.length === 0) throw usage('--pairs: no pairs given');
  return pairs;
}

function configCompare(run: RunFolder): ConfigCompare {
  const value = run.manifest.settings?.compare;
  return typeof value === 'object' && value !== null && !Array.isArray(value) ? (value as ConfigCompare) : {};
}

/** Checks the arguments against one run folder and resolves the defaults (config, then built-in). */
export function planComparison(run: RunFolder, args: CompareArguments): ComparePlan {
  const manifestPath = join(run.dir, 'manifest.json');
  const ids = run.estimates.map((s) => s.site);
  const m = ids.length;
  if (m < 2) throw broken(`${join(run.dir, 'estimates.csv')}: only one site, nothing to compare`);
  const fromConfig = configCompare(run);

  let target: number | null = null;
  let targetSource: ComparePlan['targetSource'] = null;
  if (args.above !== undefined) {
    target = parseTarget(args.above);
    targetSource = 'command line';
  } else if (fromConfig.target !== undefined && fromConfig.target !== null) {
    if (typeof fromConfig.target !== 'number' || !Number.isFinite(fromConfig.target)) {
      throw broken(`${manifestPath}: compare.target ${JSON.stringify(fromConfig.target)} is not a number`);
    }
    target = fromConfig.target;
    targetSource = 'config';
  }

  let top = Math.min(5, m);
  if (args.top !== undefined) top = parseTop(args.top, m);
  else if (fromConfig.top !== undefined) {
    if (typeof fromConfig.top !== 'number' || !Number.isInteger(fromConfig.top) || fromConfig.top < 1) {
      throw broken(`${manifestPath}: compare.top ${JSON.stringify(fromConfig.top)} is not a whole number ≥ 1`);
    }
    top = Math.min(fromConfig.top, m);
  }

  let lowerIsBetter = args.lowerIsBetter ?? false;
  if (args.lowerIsBetter === undefined && fromConfig.lower_is_better !== undefined) {
    if (typeof fromConfig.lower_is_better !== 'boolean') {
      throw broken(`${manifestPath}: compare.lower_is_better ${JSON.stringify(fromConfig.lower_is_better)} is not true or false`);
    }
    lowerIsBetter = fromConfig.lower_is_better;
  }

  let pairs: ComparePlan['pairs'];
  const listed = Array.isArray(args.pairs) ? args.pairs : null;
  if (args.allPairs && listed) throw usage('give either --all-pairs or --pairs, not both');
  if (args.allPairs && args.pairs === false) throw usage('give either --all-pairs or --no-pairs, not both');
  if (listed) pairs = parsePairs(listed, ids, run.dir);
  else if (args.pairs === false) pairs = 'none';
  else if (args.allPairs) {
    if (m > MAX_MATRIX_SITES) {
      throw usage(`--all-pairs: ${m} sites make ${(m * (m - 1)) / 2} pairs, more than compare sweeps at once (at most ${MAX_MATRIX_SITES} sites); name the pairs with --pairs`);
    }
    pairs = 'all';
  } else pairs = m <= MAX_MATRIX_SITES ? 'all' : 'none';

  const sites = run.estimates.map((s) => ({ site: s.site, label: s.label, flag: s.flag, estimate: s.estimate }));
  return { sites, pairs, top, target, targetSource, lowerIsBetter, level: run.summary.interval };
}

/** Each site's pooled draws (a view into the run's draws, no copy); broken draws are one-line errors. */
export function siteDraws(run: RunFolder): Float32Array[] {
  const { draws } = run;
  const jsonPath = join(run.dir, 'draws.json');
  const index = new Map(draws.quantities.map((q, i) => [q, i]));
  const perSite = draws.chains * draws.drawsPerChain;
  if (!Number.isInteger(draws.chains) || !Number.isInteger(draws.drawsPerChain) || draws.chains < 1 || draws.drawsPerChain < 1) {
    throw broken(`${jsonPath}: chains and draws_per_chain must be whole numbers ≥ 1`);
  }
  return run.estimates.map((s) => {
    const q = index.get(`site:${s.site}`);
    if (q === undefined) throw broken(`${jsonPath}: no draws for site "${s.site}" (quantity "site:${s.site}"); the run folder is incomplete or from an older version`);
    const values = draws.values.subarray(q * perSite, (q + 1) * perSite);
    for (let i = 0; i < values.length; i++) {
      if (values[i] !== values[i]) {
        const chain = Math.floor(i / draws.drawsPerChain) + 1;
        throw broken(`${join(run.dir, 'draws.bin')}: site "${s.site}" has a draw that is not a number (chain ${chain}, draw ${(i % draws.drawsPerChain) + 1})`);
      }
    }
    return values;
  });
}

function sha256(path: string): string {
  return createHash('sha256').update(readFileSync(path)).digest('hex');
}

export function comparisonSettings(run: RunFolder, plan: ComparePlan, result: SiteComparison, command: string[]): ComparisonSettings {
  return {
    format: COMPARISONS_FORMAT,
    format_version: COMPARISONS_FORMAT_VERSION,
    tool: { name: 'shrinkwell', version: VERSION },
    created: new Date().toISOString(),
    command,
    rank_1_is: plan.lowerIsBetter ? 'lowest' : 'highest',
    interval: plan.level,
    top: plan.top,
    target: plan.target,
    target_source: plan.targetSource,
    pairs: plan.pairs === 'all' ? 'all' : plan.pairs === 'none' ? 'none' : 'listed',
    pair_count: result.pairs.length,
    sites: result.sites,
    draws: { chains: result.chains, draws_per_chain: result.drawsPerChain, total: result.draws, draws_bin_sha256: sha256(join(run.dir, 'draws.bin')) },
    converged: run.summary.converged,
    notes: COMPARISON_NOTES,
  };
}

/** Computes the plan's comparisons over the run's draws. */
export function runComparison(run: RunFolder, plan: ComparePlan): SiteComparison {
  const sites = siteDraws(run);
  return compareSites(
    { sites, chains: run.draws.chains, drawsPerChain: run.draws.drawsPerChain },
    { level: plan.level, top: plan.top, target: plan.target, pairs: plan.pairs, lowerIsBetter: plan.lowerIsBetter },
  );
}

function describe(dir: string, plan: ComparePlan, result: SiteComparison): string {
  const pairs = plan.pairs === 'none'
    ? result.sites > MAX_MATRIX_SITES ? `no pairwise probabilities (more than ${MAX_MATRIX_SITES} sites; name pairs with --pairs)` : 'no pairwise probabilities'
    : `pairwise.csv (${result.pairs.length} ordered pair${result.pairs.length === 1 ? '' : 's'})`;
  const target = plan.target === null ? 'no target' : `target ${plan.target} (${plan.targetSource})`;
  return `${dir}: ${result.sites} sites, ${result.draws} draws; ranks.csv (rank 1 = ${plan.lowerIsBetter ? 'lowest' : 'highest'}, top/bottom ${plan.top}, ${target}), ${pairs}, settings.json\n`;
}

/** Where `compareRuns` reports: a line per folder written, and warnings. */
export interface CompareIo {
  out(text: string): void;
  warn(text: string): void;
}

const processIo: CompareIo = {
  out: (text) => process.stdout.write(text),
  warn: (text) => process.stderr.write(`shrinkwell: warning: ${text}\n`),
};

/**
 * Runs `compare` on every folder; returns the exit code (0, or 5 when a run failed its
 * convergence gate). Bad arguments and broken folders throw `UserError` before anything is written.
 */
export async function compareRuns(runDirs: readonly string[], args: CompareArguments, command: string[], io: CompareIo = processIo): Promise<number> {
  // Read and check everything first: one bad folder or argument and nothing is written.
  const planned = runDirs.map((dir) => {
    const run = readRunFolder(dir);
    const plan = planComparison(run, args);
    siteDraws(run);
    return { run, plan };
  });
  let code: number = EXIT.ok;
  for (const { run, plan } of planned) {
    const result = runComparison(run, plan);
    const files = comparisonFiles(plan.sites, result, comparisonSettings(run, plan, result, command));
    const written = await writeComparisons(run.dir, files);
    io.out(describe(written, plan, result));
    if (!run.summary.converged) {
      io.warn(`${run.dir} did not pass the convergence gate; its comparisons are provisional, not for publication`);
      code = EXIT.notConverged;
    }
  }
  return code;
}

const collect = (value: string, previous: string[] | false | undefined): string[] => [...(Array.isArray(previous) ? previous : []), value];

export function compareCommand(program: Command): void {
  program
    .command('compare')
    .argument('<run_dir...>', 'one or more run folders written by "shrinkwell fit"')
    .option('--pairs <a:b,...>', 'pairs of site ids to compare, e.g. D01:D02,D03:D07 (repeatable)', collect)
    .option('--no-pairs', 'no pairwise probabilities')
    .option('--all-pairs', `every pair of sites (the default up to ${MAX_MATRIX_SITES} sites)`)
    .option('--top <k>', 'k for the chance of being among the top k and the bottom k (default: the config\'s compare.top, else 5)')
    .option('--above <value>', 'target value: the chance that each site exceeds it (default: the config\'s compare.target, else none)')
    .option('--lower-is-better', 'rank 1 is the lowest value (default: the config\'s compare.lower_is_better, else the highest)')
    .option('--no-lower-is-better', 'rank 1 is the highest value, whatever the config says')
    .summary('compare sites: pairwise probabilities, ranks with intervals, top k, above a target')
    .description(
      "From the run folder's stored draws: the probability that site a exceeds site b (every pair, or " +
        "the pairs named), each site's rank with its median and interval, the chance of being among the " +
        'top or bottom k, and the chance of exceeding a target value. Writes comparisons/ranks.csv, ' +
        'comparisons/pairwise.csv and comparisons/settings.json into the run folder; "shrinkwell report" ' +
        'then adds a comparisons section. Several run folders each get the same comparisons (sites are ' +
        'never compared across runs). A run that failed its convergence gate still gets its files, ' +
        `marked provisional, and the exit code is ${EXIT.notConverged}.`,
    )
    .action(async (runDirs: string[], opts: CompareArguments) => {
      process.exitCode = await compareRuns(runDirs, opts, ['shrinkwell', ...process.argv.slice(2)]);
    });
}
