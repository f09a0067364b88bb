/**
 * Reads the run folder's optional files for the auditor (the contract in DEVELOPERS.md):
 * frequentist.csv + frequentist.json, certificate.csv, model_checks.csv, benchmarked.csv and the
 * summary.json keys `frequentist`, `certificate`, `model_checks` and `benchmark`.
 *
 * Every one of them may be missing (older runs, other model kinds, no `benchmark:`): a missing
 * file or a null/absent key gives `null`, never an error. A file that is there but broken gives
 * the usual one-line `UserError('runFolder', …)` naming file, line and column.
 */
import { existsSync } from 'node:fs';
import { join } from 'node:path';
import { UserError } from '../errors.js';
import { numberCell, readCsv, readJson, type Flag, FLAGS, type SiteRow } from './read-run.js';

const fail = (message: string): UserError => new UserError('runFolder', message);

type Json = Record<string, unknown>;

export interface Interval3 {
  mean: number;
  lower: number;
  upper: number;
}

/** summary.json `frequentist`. */
export interface FrequentistSummary {
  method: string | null;
  site_variance: number | null;
  at_boundary: boolean | null;
  converged: boolean | null;
  largest_difference_sd: { site: string; value: number } | null;
  mean_difference_sd: number | null;
  rmse_over_sd: { min: number; max: number } | null;
  reading: string | null;
  mse_note: string | null;
}

/** frequentist.json. */
export interface FrequentistFile {
  model: string | null;
  method: string | null;
  site_variance: number | null;
  unit_variance: number | null;
  coefficients: Array<{ name: string; estimate: number | null; se: number | null }>;
  converged: boolean | null;
  iterations: number | null;
  at_boundary: boolean | null;
  log_likelihood: number | null;
  mse_note: string | null;
}

/** One row of frequentist.csv. */
export interface FrequentistRow {
  site: string;
  eblup: number | null;
  rmse: number | null;
}

/** summary.json `certificate`. */
export interface CertificateSummary {
  note: string | null;
  quantities: number | null;
  worst: { quantity: string; gibbs: number | null; exact: number | null; mcse: number | null; z: number | null } | null;
  bound: number | null;
  all_within: boolean | null;
}

/** One row of certificate.csv. */
export interface CertificateRow {
  quantity: string;
  gibbs_mean: number | null;
  exact_mean: number | null;
  mcse: number | null;
  z: number | null;
}

/** summary.json `model_checks`. */
export interface ModelChecksSummary {
  note: string | null;
  overall_ppp: number | null;
  extreme_level: number | null;
  extreme_sites: string[];
  mean_direct: number | null;
  mean_model: number | null;
}

/** One row of model_checks.csv (blank cells for sites without a sample). */
export interface ModelCheckRow {
  site: string;
  ppp: number | null;
  std_residual: number | null;
  extreme: boolean | null;
}

/** summary.json `benchmark`. */
export interface BenchmarkSummary {
  method: string;
  method_note: string | null;
  total: number | null;
  weights: string | null;
  unadjusted_sum: Interval3 | null;
  adjustment: Interval3 | null;
}

/** One row of benchmarked.csv. */
export interface BenchmarkedRow {
  site: string;
  label: string;
  estimate: number | null;
  sd: number | null;
  lower: number | null;
  upper: number | null;
  estimate_unadjusted: number | null;
  flag: Flag | null;
}

export interface AuditFiles {
  frequentist: { summary: FrequentistSummary | null; file: FrequentistFile | null; rows: FrequentistRow[] | null } | null;
  certificate: { summary: CertificateSummary | null; rows: CertificateRow[] | null } | null;
  modelChecks: { summary: ModelChecksSummary | null; rows: ModelCheckRow[] | null } | null;
  benchmark: { summary: BenchmarkSummary | null; rows: BenchmarkedRow[] | null } | null;
}

// ---------------------------------------------------------------------------------------------
// Lenient typed getters: absent or null → null; present with the wrong type → one-line error.

function getters(path: string, where: string) {
  const name = (key: string) => (where ? `${where}.${key}` : key);
  const wrong = (key: string, what: string) => fail(`${path}: "${name(key)}" is not ${what}`);
  return {
    number(obj: Json, key: string): number | null {
      const v = obj[key];
      if (v === undefined || v === null) return null;
      if (typeof v !== 'number') throw wrong(key, 'a number');
      return v;
    },
    string(obj: Json, key: string): string | null {
      const v = obj[key];
      if (v === undefined || v === null) return null;
      if (typeof v !== 'string') throw wrong(key, 'a string');
      return v;
    },
    boolean(obj: Json, key: string): boolean | null {
      const v = obj[key];
      if (v === undefined || v === null) return null;
      if (typeof v !== 'boolean') throw wrong(key, 'true or false');
      return v;
    },
    object(obj: Json, key: string): Json | null {
      const v = obj[key];
      if (v === undefined || v === null) return null;
      if (typeof v !== 'object' || Array.isArray(v)) throw wrong(key, 'an object');
      return v as Json;
    },
  };
}

function interval3(path: string, where: string, obj: Json | null): Interval3 | null {
  if (!obj) return null;
  const g = getters(path, where);
  const mean = g.number(obj, 'mean');
  const lower = g.number(obj, 'lower');
  const upper = g.number(obj, 'upper');
  return mean === null || lower === null || upper === null ? null : { mean, lower, upper };
}

function frequentistSummary(path: string, json: Json | null): FrequentistSummary | null {
  if (!json) return null;
  const g = getters(path, 'frequentist');
  const largest = g.object(json, 'largest_difference_sd');
  const ratio = g.object(json, 'rmse_over_sd');
  const gl = getters(path, 'frequentist.largest_difference_sd');
  const gr = getters(path, 'frequentist.rmse_over_sd');
  const largestSite = largest ? gl.string(largest, 'site') : null;
  const largestValue = largest ? gl.number(largest, 'value') : null;
  const ratioMin = ratio ? gr.number(ratio, 'min') : null;
  const ratioMax = ratio ? gr.number(ratio, 'max') : null;
  return {
    method: g.string(json, 'method'),
    site_variance: g.number(json, 'site_variance'),
    at_boundary: g.boolean(json, 'at_boundary'),
    converged: g.boolean(json, 'converged'),
    largest_difference_sd: largestSite !== null && largestValue !== null ? { site: largestSite, value: largestValue } : null,
    mean_difference_sd: g.number(json, 'mean_difference_sd'),
    rmse_over_sd: ratioMin !== null && ratioMax !== null ? { min: ratioMin, max: ratioMax } : null,
    reading: g.string(json, 'reading'),
    mse_note: g.string(json, 'mse_note'),
  };
}

function certificateSummary(path: string, json: Json | null): CertificateSummary | null {
  if (!json) return null;
  const g = getters(path, 'certificate');
  const worst = g.object(json, 'worst');
  const gw = getters(path, 'certificate.worst');
  const worstQuantity = worst ? gw.string(worst, 'quantity') : null;
  return {
    note: g.string(json, 'note'),
    quantities: g.number(json, 'quantities'),
    worst: worst && worstQuantity !== null
      ? { quantity: worstQuantity, gibbs: gw.number(worst, 'gibbs'), exact: gw.number(worst, 'exact'), mcse: gw.number(worst, 'mcse'), z: gw.number(worst, 'z') }
      : null,
    bound: g.number(json, 'bound'),
    all_within: g.boolean(json, 'all_within'),
  };
}

function modelChecksSummary(path: string, json: Json | null): ModelChecksSummary | null {
  if (!json) return null;
  const g = getters(path, 'model_checks');
  const extreme = json.extreme_sites;
  if (extreme !== undefined && extreme !== null && (!Array.isArray(extreme) || !extreme.every((s) => typeof s === 'string'))) {
    throw fail(`${path}: "model_checks.extreme_sites" is not a list of site ids`);
  }
  return {
    note: g.string(json, 'note'),
    overall_ppp: g.number(json, 'overall_ppp'),
    extreme_level: g.number(json, 'extreme_level'),
    extreme_sites: (extreme as string[] | null | undefined) ?? [],
    mean_direct: g.number(json, 'mean_direct'),
    mean_model: g.number(json, 'mean_model'),
  };
}

function benchmarkSummary(path: string, json: Json | null): BenchmarkSummary | null {
  if (!json) return null;
  const g = getters(path, 'benchmark');
  const method = g.string(json, 'method');
  if (method === null) throw fail(`${path}: "benchmark.method" is missing`);
  return {
    method,
    method_note: g.string(json, 'method_note'),
    total: g.number(json, 'total'),
    weights: g.string(json, 'weights'),
    unadjusted_sum: interval3(path, 'benchmark.unadjusted_sum', g.object(json, 'unadjusted_sum')),
    adjustment: interval3(path, 'benchmark.adjustment', g.object(json, 'adjustment')),
  };
}

function readFrequentistFile(path: string): FrequentistFile | null {
  if (!existsSync(path)) return null;
  const json = readJson(path);
  const g = getters(path, '');
  const coefficients: FrequentistFile['coefficients'] = [];
  for (const [name, value] of Object.entries(g.object(json, 'coefficients') ?? {})) {
    if (typeof value !== 'object' || value === null || Array.isArray(value)) throw fail(`${path}: "coefficients.${name}" is not an object`);
    const gc = getters(path, `coefficients.${name}`);
    coefficients.push({ name, estimate: gc.number(value as Json, 'estimate'), se: gc.number(value as Json, 'se') });
  }
  return {
    model: g.string(json, 'model'),
    method: g.string(json, 'method'),
    site_variance: g.number(json, 'site_variance'),
    unit_variance: g.number(json, 'unit_variance'),
    coefficients,
    converged: g.boolean(json, 'converged'),
    iterations: g.number(json, 'iterations'),
    at_boundary: g.boolean(json, 'at_boundary'),
    log_likelihood: g.number(json, 'log_likelihood'),
    mse_note: g.string(json, 'mse_note'),
  };
}

// ---------------------------------------------------------------------------------------------
// CSV files keyed by site: every site must be one of estimates.csv's, at most once.

function siteChecker(path: string, sites: ReadonlySet<string>) {
  const seen = new Set<string>();
  return (line: number, raw: string): string => {
    const site = raw.trim();
    if (site === '') throw fail(`${path}: line ${line}, column site: site id is blank`);
    if (!sites.has(site)) throw fail(`${path}: line ${line}, column site: site "${site}" is not in estimates.csv`);
    if (seen.has(site)) throw fail(`${path}: line ${line}, column site: site "${site}" appears twice`);
    seen.add(site);
    return site;
  };
}

function readFrequentistRows(path: string, sites: ReadonlySet<string>): FrequentistRow[] | null {
  if (!existsSync(path)) return null;
  const check = siteChecker(path, sites);
  return readCsv(path, ['site', 'eblup', 'rmse']).map((cells, i) => {
    const line = i + 2;
    return { site: check(line, cells.site), eblup: numberCell(path, line, 'eblup', cells.eblup), rmse: numberCell(path, line, 'rmse', cells.rmse) };
  });
}

function readCertificateRows(path: string): CertificateRow[] | null {
  if (!existsSync(path)) return null;
  return readCsv(path, ['quantity', 'gibbs_mean', 'exact_mean', 'mcse', 'z']).map((cells, i) => {
    const line = i + 2;
    const num = (column: string) => numberCell(path, line, column, cells[column]);
    const quantity = cells.quantity.trim();
    if (quantity === '') throw fail(`${path}: line ${line}, column quantity: quantity name is blank`);
    return { quantity, gibbs_mean: num('gibbs_mean'), exact_mean: num('exact_mean'), mcse: num('mcse'), z: num('z') };
  });
}

function yesNo(path: string, line: number, column: string, value: string): boolean | null {
  const text = value.trim().toLowerCase();
  if (text === '') return null;
  if (text === 'yes' || text === 'true') return true;
  if (text === 'no' || text === 'false') return false;
  throw fail(`${path}: line ${line}, column ${column}: "${value}" is not yes or no`);
}

function readModelCheckRows(path: string, sites: ReadonlySet<string>): ModelCheckRow[] | null {
  if (!existsSync(path)) return null;
  const check = siteChecker(path, sites);
  return readCsv(path, ['site', 'ppp', 'std_residual', 'extreme']).map((cells, i) => {
    const line = i + 2;
    return {
      site: check(line, cells.site),
      ppp: numberCell(path, line, 'ppp', cells.ppp),
      std_residual: numberCell(path, line, 'std_residual', cells.std_residual),
      extreme: yesNo(path, line, 'extreme', cells.extreme),
    };
  });
}

function readBenchmarkedRows(path: string, sites: ReadonlySet<string>): BenchmarkedRow[] | null {
  if (!existsSync(path)) return null;
  const check = siteChecker(path, sites);
  const columns = ['site', 'label', 'estimate', 'sd', 'lower', 'upper', 'estimate_unadjusted', 'flag'];
  return readCsv(path, columns).map((cells, i) => {
    const line = i + 2;
    const num = (column: string) => numberCell(path, line, column, cells[column]);
    const flagText = cells.flag.trim();
    if (flagText !== '' && !FLAGS.includes(flagText as Flag)) {
      throw fail(`${path}: line ${line}, column flag: "${cells.flag}" is not one of publish, caution, suppress`);
    }
    return {
      site: check(line, cells.site),
      label: cells.label,
      estimate: num('estimate'),
      sd: num('sd'),
      lower: num('lower'),
      upper: num('upper'),
      estimate_unadjusted: num('estimate_unadjusted'),
      flag: flagText === '' ? null : (flagText as Flag),
    };
  });
}

/**
 * Reads the auditor's files of the run folder `dir`, whose estimates.csv rows are `estimates`.
 * Each part is `null` when neither its files nor its summary.json key are there.
 */
export function readAuditFiles(dir: string, estimates: readonly SiteRow[]): AuditFiles {
  const summaryPath = join(dir, 'summary.json');
  const summary = readJson(summaryPath);
  const top = getters(summaryPath, '');
  const sites = new Set(estimates.map((s) => s.site));

  const fSummary = frequentistSummary(summaryPath, top.object(summary, 'frequentist'));
  const fFile = readFrequentistFile(join(dir, 'frequentist.json'));
  const fRows = readFrequentistRows(join(dir, 'frequentist.csv'), sites);
  const cSummary = certificateSummary(summaryPath, top.object(summary, 'certificate'));
  const cRows = readCertificateRows(join(dir, 'certificate.csv'));
  const mSummary = modelChecksSummary(summaryPath, top.object(summary, 'model_checks'));
  const mRows = readModelCheckRows(join(dir, 'model_checks.csv'), sites);
  const bSummary = benchmarkSummary(summaryPath, top.object(summary, 'benchmark'));
  const bRows = readBenchmarkedRows(join(dir, 'benchmarked.csv'), sites);

  return {
    frequentist: fSummary || fFile || fRows ? { summary: fSummary, file: fFile, rows: fRows } : null,
    certificate: cSummary || cRows ? { summary: cSummary, rows: cRows } : null,
    modelChecks: mSummary || mRows ? { summary: mSummary, rows: mRows } : null,
    benchmark: bSummary || bRows ? { summary: bSummary, rows: bRows } : null,
  };
}
