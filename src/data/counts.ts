/**
 * The counts model's input from the sites file: one row per site with its covariates, the
 * number of cases y_i and the number of trials n_i (respondents, households tested). A site
 * with 0 trials has no sample and gets the synthetic estimate. Every check fails with one line
 * naming the file, the line and the column.
 *
 * ## Effective counts under a design effect
 * A weighted or clustered survey carries less information than a simple random sample of the
 * same size. With `model.design_effect` = deff the binomial likelihood is applied to the
 * effective counts ñ_i = n_i / deff and ỹ_i = y_i / deff (Korn & Graubard 1998, "Confidence
 * intervals for proportions with small expected number of positive counts estimated from survey
 * data", Survey Methodology 24(2), 193–201, effective sample size n/deff — recalled; common
 * practice in small-area work on survey proportions). The direct share ỹ_i/ñ_i = y_i/n_i is
 * unchanged and its binomial variance is multiplied by deff. The effective counts need not be
 * whole numbers; the sampler draws PG(ñ_i, ·) for non-integer ñ_i (src/models/counts.ts).
 */
import type { Settings } from '../config/types.js';
import { dataError } from '../errors.js';
import { checkCollinearity, designMatrix, fingerprint, formatNumber, siteIds, siteLabels } from './area.js';
import { type CsvTable, cellPlace, numericColumn, readCsvTable, tableName } from './csv.js';
import type { FileFingerprint } from './types.js';

/** The counts model's data, as plain typed arrays: one row per site, intercept first in X. */
export interface CountsData {
  m: number;
  /** Number of coefficients, intercept included. */
  p: number;
  siteIds: string[];
  labels: string[];
  /** 'intercept' then the covariates in config order. */
  coefficientNames: string[];
  /** Design matrix, m × p row-major; column 0 is all ones. */
  X: Float64Array;
  /** Cases y_i as given; 0 where the site has no trials. */
  cases: Float64Array;
  /** Trials n_i as given; 0 for a site without a sample. */
  trials: Float64Array;
  /** The design effect deff (1: simple random sampling within the site). */
  designEffect: number;
  /** Effective cases ỹ_i = y_i / deff and trials ñ_i = n_i / deff, what the likelihood uses. */
  effectiveCases: Float64Array;
  effectiveTrials: Float64Array;
  /** 1 where the site has at least one trial. */
  hasData: Uint8Array;
  /** Name of the cases and trials columns (for notes). */
  casesColumn: string;
  trialsColumn: string;
}

/** A count: blank, negative and fractional values are errors with their own message. */
function countColumn(table: CsvTable, column: string, what: string, blankHint: string): Float64Array {
  const values = numericColumn(table, column, { allowBlank: true, what });
  for (let i = 0; i < values.length; i++) {
    const value = values[i];
    const place = cellPlace(table, i, column);
    if (Number.isNaN(value)) throw dataError(`${place}: is blank; ${blankHint}`);
    if (value < 0) throw dataError(`${place}: ${formatNumber(value)} is negative; a count cannot be below 0`);
    if (!Number.isInteger(value)) throw dataError(`${place}: ${formatNumber(value)} is not a whole number; give counts, not shares or weighted totals`);
  }
  return values;
}

/** Cases: blank is allowed (and read as 0) only where the site has no trials. */
function caseCounts(table: CsvTable, column: string, trials: Float64Array, trialsColumn: string): Float64Array {
  const raw = numericColumn(table, column, { allowBlank: true, what: 'number of cases (model.cases)' });
  const cases = new Float64Array(raw.length);
  for (let i = 0; i < raw.length; i++) {
    const value = raw[i];
    const place = cellPlace(table, i, column);
    if (Number.isNaN(value)) {
      if (trials[i] === 0) continue;
      throw dataError(`${place}: is blank, but the site has ${formatNumber(trials[i])} trials (column "${trialsColumn}"); give the number of cases, 0 if none`);
    }
    if (value < 0) throw dataError(`${place}: ${formatNumber(value)} is negative; a count cannot be below 0`);
    if (!Number.isInteger(value)) throw dataError(`${place}: ${formatNumber(value)} is not a whole number; give counts, not shares or weighted totals`);
    if (value > trials[i]) {
      throw dataError(`${place}: ${formatNumber(value)} cases is more than the ${formatNumber(trials[i])} trials (column "${trialsColumn}")`);
    }
    cases[i] = value;
  }
  return cases;
}

/**
 * Builds the counts model's data from the sites table, checking every value. Pure.
 *
 * Identification: the model needs at least p + 2 sites whose cases are neither 0 nor all of
 * the trials. A site with 0 cases (or all cases) tells only that p_i is small (or large): its
 * likelihood tends to a constant, not to zero, as the logit goes to −∞ (+∞). Only sites with
 * both outcomes pin the logit down, and under a flat prior on β and a uniform prior on σ_u the
 * marginal posterior of σ_u behaves like σ_u^(p − k) for large σ_u, k the number of such sites
 * (each contributes a factor of order 1/σ_u, and integrating β over a region of size σ_u^p
 * contributes σ_u^p), proper only when k ≥ p + 2 — the same count as the area model's rule.
 * @throws UserError (kind 'data') with one line naming file, line and column.
 */
export function buildCountsData(table: CsvTable, settings: Settings): CountsData {
  const { model, sites } = settings;
  if (model.kind !== 'counts') throw new Error(`buildCountsData called for a ${model.kind} model`);
  if (model.cases === undefined || model.trials === undefined) throw new Error('buildCountsData: settings without model.cases or model.trials');
  const file = tableName(table);
  if (table.rows === 0) throw dataError(`${file}: no sites (the file has a header but no rows)`);

  const ids = siteIds(table, sites.id);
  const labels = siteLabels(table, ids, sites.label);
  const trials = countColumn(table, model.trials, 'number of trials (model.trials)', 'write 0 for a site without a sample');
  const cases = caseCounts(table, model.cases, trials, model.trials);
  const hasData = Uint8Array.from(trials, (n) => (n > 0 ? 1 : 0));
  const X = designMatrix(table, model.covariates);
  const coefficientNames = ['intercept', ...model.covariates];
  const p = coefficientNames.length;

  const dataRows: number[] = [];
  let informative = 0;
  for (let i = 0; i < hasData.length; i++) {
    if (hasData[i] === 0) continue;
    dataRows.push(i);
    if (cases[i] > 0 && cases[i] < trials[i]) informative++;
  }
  if (informative < p + 2) {
    const count = informative === 0 ? 'no site has' : informative === 1 ? 'only 1 site has' : `only ${informative} sites have`;
    throw dataError(
      `${file}: ${count} both cases and non-cases (0 < ${model.cases} < ${model.trials}); the model with ${p} coefficient${p === 1 ? '' : 's'} needs at least p + 2 = ${p + 2}`,
    );
  }
  checkCollinearity(table, X, coefficientNames, dataRows);

  const deff = model.design_effect;
  return {
    m: table.rows,
    p,
    siteIds: ids,
    labels,
    coefficientNames,
    X,
    cases,
    trials,
    designEffect: deff,
    effectiveCases: cases.map((y) => y / deff),
    effectiveTrials: trials.map((n) => n / deff),
    hasData,
    casesColumn: model.cases,
    trialsColumn: model.trials,
  };
}

/**
 * Reads the sites file named in the settings and builds the counts model's data.
 * @throws UserError (kind 'data'), e.g. `sites file not found: <path>`.
 */
export async function loadCountsData(settings: Settings): Promise<{ data: CountsData; files: FileFingerprint[] }> {
  const table = await readCsvTable(settings.sites.file, 'sites');
  return { data: buildCountsData(table, settings), files: [fingerprint(table)] };
}
