/** The benchmarking weights: one non-negative number per site, from a column of the sites file. */
import type { Settings } from '../config/types.js';
import { dataError } from '../errors.js';
import { cellPlace, numericColumn, readCsvTable, tableName } from './csv.js';

export async function loadBenchmarkWeights(settings: Settings): Promise<Float64Array | null> {
  const column = settings.benchmark?.weights;
  if (!column) return null;
  const table = await readCsvTable(settings.sites.file, 'sites');
  const weights = numericColumn(table, column, { allowBlank: false, what: 'the benchmarking weight (benchmark.weights)' });
  let total = 0;
  for (let i = 0; i < weights.length; i++) {
    if (weights[i] < 0) throw dataError(`${cellPlace(table, i, column)}: benchmarking weight ${weights[i]} is negative`);
    total += weights[i];
  }
  if (!(total > 0)) throw dataError(`${tableName(table)}: every benchmarking weight in column "${column}" is 0`);
  return weights;
}
