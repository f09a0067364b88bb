/** Test helpers: build the unit model's data in memory and fit it in this thread (no files, no workers). */
import { readFileSync } from 'node:fs';
import type { CoefficientPrior, ScalePrior } from '../../src/config/types.js';
import type { CsvTable } from '../../src/data/csv.js';
import { buildUnitData, type UnitData } from '../../src/data/unit-data.js';
import type { UnitSites } from '../../src/data/unit-sites.js';
import { unitSumsFromArrays } from '../../src/data/units.js';
import { unitQuantities } from '../../src/models/unit.js';
import { sampleChains } from '../../src/sampler/parallel.js';
import { quantityChains, summarizeQuantities, type QuantitySummary } from '../../src/summaries/posterior.js';

export interface UnitRow {
  site: string;
  /** Covariates without the intercept. */
  x: number[];
  y: number;
}

export interface UnitSiteRow {
  id: string;
  /** Population means of the covariates. */
  means: number[];
  /** Population size N_i. */
  size?: number;
}

/** The unit model's data from rows in memory, through the same statistics and checks as a file. */
export function unitData(
  sites: readonly UnitSiteRow[],
  rows: readonly UnitRow[],
  covariates: readonly string[],
  options: { finitePopulation?: boolean } = {},
): UnitData {
  const m = sites.length;
  const q = covariates.length;
  const index = new Map(sites.map((s, i) => [s.id, i]));
  const siteOf = Int32Array.from(rows, (r) => {
    const i = index.get(r.site);
    if (i === undefined) throw new Error(`unknown site ${r.site}`);
    return i;
  });
  const values = new Float64Array(rows.length * (q + 1));
  rows.forEach((r, k) => {
    r.x.forEach((v, j) => (values[k * (q + 1) + j] = v));
    values[k * (q + 1) + q] = r.y;
  });
  const sums = unitSumsFromArrays(m, [...covariates, 'y'], siteOf, values);
  const populationMeans = new Float64Array(m * q);
  sites.forEach((s, i) => s.means.forEach((v, j) => (populationMeans[i * q + j] = v)));
  const unitSites: UnitSites = {
    m,
    siteIds: sites.map((s) => s.id),
    labels: sites.map((s) => s.id),
    siteIndex: index,
    covariateNames: [...covariates],
    populationMeans,
    populationSize: Float64Array.from(sites, (s) => s.size ?? Number.NaN),
  };
  const table = { path: 'sites.csv', lines: sites.map((_, i) => i + 2) } as unknown as CsvTable;
  return buildUnitData(sums, unitSites, {
    response: 'y',
    finitePopulation: options.finitePopulation ?? false,
    unitsFile: 'units.csv',
    sitesPlace: { table, populationSizeColumn: 'N' },
  });
}

export interface UnitFitSettings {
  coefficients?: CoefficientPrior;
  siteSd?: ScalePrior;
  unitSd?: ScalePrior;
  chains?: number;
  warmup?: number;
  draws?: number;
  seed?: number;
  threads?: number;
  interval?: number;
}

export interface InMemoryUnitFit extends Map<string, QuantitySummary> {
  chainsOf(name: string): Float64Array[];
}

export async function fitUnitInMemory(data: UnitData, s: UnitFitSettings = {}): Promise<InMemoryUnitFit> {
  const chains = await sampleChains({
    spec: {
      kind: 'unit',
      data,
      coefficients: s.coefficients ?? { kind: 'flat' },
      siteSd: s.siteSd ?? { kind: 'uniform' },
      unitSd: s.unitSd ?? { kind: 'uniform' },
    },
    plan: { warmup: s.warmup ?? 500, draws: s.draws ?? 2500, seed: s.seed ?? 1 },
    chains: s.chains ?? 4,
    threads: s.threads ?? 1,
  });
  const names = unitQuantities(data);
  const summaries = summarizeQuantities(chains, names, s.interval ?? 0.95);
  const fit = new Map(summaries.map((q) => [q.name, q])) as InMemoryUnitFit;
  fit.chainsOf = (name) => quantityChains(chains, names.indexOf(name));
  return fit;
}

/** A CSV file of the shared check values, as rows of cells keyed by the header. */
export function readChecks(name: string): Array<Record<string, string>> {
  const text = readFileSync(new URL(`../../../shared/checks/${name}`, import.meta.url), 'utf8').trim();
  const [header, ...lines] = text.split(/\r?\n/).map((l) => l.split(',').map((c) => c.trim()));
  return lines.map((cells) => Object.fromEntries(header.map((h, i) => [h, cells[i]])));
}

/**
 * The corn and soybean data of Battese, Harter & Fuller (1988, JASA 83(401), Table 1), as
 * collected in ../shared/checks (bhf_segments.csv, bhf_counties.csv; SOURCES.md §3): 12 Iowa
 * counties, segment-level survey hectares and satellite pixel counts, county population mean
 * pixels. `dropOutlier` removes Hardin segment 2, as the paper did.
 */
export function bhfData(crop: 'corn' | 'soy', dropOutlier = true): { data: UnitData; counties: Array<Record<string, string>> } {
  const counties = readChecks('bhf_counties.csv');
  const segments = readChecks('bhf_segments.csv').filter((r) => !dropOutlier || r.outlier_flag === '0');
  const sites: UnitSiteRow[] = counties.map((c) => ({
    id: c.county,
    means: [Number(c.mean_corn_pixels_pop), Number(c.mean_soy_pixels_pop)],
    size: Number(c.N_segments),
  }));
  const rows: UnitRow[] = segments.map((s) => ({
    site: s.county,
    x: [Number(s.corn_pixels), Number(s.soy_pixels)],
    y: Number(crop === 'corn' ? s.corn_ha : s.soy_ha),
  }));
  return { data: unitData(sites, rows, ['corn_pixels', 'soy_pixels']), counties };
}

/** Maximiser of a smooth concave function of two variables: coordinate golden-section search. */
export function maximise(f: (a: number, b: number) => number, a0: number, b0: number): [number, number] {
  const golden = (g: (x: number) => number, lo: number, hi: number): number => {
    const r = (Math.sqrt(5) - 1) / 2;
    let c = hi - r * (hi - lo);
    let d = lo + r * (hi - lo);
    while (hi - lo > 1e-10) {
      if (g(c) > g(d)) hi = d;
      else lo = c;
      c = hi - r * (hi - lo);
      d = lo + r * (hi - lo);
    }
    return 0.5 * (lo + hi);
  };
  let a = a0;
  let b = b0;
  for (let k = 0; k < 200; k++) {
    const na = golden((x) => f(x, b), a - 2, a + 2);
    const nb = golden((x) => f(na, x), b - 2, b + 2);
    const moved = Math.abs(na - a) + Math.abs(nb - b);
    a = na;
    b = nb;
    if (moved < 1e-9) break;
  }
  return [a, b];
}
