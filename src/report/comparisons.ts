/**
 * The report's comparisons section, from the run folder's `comparisons/` files (written by
 * `shrinkwell compare`; layout in src/output/comparisons.ts). Absent folder → no section.
 *
 * Suppressed sites stay in the ranking (ranks are among all sites, as computed) but their own
 * ranks and pairwise probabilities are withheld from the report, since they would publish a
 * figure judged too uncertain; the CSV files keep everything for the analyst.
 */
import { createHash } from 'node:crypto';
import { existsSync, readFileSync, statSync } from 'node:fs';
import { join } from 'node:path';
import { parse } from 'csv-parse/sync';
import Handlebars from 'handlebars';
import { UserError } from '../errors.js';
import {
  byRank,
  pairOrderHistogram,
  pairwiseHeatmap,
  probabilityText,
  rankChart,
  rankOverviewChart,
  type RankRow,
} from './compare-charts.js';
import { fixed, whole } from './format.js';
import type { RunFolder } from './read-run.js';

type Safe = Handlebars.SafeString;
const safe = (html: string): Safe => new Handlebars.SafeString(html);
const fail = (message: string): UserError => new UserError('runFolder', message);

/** Sites shown in full (every row labelled; heat map of all pairs) up to this many. */
export const FULL_HEATMAP_SITES = 40;
/** Rank rows labelled in full up to this many sites; beyond, the top and bottom `SUMMARY_ROWS`. */
export const FULL_RANK_SITES = 60;
export const SUMMARY_ROWS = 20;
/** Heat-map cells carry their percentage up to this many sites. */
const NUMBERED_HEATMAP_SITES = 20;

/** One row of comparisons/ranks.csv. */
export interface RankFileRow {
  site: string;
  label: string;
  flag: string;
  estimate: number | null;
  rank_mean: number;
  rank_median: number;
  rank_lower: number;
  rank_upper: number;
  p_top_k: number;
  p_bottom_k: number;
  p_above_target: number | null;
}

export interface PairFileRow {
  site_a: string;
  site_b: string;
  p_a_greater: number;
  mcse: number | null;
}

export interface ComparisonFileSettings {
  rank_1_is: 'highest' | 'lowest';
  interval: number;
  top: number;
  target: number | null;
  target_source: string | null;
  pairs: 'all' | 'listed' | 'none';
  sites: number;
  draws: { chains: number; draws_per_chain: number; total: number; draws_bin_sha256: string };
  created: string | null;
  command: string[];
}

export interface ComparisonFiles {
  settings: ComparisonFileSettings;
  ranks: RankFileRow[];
  pairs: PairFileRow[] | null;
}

// ---------------------------------------------------------------------------------------------
// Reading

function readCsvRows(path: string, required: readonly string[]): Array<Record<string, string>> {
  let rows: string[][];
  try {
    rows = parse(readFileSync(path, 'utf8'), { skip_empty_lines: true }) as string[][];
  } catch (error) {
    throw fail(`${path}: not a readable CSV file (${(error as Error).message.split('\n')[0]})`);
  }
  if (rows.length === 0) throw fail(`${path}: empty file (expected a header row)`);
  const header = rows[0];
  for (const column of required) if (!header.includes(column)) throw fail(`${path}: line 1: column "${column}" is missing`);
  return rows.slice(1).map((cells) => Object.fromEntries(header.map((name, i) => [name, cells[i] ?? ''])));
}

function numberOrNull(path: string, line: number, column: string, text: string): number | null {
  const t = text.trim();
  if (t === '') return null;
  const value = Number(t);
  if (!/^[-+]?(\d+\.?\d*|\.\d+)([eE][-+]?\d+)?$/.test(t) || !Number.isFinite(value)) {
    throw fail(`${path}: line ${line}, column ${column}: "${t}" is not a number`);
  }
  return value;
}

function requiredNumber(path: string, line: number, column: string, text: string): number {
  const value = numberOrNull(path, line, column, text);
  if (value === null) throw fail(`${path}: line ${line}, column ${column}: value is blank`);
  return value;
}

function readSettings(path: string): ComparisonFileSettings {
  let json: Record<string, unknown>;
  try {
    json = JSON.parse(readFileSync(path, 'utf8')) as Record<string, unknown>;
  } catch (error) {
    throw fail(`${path}: not valid JSON (${(error as Error).message})`);
  }
  if (typeof json !== 'object' || json === null) throw fail(`${path}: expected a JSON object`);
  if (json.format !== 'shrinkwell-comparisons') throw fail(`${path}: not a shrinkwell comparisons file ("format" is ${JSON.stringify(json.format)})`);
  if (json.format_version !== 1) {
    throw fail(`${path}: format_version ${JSON.stringify(json.format_version)} is not supported (this version reads 1); rerun shrinkwell compare`);
  }
  const num = (v: unknown, key: string): number => {
    if (typeof v !== 'number' || !Number.isFinite(v)) throw fail(`${path}: "${key}" is missing or not a number`);
    return v;
  };
  const draws = json.draws as Record<string, unknown> | undefined;
  if (typeof draws !== 'object' || draws === null) throw fail(`${path}: "draws" is missing or not an object`);
  if (json.rank_1_is !== 'highest' && json.rank_1_is !== 'lowest') throw fail(`${path}: "rank_1_is" must be "highest" or "lowest"`);
  if (json.pairs !== 'all' && json.pairs !== 'listed' && json.pairs !== 'none') throw fail(`${path}: "pairs" must be "all", "listed" or "none"`);
  if (json.target !== null && json.target !== undefined) num(json.target, 'target');
  if (typeof draws.draws_bin_sha256 !== 'string') throw fail(`${path}: "draws.draws_bin_sha256" is missing or not a string`);
  return {
    rank_1_is: json.rank_1_is,
    interval: num(json.interval, 'interval'),
    top: num(json.top, 'top'),
    target: typeof json.target === 'number' ? json.target : null,
    target_source: typeof json.target_source === 'string' ? json.target_source : null,
    pairs: json.pairs,
    sites: num(json.sites, 'sites'),
    draws: {
      chains: num(draws.chains, 'draws.chains'),
      draws_per_chain: num(draws.draws_per_chain, 'draws.draws_per_chain'),
      total: num(draws.total, 'draws.total'),
      draws_bin_sha256: draws.draws_bin_sha256,
    },
    created: typeof json.created === 'string' ? json.created : null,
    command: Array.isArray(json.command) ? json.command.map(String) : [],
  };
}

const RANK_REQUIRED = ['site', 'label', 'flag', 'estimate', 'rank_mean', 'rank_median', 'rank_lower', 'rank_upper', 'p_top_k', 'p_bottom_k', 'p_above_target'];

function readRanks(path: string): RankFileRow[] {
  return readCsvRows(path, RANK_REQUIRED).map((cells, i) => {
    const line = i + 2;
    const req = (column: string) => requiredNumber(path, line, column, cells[column]);
    return {
      site: cells.site.trim(),
      label: cells.label,
      flag: cells.flag.trim(),
      estimate: numberOrNull(path, line, 'estimate', cells.estimate),
      rank_mean: req('rank_mean'),
      rank_median: req('rank_median'),
      rank_lower: req('rank_lower'),
      rank_upper: req('rank_upper'),
      p_top_k: req('p_top_k'),
      p_bottom_k: req('p_bottom_k'),
      p_above_target: numberOrNull(path, line, 'p_above_target', cells.p_above_target),
    };
  });
}

function readPairs(path: string): PairFileRow[] {
  return readCsvRows(path, ['site_a', 'site_b', 'p_a_greater']).map((cells, i) => {
    const line = i + 2;
    return {
      site_a: cells.site_a.trim(),
      site_b: cells.site_b.trim(),
      p_a_greater: requiredNumber(path, line, 'p_a_greater', cells.p_a_greater),
      mcse: cells.mcse === undefined ? null : numberOrNull(path, line, 'mcse', cells.mcse),
    };
  });
}

/**
 * Reads `<run>/comparisons/` when it exists (null otherwise). Malformed files are one-line
 * `UserError('runFolder', …)`s naming the file, line and column.
 */
export function readComparisonFiles(runDir: string): ComparisonFiles | null {
  const dir = join(runDir, 'comparisons');
  if (!existsSync(dir) || !statSync(dir).isDirectory()) return null;
  const settingsPath = join(dir, 'settings.json');
  const ranksPath = join(dir, 'ranks.csv');
  if (!existsSync(settingsPath)) throw fail(`${settingsPath}: missing (rerun shrinkwell compare)`);
  if (!existsSync(ranksPath)) throw fail(`${ranksPath}: missing (rerun shrinkwell compare)`);
  const settings = readSettings(settingsPath);
  const ranks = readRanks(ranksPath);
  const pairsPath = join(dir, 'pairwise.csv');
  const pairs = existsSync(pairsPath) ? readPairs(pairsPath) : null;
  return { settings, ranks, pairs };
}

// ---------------------------------------------------------------------------------------------
// The view the template prints

export interface ComparisonsView {
  /** Set when the files do not belong to this run's draws: the section then says only this. */
  stale: string | null;
  provisional: boolean;
  sites: number;
  draws: string;
  chains: number;
  top: number;
  rankOneIs: 'highest' | 'lowest';
  intervalPercent: string;
  target: string | null;
  targetFromConfig: boolean;
  /** Suppressed sites, whose ranks and comparisons are withheld. */
  withheld: Array<{ id: string; label: string }>;
  rankCharts: Safe[];
  /** True when only the top and bottom rows are labelled (many sites). */
  rankSummarized: boolean;
  summaryRows: number;
  overview: Safe | null;
  heatmap: Safe | null;
  heatmapSummarized: boolean;
  histogram: Safe | null;
  clearPairs: { count: string; total: string; share: string } | null;
  /** Listed pairs (--pairs): one row each. */
  pairs: Array<{ a: string; aLabel: string; b: string; bLabel: string; p: string; mcse: string }> | null;
  pairsWithheld: number;
  /** No pairwise probabilities were computed. */
  noPairs: boolean;
}

function sha256(path: string): string | null {
  return existsSync(path) ? createHash('sha256').update(readFileSync(path)).digest('hex') : null;
}

/** Why the comparison files do not fit this run, or null when they do. */
function staleReason(run: RunFolder, files: ComparisonFiles): string | null {
  const ids = run.estimates.map((s) => s.site);
  const fileIds = files.ranks.map((r) => r.site);
  if (ids.length !== fileIds.length || ids.some((id, i) => id !== fileIds[i])) {
    return 'The files in comparisons/ list other sites than this run; they were not made from it.';
  }
  if (sha256(join(run.dir, 'draws.bin')) !== files.settings.draws.draws_bin_sha256) {
    return 'The files in comparisons/ were made from other draws than this run\u2019s (draws.bin has changed since).';
  }
  return null;
}

function withUnit(value: number, decimals: number, unit: string): string {
  return unit ? `${fixed(value, decimals)} ${unit}` : fixed(value, decimals);
}

/** The comparisons section of the run's report, or null when the run has no comparisons/ folder. */
export function comparisonsView(run: RunFolder): ComparisonsView | null {
  const files = readComparisonFiles(run.dir);
  if (!files) return null;
  const { settings } = files;
  const { measure } = run.summary;
  const intervalPercent = `${Number((settings.interval * 100).toPrecision(4))}%`;
  const base: ComparisonsView = {
    stale: null,
    provisional: !run.summary.converged,
    sites: files.ranks.length,
    draws: whole(settings.draws.total),
    chains: settings.draws.chains,
    top: settings.top,
    rankOneIs: settings.rank_1_is,
    intervalPercent,
    target: settings.target === null ? null : withUnit(settings.target, measure.decimals, measure.unit),
    targetFromConfig: settings.target_source === 'config',
    withheld: [],
    rankCharts: [],
    rankSummarized: false,
    summaryRows: SUMMARY_ROWS,
    overview: null,
    heatmap: null,
    heatmapSummarized: false,
    histogram: null,
    clearPairs: null,
    pairs: null,
    pairsWithheld: 0,
    noPairs: settings.pairs === 'none',
  };
  const stale = staleReason(run, files);
  if (stale) return { ...base, stale: `${stale} Rerun \u201cshrinkwell compare\u201d on this run folder.` };

  const suppressed = new Set(run.estimates.filter((s) => s.flag === 'suppress').map((s) => s.site));
  const flagOf = new Map(run.estimates.map((s) => [s.site, s.flag]));
  const labelOf = new Map(run.estimates.map((s) => [s.site, s.label]));
  base.withheld = run.estimates.filter((s) => suppressed.has(s.site)).map((s) => ({ id: s.site, label: s.label }));

  const rows: RankRow[] = files.ranks
    .filter((r) => !suppressed.has(r.site))
    .map((r) => ({
      id: r.site,
      label: labelOf.get(r.site) ?? r.label,
      median: r.rank_median,
      lower: r.rank_lower,
      upper: r.rank_upper,
      mean: r.rank_mean,
      pTop: r.p_top_k,
      pAbove: r.p_above_target,
      caution: flagOf.get(r.site) === 'caution',
    }))
    .sort(byRank);
  const m = files.ranks.length;
  const targetHeading = base.target === null ? null : `P(> ${base.target})`;
  const chartOptions = { sites: m, top: settings.top, targetHeading, level: intervalPercent };
  if (rows.length <= FULL_RANK_SITES) {
    base.rankCharts = rankChart(rows, { ...chartOptions, title: 'Rank of each site with its interval' }).map(safe);
  } else {
    base.rankSummarized = true;
    base.rankCharts = [
      ...rankChart(rows.slice(0, SUMMARY_ROWS), { ...chartOptions, title: `The ${SUMMARY_ROWS} best-ranked sites`, heading: `The ${SUMMARY_ROWS} sites with the best median rank` }),
      ...rankChart(rows.slice(-SUMMARY_ROWS), { ...chartOptions, title: `The ${SUMMARY_ROWS} lowest-ranked sites`, heading: `The ${SUMMARY_ROWS} sites with the worst median rank` }),
    ].map(safe);
    base.overview = safe(rankOverviewChart(rows, { sites: m, title: 'Rank intervals of all sites' }));
  }

  if (files.pairs && settings.pairs === 'all') {
    const pGreater = new Map<string, number>();
    for (const p of files.pairs) pGreater.set(`${p.site_a}\u0000${p.site_b}`, p.p_a_greater);
    const lowerFirst = settings.rank_1_is === 'lowest';
    const aheadOf = (a: string, b: string): number => {
      const p = pGreater.get(`${a}\u0000${b}`);
      if (p === undefined) throw fail(`${join(run.dir, 'comparisons', 'pairwise.csv')}: no row for the pair ${a}, ${b} (rerun shrinkwell compare)`);
      return lowerFirst ? 1 - p : p;
    };
    const shown = rows.length <= FULL_HEATMAP_SITES ? rows : [...rows.slice(0, SUMMARY_ROWS), ...rows.slice(-SUMMARY_ROWS)];
    base.heatmapSummarized = shown.length < rows.length;
    base.heatmap = safe(pairwiseHeatmap(shown.map((r) => r.id), (r, c) => aheadOf(shown[r].id, shown[c].id), {
      title: 'Probability that one site ranks ahead of another',
      numbers: shown.length <= NUMBERED_HEATMAP_SITES,
      splitAfter: base.heatmapSummarized ? SUMMARY_ROWS : undefined,
    }));
    if (base.heatmapSummarized) {
      const clearness: number[] = [];
      for (let i = 0; i < rows.length; i++) {
        for (let j = i + 1; j < rows.length; j++) {
          const p = aheadOf(rows[i].id, rows[j].id);
          clearness.push(Math.max(p, 1 - p));
        }
      }
      const clear = clearness.filter((v) => v >= 0.95).length;
      base.clearPairs = { count: whole(clear), total: whole(clearness.length), share: `${Math.round((100 * clear) / Math.max(1, clearness.length))}%` };
      base.histogram = safe(pairOrderHistogram(clearness, { title: 'How clearly the pairs of sites are ordered' }));
    }
  } else if (files.pairs && settings.pairs === 'listed') {
    base.pairs = [];
    for (const p of files.pairs) {
      if (suppressed.has(p.site_a) || suppressed.has(p.site_b)) {
        base.pairsWithheld++;
        continue;
      }
      base.pairs.push({
        a: p.site_a,
        aLabel: labelOf.get(p.site_a) ?? '',
        b: p.site_b,
        bLabel: labelOf.get(p.site_b) ?? '',
        p: probabilityText(p.p_a_greater),
        mcse: p.mcse === null ? '—' : fixed(100 * p.mcse, 1),
      });
    }
  }
  return base;
}
