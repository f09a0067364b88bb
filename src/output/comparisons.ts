/**
 * The `comparisons/` folder inside a run folder, written by `shrinkwell compare`:
 *
 * | file | content |
 * | --- | --- |
 * | `ranks.csv` | one row per site in the order of estimates.csv: `site,label,flag,estimate,rank_mean,rank_median,rank_lower,rank_upper,p_top_k,p_top_k_mcse,p_bottom_k,p_bottom_k_mcse,p_above_target,p_above_target_mcse` (k and the target are in settings.json; the target columns are blank without a target) |
 * | `pairwise.csv` | `site_a,site_b,p_a_greater,mcse` — P(θ_a > θ_b); every ordered pair for all pairs, else the pairs asked for; absent when no pairs were compared |
 * | `settings.json` | `format: "shrinkwell-comparisons"`, `format_version: 1`, the options used and the draws they came from (with the SHA-256 of draws.bin) |
 *
 * The folder is built under a temporary name beside it and swapped in whole, so it never mixes
 * files from two `compare` runs.
 */
import { existsSync } from 'node:fs';
import { mkdir, rename, rm, writeFile } from 'node:fs/promises';
import { join } from 'node:path';
import { UserError } from '../errors.js';
import type { SiteComparison } from '../summaries/compare.js';
import { csvText } from './csv.js';

export const COMPARISONS_DIR = 'comparisons';
export const COMPARISONS_FORMAT = 'shrinkwell-comparisons';
export const COMPARISONS_FORMAT_VERSION = 1;

export const RANK_COLUMNS = [
  'site', 'label', 'flag', 'estimate', 'rank_mean', 'rank_median', 'rank_lower', 'rank_upper',
  'p_top_k', 'p_top_k_mcse', 'p_bottom_k', 'p_bottom_k_mcse', 'p_above_target', 'p_above_target_mcse',
] as const;

export const PAIR_COLUMNS = ['site_a', 'site_b', 'p_a_greater', 'mcse'] as const;

/** What the comparison files say about each site, in the order of estimates.csv. */
export interface ComparedSite {
  site: string;
  label: string;
  flag: string;
  estimate: number;
}

/** Recorded in settings.json so a reader knows exactly what was computed and from what. */
export interface ComparisonSettings {
  format: typeof COMPARISONS_FORMAT;
  format_version: typeof COMPARISONS_FORMAT_VERSION;
  tool: { name: string; version: string };
  created: string;
  command: string[];
  /** "highest" when rank 1 is the highest value, "lowest" when it is the lowest. */
  rank_1_is: 'highest' | 'lowest';
  /** Probability of the equal-tailed rank intervals (the run's `interval`). */
  interval: number;
  /** k of P(top k) and P(bottom k). */
  top: number;
  target: number | null;
  /** Where the target came from. */
  target_source: 'command line' | 'config' | null;
  /** "all" (every ordered pair), "listed" (the --pairs given) or "none". */
  pairs: 'all' | 'listed' | 'none';
  pair_count: number;
  sites: number;
  draws: { chains: number; draws_per_chain: number; total: number; draws_bin_sha256: string };
  /** Whether the run passed its convergence gate; when false every comparison is provisional. */
  converged: boolean;
  notes: string[];
}

export const COMPARISON_NOTES = [
  'Probabilities and ranks are counted over the joint posterior draws, all chains pooled.',
  'Rank 1 is the best site in the stated direction; ties within a draw share their average rank.',
  'A tie counts one half in P(a > b) and in P(above target).',
  'Rank medians and intervals are type-1 quantiles (inverse empirical distribution function) of each site\'s rank draws; the equal-tailed interval covers at least its stated probability.',
  'Top k means a rank of at most k; bottom k a rank of at least sites − k + 1.',
  'mcse = sqrt(p(1 − p) / ESS), ESS of the indicator draws over split chains (Vehtari et al. 2021); blank when the indicator never changed (p = 0 or 1: then p is below 1/draws or above 1 − 1/draws).',
];

/** ranks.csv text. */
export function ranksCsv(sites: readonly ComparedSite[], result: SiteComparison): string {
  const r = result.ranks;
  return csvText(
    RANK_COLUMNS,
    sites.map((s, i) => [
      s.site, s.label, s.flag, s.estimate, r.mean[i], r.median[i], r.lower[i], r.upper[i],
      r.pTop[i], result.mcseTop?.[i], r.pBottom[i], result.mcseBottom?.[i],
      result.pAbove?.[i], result.mcseAbove?.[i],
    ]),
  );
}

/** pairwise.csv text. */
export function pairwiseCsv(sites: readonly ComparedSite[], result: SiteComparison): string {
  return csvText(PAIR_COLUMNS, result.pairs.map((p) => [sites[p.a].site, sites[p.b].site, p.p, p.mcse]));
}

/** The files of the comparisons folder, by name. */
export function comparisonFiles(sites: readonly ComparedSite[], result: SiteComparison, settings: ComparisonSettings): Map<string, string> {
  const files = new Map<string, string>();
  files.set('ranks.csv', ranksCsv(sites, result));
  if (result.pairs.length > 0) files.set('pairwise.csv', pairwiseCsv(sites, result));
  files.set('settings.json', JSON.stringify(settings, null, 2) + '\n');
  return files;
}

function outputError(path: string, error: unknown): UserError {
  const code = (error as NodeJS.ErrnoException)?.code;
  const why = code === 'EACCES' || code === 'EPERM' ? 'permission denied' : code === 'ENOSPC' ? 'disk full' : String((error as Error)?.message ?? error);
  return new UserError('output', `cannot write ${path}: ${why}`);
}

/**
 * Writes `files` as `<runDir>/comparisons/`, replacing an earlier one: built in
 * `.comparisons.tmp-<pid>`, then renamed into place. Returns the folder's path.
 */
export async function writeComparisons(runDir: string, files: ReadonlyMap<string, string>): Promise<string> {
  const target = join(runDir, COMPARISONS_DIR);
  const temp = join(runDir, `.${COMPARISONS_DIR}.tmp-${process.pid}`);
  const old = `${temp}.old`;
  try {
    await rm(temp, { recursive: true, force: true });
    await mkdir(temp);
    for (const [name, content] of files) await writeFile(join(temp, name), content);
  } catch (error) {
    await rm(temp, { recursive: true, force: true });
    throw outputError(target, error);
  }
  try {
    if (existsSync(target)) await rename(target, old);
    await rename(temp, target);
  } catch (error) {
    await rm(temp, { recursive: true, force: true });
    if (existsSync(old) && !existsSync(target)) await rename(old, target);
    throw outputError(target, error);
  }
  await rm(old, { recursive: true, force: true });
  return target;
}
