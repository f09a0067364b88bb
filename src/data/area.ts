/**
 * The area model's input from the sites file: one row per site with its covariates, its direct
 * estimate (blank where the site has no sample) and what is needed for the sampling variance
 * ψ_i. Every check fails with one line naming the file, the line and the column.
 */
import type { Settings } from '../config/types.js';
import { dataError } from '../errors.js';
import type { AreaData, FileFingerprint } from './types.js';
import { type CsvTable, cellPlace, numericColumn, readCsvTable, tableName, textColumn } from './csv.js';
import { findCollinearity } from './linalg-check.js';

/** Shortest readable form of a number for messages and notes: up to `digits` significant digits. */
export function formatNumber(value: number, digits = 6): string {
  return String(Number(value.toPrecision(digits)));
}

/** Site ids: present, and each one once. */
export function siteIds(table: CsvTable, column: string): string[] {
  const ids = textColumn(table, column, 'site id (sites.id)');
  const firstRow = new Map<string, number>();
  ids.forEach((id, row) => {
    if (id === '') throw dataError(`${cellPlace(table, row, column)}: the site id is blank`);
    const earlier = firstRow.get(id);
    if (earlier !== undefined) {
      throw dataError(
        `${tableName(table)}: site id "${id}" appears twice (lines ${table.lines[earlier]} and ${table.lines[row]}, column "${column}")`,
      );
    }
    firstRow.set(id, row);
  });
  return ids;
}

/** Labels from `sites.label`, falling back to the id where the label is blank or not configured. */
export function siteLabels(table: CsvTable, ids: readonly string[], column: string | undefined): string[] {
  if (column === undefined) return [...ids];
  const labels = textColumn(table, column, 'site label (sites.label)');
  return labels.map((label, row) => (label === '' ? ids[row] : label));
}

/** Design matrix with the intercept in column 0; covariates must be known for every site. */
export function designMatrix(table: CsvTable, covariates: readonly string[]): Float64Array {
  const m = table.rows;
  const p = covariates.length + 1;
  const X = new Float64Array(m * p);
  for (let i = 0; i < m; i++) X[i * p] = 1;
  covariates.forEach((name, k) => {
    const values = numericColumn(table, name, { allowBlank: false, what: 'covariate (model.covariates)' });
    for (let i = 0; i < m; i++) X[i * p + k + 1] = values[i];
  });
  return X;
}

/**
 * Sample sizes n_i: a whole number ≥ 1 where the site has a direct estimate; blank or 0
 * (recorded as 0) where it has none.
 */
function sampleSizes(table: CsvTable, column: string, hasData: Uint8Array, directColumn: string): Float64Array {
  const n = numericColumn(table, column, { allowBlank: true, what: 'sample size (model.sample_size)' });
  for (let i = 0; i < n.length; i++) {
    const place = cellPlace(table, i, column);
    const value = n[i];
    if (hasData[i] === 1) {
      if (Number.isNaN(value)) throw dataError(`${place}: the sample size is blank, but the site has a direct estimate`);
      if (value < 1) throw dataError(`${place}: sample size ${formatNumber(value)} is below 1, but the site has a direct estimate`);
      if (!Number.isInteger(value)) throw dataError(`${place}: sample size ${formatNumber(value)} is not a whole number`);
    } else {
      if (Number.isNaN(value) || value === 0) {
        n[i] = 0;
        continue;
      }
      throw dataError(
        `${place}: sample size is ${formatNumber(value)}, but the direct estimate (column "${directColumn}") is blank; ` +
          'leave the sample size blank or 0 for a site without a sample',
      );
    }
  }
  return n;
}

/** A value that must be present where the site has a direct estimate. */
function requireWhereData(table: CsvTable, column: string, values: Float64Array, hasData: Uint8Array, directColumn: string): void {
  for (let i = 0; i < values.length; i++) {
    if (hasData[i] === 1 && Number.isNaN(values[i])) {
      throw dataError(`${cellPlace(table, i, column)}: is blank, but the site has a direct estimate (column "${directColumn}")`);
    }
  }
}

interface Variances {
  variance: Float64Array;
  sampleSize: Float64Array;
  note: string;
}

/** ψ_i read from a column: must be positive where the site has data. */
function variancesFromColumn(table: CsvTable, settings: Settings, hasData: Uint8Array): Variances {
  const { model } = settings;
  const direct = model.direct as string;
  const column = model.variance as string;
  const raw = numericColumn(table, column, { allowBlank: true, what: 'sampling variance (model.variance)' });
  requireWhereData(table, column, raw, hasData, direct);
  const variance = new Float64Array(raw.length).fill(Number.NaN);
  for (let i = 0; i < raw.length; i++) {
    if (hasData[i] === 0) continue;
    if (raw[i] <= 0) throw dataError(`${cellPlace(table, i, column)}: non-positive sampling variance (${formatNumber(raw[i])})`);
    variance[i] = raw[i];
  }
  const sampleSize = model.sample_size === undefined
    ? Float64Array.from(hasData, (d) => (d === 1 ? Number.NaN : 0))
    : sampleSizes(table, model.sample_size, hasData, direct);
  return { variance, sampleSize, note: `ψ_i read from column "${column}"` };
}

function designEffectNote(designEffect: number): string {
  return designEffect === 1 ? '' : `, times a design effect of ${formatNumber(designEffect)}`;
}

/** ψ_i = design_effect × sd_i² / n_i: sd must be positive where the site has data. */
function variancesFromSd(table: CsvTable, settings: Settings, hasData: Uint8Array): Variances {
  const { model } = settings;
  const direct = model.direct as string;
  const sdColumn = model.sd as string;
  const nColumn = model.sample_size as string;
  const sd = numericColumn(table, sdColumn, { allowBlank: true, what: 'standard deviation (model.sd)' });
  requireWhereData(table, sdColumn, sd, hasData, direct);
  const n = sampleSizes(table, nColumn, hasData, direct);
  const variance = new Float64Array(sd.length).fill(Number.NaN);
  for (let i = 0; i < sd.length; i++) {
    if (hasData[i] === 0) continue;
    if (sd[i] <= 0) {
      throw dataError(`${cellPlace(table, i, sdColumn)}: sd is ${formatNumber(sd[i])}, giving a non-positive sampling variance`);
    }
    variance[i] = (model.design_effect * sd[i] * sd[i]) / n[i];
  }
  const note = `ψ_i = sd_i² / n_i from columns "${sdColumn}" and "${nColumn}"${designEffectNote(model.design_effect)}`;
  return { variance, sampleSize: n, note };
}

/**
 * Pooled within-site variance s²_pooled = Σ(n_i − 1) sd_i² / Σ(n_i − 1) over the sites with
 * data, and ψ_i = design_effect × s²_pooled / n_i. Sites with n_i = 1 carry no weight, so their
 * sd may be blank. Pooling trades a little bias for much less noise when per-site sds rest on
 * a handful of units (common practice).
 */
function variancesPooled(table: CsvTable, settings: Settings, hasData: Uint8Array): Variances {
  const { model } = settings;
  const direct = model.direct as string;
  const sdColumn = model.sd as string;
  const nColumn = model.sample_size as string;
  const name = tableName(table);
  const sd = numericColumn(table, sdColumn, { allowBlank: true, what: 'standard deviation (model.sd)' });
  const n = sampleSizes(table, nColumn, hasData, direct);
  let sumSquares = 0;
  let degrees = 0;
  let pooledSites = 0;
  for (let i = 0; i < sd.length; i++) {
    if (hasData[i] === 0 || n[i] < 2) continue;
    const place = cellPlace(table, i, sdColumn);
    if (Number.isNaN(sd[i])) throw dataError(`${place}: is blank; the pooled variance needs the sd of every site with 2 or more sampled units`);
    if (sd[i] < 0) throw dataError(`${place}: sd is ${formatNumber(sd[i])}; a standard deviation cannot be negative`);
    sumSquares += (n[i] - 1) * sd[i] * sd[i];
    degrees += n[i] - 1;
    pooledSites++;
  }
  if (degrees === 0) {
    throw dataError(`${name}: the pooled variance needs at least one site with a sample of 2 or more (column "${nColumn}")`);
  }
  const pooled = sumSquares / degrees;
  if (!(pooled > 0)) {
    throw dataError(`${name}: every sd in column "${sdColumn}" is 0, giving a non-positive sampling variance`);
  }
  const variance = new Float64Array(sd.length).fill(Number.NaN);
  for (let i = 0; i < sd.length; i++) {
    if (hasData[i] === 1) variance[i] = (model.design_effect * pooled) / n[i];
  }
  const note =
    `ψ_i = s²_pooled / n_i, with the pooled within-site variance s²_pooled = Σ(n_i − 1) sd_i² / Σ(n_i − 1) = ` +
    `${formatNumber(pooled)} over ${pooledSites} site${pooledSites === 1 ? '' : 's'} (columns "${sdColumn}" and "${nColumn}")` +
    designEffectNote(model.design_effect);
  return { variance, sampleSize: n, note };
}

/** A readable linear combination: `25.4 × rain − 3 × veg + 1`. */
function formatCombination(terms: { name: string; coefficient: number }[]): string {
  let text = '';
  for (const { name, coefficient } of terms) {
    const magnitude = formatNumber(Math.abs(coefficient), 4);
    const piece = name === 'intercept' ? magnitude : `${magnitude} × ${name}`;
    if (text === '') text = coefficient < 0 ? `−${piece}` : piece;
    else text += coefficient < 0 ? ` − ${piece}` : ` + ${piece}`;
  }
  return text;
}

/**
 * Fails when the covariates are exactly collinear on the sites with data (the coefficients
 * would not be identified), naming the columns and the relation.
 */
export function checkCollinearity(table: CsvTable, X: Float64Array, names: readonly string[], dataRows: readonly number[]): void {
  const p = names.length;
  const found = findCollinearity(X, p, dataRows);
  if (found === null) return;
  const target = names[found.column];
  const where = `on the ${dataRows.length} sites with a direct estimate`;
  const file = tableName(table);
  const covariateTerms = found.terms.filter((t) => t.index > 0);
  if (covariateTerms.length === 0) {
    const value = found.terms.length === 0 ? 0 : found.terms[0].coefficient;
    throw dataError(`${file}: covariate "${target}" is constant (${formatNumber(value, 4)}) ${where}, so it cannot be told apart from the intercept; drop it`);
  }
  // Intercept last reads more naturally: "25.4 × rain + 3".
  const ordered = [...covariateTerms, ...found.terms.filter((t) => t.index === 0)];
  const relation = `${target} = ${formatCombination(ordered.map((t) => ({ name: names[t.index], coefficient: t.coefficient })))}`;
  const others = covariateTerms.map((t) => `"${names[t.index]}"`);
  if (others.length === 1) {
    throw dataError(`${file}: covariates ${others[0]} and "${target}" are collinear (${relation}) ${where}; drop one of them`);
  }
  const list = `${others.slice(0, -1).join(', ')} and ${others[others.length - 1]}`;
  throw dataError(`${file}: covariate "${target}" is a linear combination of ${list} (${relation}) ${where}; drop one of them`);
}

/**
 * Builds the area model's data from the sites table, checking every value. Pure.
 *
 * ψ_i (Fay & Herriot 1979's known sampling variance) comes from `model.variance_from`:
 * `column` reads it; `sd` computes design_effect × sd_i² / n_i; `pooled` computes
 * design_effect × s²_pooled / n_i. A blank direct estimate means the site has no sample: its
 * variance and sample size may be blank, and n_i is recorded as 0.
 *
 * The model needs at least p + 2 sites with data (p coefficients, intercept included): under a
 * flat prior on β and a uniform prior on σ_u, the marginal posterior of σ_u behaves like
 * σ_u^(p − m) for large σ_u and is proper only when m ≥ p + 2. (Derivation: the marginal
 * posterior of the between-group sd in Gelman et al. 2013, Bayesian Data Analysis 3rd ed.,
 * sec. 5.4, extended from a common mean to p coefficients.)
 * @throws UserError (kind 'data') with one line naming file, line and column.
 */
export function buildAreaData(table: CsvTable, settings: Settings): AreaData {
  const { model, sites } = settings;
  if (model.kind !== 'area') throw new Error(`buildAreaData called for a ${model.kind} model`);
  if (model.direct === undefined) throw new Error('buildAreaData: settings without model.direct');
  const file = tableName(table);
  if (table.rows === 0) throw dataError(`${file}: no sites (the file has a header but no rows)`);

  const ids = siteIds(table, sites.id);
  const labels = siteLabels(table, ids, sites.label);
  const direct = numericColumn(table, model.direct, { allowBlank: true, what: 'direct estimate (model.direct)' });
  const hasData = Uint8Array.from(direct, (y) => (Number.isNaN(y) ? 0 : 1));
  const from = model.variance_from ?? (model.variance !== undefined ? 'column' : 'sd');
  const { variance, sampleSize, note } =
    from === 'column'
      ? variancesFromColumn(table, settings, hasData)
      : from === 'sd'
        ? variancesFromSd(table, settings, hasData)
        : variancesPooled(table, settings, hasData);
  const X = designMatrix(table, model.covariates);
  const coefficientNames = ['intercept', ...model.covariates];
  const p = coefficientNames.length;

  const dataRows: number[] = [];
  for (let i = 0; i < hasData.length; i++) if (hasData[i] === 1) dataRows.push(i);
  if (dataRows.length < p + 2) {
    const count = dataRows.length === 1 ? 'only 1 site has' : dataRows.length === 0 ? 'no site has' : `only ${dataRows.length} sites have`;
    throw dataError(
      `${file}: ${count} a direct estimate (column "${model.direct}"); the model with ${p} coefficient${p === 1 ? '' : 's'} needs at least p + 2 = ${p + 2}`,
    );
  }
  checkCollinearity(table, X, coefficientNames, dataRows);

  return {
    m: table.rows,
    p,
    siteIds: ids,
    labels,
    coefficientNames,
    X,
    direct,
    variance,
    sampleSize,
    hasData,
    varianceNote: note,
  };
}

/** The manifest's fingerprint of a table. */
export function fingerprint(table: CsvTable): FileFingerprint {
  return { role: table.role, path: table.path, rows: table.rows, sha256: table.sha256 };
}

/**
 * Reads the sites file named in the settings and builds the area model's data.
 * @throws UserError (kind 'data'), e.g. `sites file not found: <path>`.
 */
export async function loadAreaData(settings: Settings): Promise<{ data: AreaData; files: FileFingerprint[] }> {
  const table = await readCsvTable(settings.sites.file, 'sites');
  return { data: buildAreaData(table, settings), files: [fingerprint(table)] };
}
