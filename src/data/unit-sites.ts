/**
 * The unit model's sites file: one row per site (district) with its id, a readable label, the
 * population means X̄_i of the covariates (from a census or a satellite layer, known for every
 * site whether sampled or not) and, optionally, the population size N_i. Every check fails with
 * one line naming the file, the line and the column.
 */
import { dataError } from '../errors.js';
import { formatNumber } from './area.js';
import { type CsvTable, cellPlace, numericColumn, tableName, textColumn } from './csv.js';

export interface UnitSites {
  m: number;
  siteIds: string[];
  labels: string[];
  /** Site id → row index. */
  siteIndex: Map<string, number>;
  /** Covariate names, in config order (no intercept). */
  covariateNames: string[];
  /** Population means X̄_i of the covariates, m × covariates row-major. */
  populationMeans: Float64Array;
  /** Population size N_i; NaN where blank or where no column is configured. */
  populationSize: Float64Array;
}

export interface UnitSitesOptions {
  idColumn: string;
  labelColumn?: string;
  covariates: readonly string[];
  /** Column of N_i (model.population_size), if any. */
  populationSizeColumn?: string;
  /** The finite-population estimate needs N_i for every site. */
  requirePopulationSize: boolean;
}

/** Site ids: present, and each one once. */
function readSiteIds(table: CsvTable, column: string): { ids: string[]; index: Map<string, number> } {
  const ids = textColumn(table, column, 'site id (sites.id)');
  const index = new Map<string, number>();
  ids.forEach((id, row) => {
    if (id === '') throw dataError(`${cellPlace(table, row, column)}: the site id is blank`);
    const earlier = index.get(id);
    if (earlier !== undefined) {
      throw dataError(`${tableName(table)}: site id "${id}" appears twice (lines ${table.lines[earlier]} and ${table.lines[row]}, column "${column}")`);
    }
    index.set(id, row);
  });
  return { ids, index };
}

/** N_i: a whole number ≥ 1; blank only where the finite-population estimate is not asked for. */
function populationSizes(table: CsvTable, column: string, required: boolean): Float64Array {
  const sizes = numericColumn(table, column, { allowBlank: true, what: 'population size (model.population_size)' });
  for (let i = 0; i < sizes.length; i++) {
    const value = sizes[i];
    const place = cellPlace(table, i, column);
    if (Number.isNaN(value)) {
      if (required) throw dataError(`${place}: is blank; model.finite_population needs the population size of every site`);
      continue;
    }
    if (!(value >= 1) || !Number.isInteger(value)) {
      throw dataError(`${place}: population size ${formatNumber(value)} is not a whole number of at least 1`);
    }
  }
  return sizes;
}

/**
 * Reads the sites table of a unit model. Pure.
 * @throws UserError (kind 'data') with one line naming file, line and column.
 */
export function buildUnitSites(table: CsvTable, options: UnitSitesOptions): UnitSites {
  if (table.rows === 0) throw dataError(`${tableName(table)}: no sites (the file has a header but no rows)`);
  const { ids, index } = readSiteIds(table, options.idColumn);
  const labels = options.labelColumn === undefined
    ? [...ids]
    : textColumn(table, options.labelColumn, 'site label (sites.label)').map((label, row) => (label === '' ? ids[row] : label));
  const q = options.covariates.length;
  const populationMeans = new Float64Array(table.rows * q);
  options.covariates.forEach((name, j) => {
    const values = numericColumn(table, name, { allowBlank: false, what: 'population mean of a covariate (model.covariates)' });
    for (let i = 0; i < table.rows; i++) populationMeans[i * q + j] = values[i];
  });
  const populationSize = options.populationSizeColumn === undefined
    ? new Float64Array(table.rows).fill(Number.NaN)
    : populationSizes(table, options.populationSizeColumn, options.requirePopulationSize);
  return {
    m: table.rows,
    siteIds: ids,
    labels,
    siteIndex: index,
    covariateNames: [...options.covariates],
    populationMeans,
    populationSize,
  };
}
