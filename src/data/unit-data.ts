/**
 * The unit model's input: the sites file (population covariate means, optional population
 * sizes) joined with the per-site statistics of the units file, reduced to what the model uses —
 * per site n_i, the sample means x̄_i and ȳ_i and the within-site sum of squares of the
 * response, plus the within-site cross-products pooled over sites. Plain typed arrays, so the
 * spec crosses into worker threads as is.
 */
import { basename } from 'node:path';
import type { Settings } from '../config/types.js';
import { configError, dataError } from '../errors.js';
import type { FileFingerprint } from './types.js';
import { fingerprint, formatNumber } from './area.js';
import { type CsvTable, cellPlace, readCsvTable, tableName } from './csv.js';
import { buildUnitSites, type UnitSites } from './unit-sites.js';
import { packedLength, readAggregatedUnits, readUnitsFile, type UnitSums } from './units.js';

export interface UnitData {
  /** Number of sites (rows of the sites file). */
  m: number;
  /** Number of coefficients, intercept included. */
  p: number;
  siteIds: string[];
  labels: string[];
  /** 'intercept' then the covariates in config order. */
  coefficientNames: string[];
  /** Name of the response column, for notes. */
  responseName: string;
  /** n_i, units sampled in each site (0 = no sample). */
  n: Float64Array;
  /** Total number of sampled units, Σ n_i. */
  units: number;
  /** Number of sites with n_i ≥ 1. */
  sampledSites: number;
  /** Sample means of the covariates, m × p row-major with 1 in column 0; 0 where n_i = 0. */
  xbar: Float64Array;
  /** Sample mean of the response; NaN where n_i = 0. */
  ybar: Float64Array;
  /** Σ_j (y_ij − ȳ_i)² per site (0 where n_i ≤ 1). */
  withinY: Float64Array;
  /** Σ_i Σ_j (x_ij − x̄_i)(x_ij − x̄_i)ᵀ, p × p full symmetric (row and column 0 are zero). */
  withinXX: Float64Array;
  /** Σ_i Σ_j (x_ij − x̄_i)(y_ij − ȳ_i), length p (entry 0 is zero). */
  withinXY: Float64Array;
  /** Σ_i Σ_j (y_ij − ȳ_i)². */
  withinYY: number;
  /** Population means X̄_i, m × p row-major with 1 in column 0. */
  populationMeans: Float64Array;
  /** Population size N_i; NaN where not given. */
  populationSize: Float64Array;
  /** Target the finite-population mean (sampled units' values plus predictions for the rest). */
  finitePopulation: boolean;
}

/** Unit-model keys of the config that the shared settings type does not list yet. */
export interface UnitOptions {
  /** `units.aggregated: true`: the units file holds per-site statistics, not unit rows. */
  aggregated: boolean;
  /** `model.finite_population: true`. */
  finitePopulation: boolean;
}

export function unitOptions(settings: Settings): UnitOptions {
  return { aggregated: settings.units?.aggregated === true, finitePopulation: settings.model.finite_population === true };
}

/** Where a site's population size sits, for messages. */
interface SitesPlace {
  table: CsvTable;
  populationSizeColumn?: string;
}

/**
 * The relation behind an exactly collinear design, found on the pooled cross-products of the
 * units (centred at their overall means): a covariate with no spread, or one that is a linear
 * combination of others. Null when the design has full column rank.
 */
function collinearity(gram: Float64Array, q: number, names: readonly string[]): string | null {
  // gram: q × q centred cross-products of the covariates (intercept removed by centring).
  for (let j = 0; j < q; j++) if (!(gram[j * q + j] > 0)) return `covariate "${names[j]}" is constant over the sampled units, so it cannot be told apart from the intercept; drop it`;
  const scale = Float64Array.from({ length: q }, (_, j) => 1 / Math.sqrt(gram[j * q + j]));
  const L = new Float64Array(q * q);
  for (let j = 0; j < q; j++) {
    for (let i = j; i < q; i++) {
      let s = gram[i * q + j] * scale[i] * scale[j];
      for (let k = 0; k < j; k++) s -= L[i * q + k] * L[j * q + k];
      if (i === j) {
        // s is the share of covariate j's spread not explained by the covariates before it.
        if (s < 1e-10) {
          const z = new Float64Array(j); // L[0:j,0:j] z = R[0:j, j], then back-substitute for the coefficients
          for (let r = 0; r < j; r++) {
            let v = gram[r * q + j] * scale[r] * scale[j];
            for (let k = 0; k < r; k++) v -= L[r * q + k] * z[k];
            z[r] = v / L[r * q + r];
          }
          const c = new Float64Array(j);
          for (let r = j - 1; r >= 0; r--) {
            let v = z[r];
            for (let k = r + 1; k < j; k++) v -= L[k * q + r] * c[k];
            c[r] = v / L[r * q + r];
          }
          const others = names.slice(0, j).filter((_, r) => Math.abs(c[r]) > 1e-6).map((n) => `"${n}"`);
          const list = others.length <= 1 ? others.join('') : `${others.slice(0, -1).join(', ')} and ${others[others.length - 1]}`;
          return `covariate "${names[j]}" is a linear combination of ${list} (and the intercept) over the sampled units; drop one of them`;
        }
        L[j * q + j] = Math.sqrt(s);
      } else {
        L[i * q + j] = s / L[j * q + j];
      }
    }
  }
  return null;
}

/**
 * Joins the per-site statistics with the sites file and checks that the model is identified:
 * enough sampled sites (p + 2, the condition under which the marginal posterior of σ_u is proper
 * with flat coefficients and a uniform prior, as for the area model), within-site replication
 * for σ_e, covariates not collinear over the units, and N_i ≥ n_i. Pure.
 * @throws UserError (kind 'data').
 */
export function buildUnitData(
  sums: UnitSums,
  sites: UnitSites,
  options: { response: string; finitePopulation: boolean; unitsFile: string; sitesPlace: SitesPlace },
): UnitData {
  const { m } = sites;
  const q = sites.covariateNames.length;
  const p = q + 1;
  const k = sums.k; // q covariates, then the response
  const kk = packedLength(k);
  const n = Float64Array.from(sums.count);
  const xbar = new Float64Array(m * p);
  const ybar = new Float64Array(m).fill(Number.NaN);
  const withinY = new Float64Array(m);
  const pooled = new Float64Array(kk);
  const mean = new Float64Array(k);
  let units = 0;
  let sampledSites = 0;
  let replicated = 0;
  for (let i = 0; i < m; i++) {
    const ni = n[i];
    if (ni === 0) continue;
    units += ni;
    sampledSites++;
    if (ni >= 2) replicated++;
    for (let a = 0; a < k; a++) mean[a] = sums.sum[i * k + a] / ni;
    xbar[i * p] = 1;
    for (let j = 0; j < q; j++) xbar[i * p + j + 1] = sums.shift[j] + mean[j];
    ybar[i] = sums.shift[q] + mean[q];
    let c = 0;
    for (let a = 0; a < k; a++) {
      for (let b = 0; b <= a; b++, c++) {
        let w = sums.cross[i * kk + c] - ni * mean[a] * mean[b];
        if (a === b && w < 0) w = 0; // rounding
        pooled[c] += w;
        if (a === q && b === q) withinY[i] = w;
      }
    }
  }
  const withinXX = new Float64Array(p * p);
  const withinXY = new Float64Array(p);
  const at = (a: number, b: number) => (a >= b ? pooled[(a * (a + 1)) / 2 + b] : pooled[(b * (b + 1)) / 2 + a]);
  for (let j = 0; j < q; j++) {
    for (let l = 0; l < q; l++) withinXX[(j + 1) * p + l + 1] = at(j, l);
    withinXY[j + 1] = at(q, j);
  }
  const withinYY = at(q, q);

  const coefficientNames = ['intercept', ...sites.covariateNames];
  const file = options.unitsFile;
  if (sampledSites < p + 2) {
    const count = sampledSites === 1 ? 'only 1 site has' : `only ${sampledSites} sites have`;
    throw dataError(`${file}: ${count} sampled units; the model with ${p} coefficient${p === 1 ? '' : 's'} needs at least p + 2 = ${p + 2} sampled sites`);
  }
  if (replicated === 0) {
    throw dataError(`${file}: every sampled site has a single unit, so the within-site sd σ_e cannot be told apart from σ_u; the unit model needs some sites with 2 or more units`);
  }
  if (!(withinYY > 0)) {
    throw dataError(`${file}: the response "${options.response}" does not vary within any site, so the within-site sd σ_e cannot be learned`);
  }
  // Covariates over the units, centred at their overall means: within plus between cross-products.
  const overall = new Float64Array(q);
  for (let i = 0; i < m; i++) for (let j = 0; j < q; j++) overall[j] += n[i] * xbar[i * p + j + 1];
  for (let j = 0; j < q; j++) overall[j] /= units;
  const gram = new Float64Array(q * q);
  for (let j = 0; j < q; j++) for (let l = 0; l < q; l++) gram[j * q + l] = at(j, l);
  for (let i = 0; i < m; i++) {
    if (n[i] === 0) continue;
    for (let j = 0; j < q; j++) {
      const dj = xbar[i * p + j + 1] - overall[j];
      for (let l = 0; l < q; l++) gram[j * q + l] += n[i] * dj * (xbar[i * p + l + 1] - overall[l]);
    }
  }
  const problem = collinearity(gram, q, sites.covariateNames);
  if (problem !== null) throw dataError(`${file}: ${problem}`);

  const { table, populationSizeColumn } = options.sitesPlace;
  if (options.finitePopulation && populationSizeColumn !== undefined) {
    for (let i = 0; i < m; i++) {
      if (sites.populationSize[i] < n[i]) {
        throw dataError(
          `${cellPlace(table, i, populationSizeColumn)}: population size ${formatNumber(sites.populationSize[i])} is smaller than the ${n[i]} units sampled in site "${sites.siteIds[i]}" (${file})`,
        );
      }
    }
  }

  const populationMeans = new Float64Array(m * p);
  for (let i = 0; i < m; i++) {
    populationMeans[i * p] = 1;
    for (let j = 0; j < q; j++) populationMeans[i * p + j + 1] = sites.populationMeans[i * q + j];
  }
  return {
    m,
    p,
    siteIds: sites.siteIds,
    labels: sites.labels,
    coefficientNames,
    responseName: options.response,
    n,
    units,
    sampledSites,
    xbar,
    ybar,
    withinY,
    withinXX,
    withinXY,
    withinYY,
    populationMeans,
    populationSize: sites.populationSize,
    finitePopulation: options.finitePopulation,
  };
}

/**
 * Reads the sites file and the units file (streamed unit rows, or pre-aggregated per-site
 * statistics with `units.aggregated: true`) named in the settings.
 * @throws UserError (kind 'data') naming file, line and column.
 */
export async function loadUnitData(settings: Settings): Promise<{ data: UnitData; files: FileFingerprint[] }> {
  const { model, sites: sitesConfig } = settings;
  const units = settings.units;
  if (model.kind !== 'unit' || units === undefined || model.response === undefined) {
    throw new Error('loadUnitData called without a unit model, its units file or its response');
  }
  const options = unitOptions(settings);
  const configName = basename(settings.config_path);
  if (model.covariates.includes(model.response)) {
    throw configError(`${configName}: model.response: "${model.response}" is also listed in model.covariates; the response cannot be a covariate`);
  }
  if (units.site === model.response || model.covariates.includes(units.site)) {
    throw configError(`${configName}: units.site: "${units.site}" is also the column of ${units.site === model.response ? 'model.response' : 'a covariate'}; the site id needs its own column`);
  }
  const sitesTable = await readCsvTable(sitesConfig.file, 'sites');
  const sites = buildUnitSites(sitesTable, {
    idColumn: sitesConfig.id,
    labelColumn: sitesConfig.label,
    covariates: model.covariates,
    populationSizeColumn: model.population_size,
    requirePopulationSize: options.finitePopulation,
  });
  const variables = [...model.covariates, model.response];
  const roles = [...model.covariates.map(() => 'covariate (model.covariates)'), 'response (model.response)'];
  let sums: UnitSums;
  let unitsPrint: FileFingerprint;
  if (options.aggregated) {
    const table = await readCsvTable(units.file, 'units');
    sums = readAggregatedUnits(table, units.site, variables, sites.siteIndex, sites.m, tableName(sitesTable));
    unitsPrint = fingerprint(table);
  } else {
    const streamed = await readUnitsFile(
      { path: units.file, siteColumn: units.site, variables, roles, siteIndex: sites.siteIndex, sitesFile: tableName(sitesTable) },
      sites.m,
    );
    sums = streamed.sums;
    unitsPrint = { role: 'units', path: units.file, rows: sums.rows, sha256: streamed.sha256 };
  }
  const data = buildUnitData(sums, sites, {
    response: model.response,
    finitePopulation: options.finitePopulation,
    unitsFile: tableName({ path: units.file }),
    sitesPlace: { table: sitesTable, populationSizeColumn: model.population_size },
  });
  return { data, files: [fingerprint(sitesTable), unitsPrint] };
}
