/**
 * The unit model's inputs: the streaming reader of the units file (exact number parsing, records
 * split across chunks, one-line errors naming file, line and column), the same statistics from a
 * file of a few hundred thousand rows as from the same rows in memory, the pre-aggregated
 * per-site file, and the sites file's checks.
 */
import { mkdtempSync, rmSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { afterAll, describe, expect, it } from 'vitest';
import { parseCsvTable } from '../src/data/csv.js';
import { buildUnitData } from '../src/data/unit-data.js';
import { buildUnitSites } from '../src/data/unit-sites.js';
import {
  AGGREGATE_COLUMNS,
  aggregationQuery,
  fastDecimal,
  readAggregatedUnits,
  readUnitsFile,
  UnitFileReader,
  unitSumsFromArrays,
  type UnitFileLayout,
  type UnitSums,
} from '../src/data/units.js';
import { UserError } from '../src/errors.js';
import { createRng } from '../src/sampler/rng.js';
import { normal } from '../src/sampler/variates.js';
import { exactUnitPosterior } from '../src/summaries/exact-unit.js';

const work = mkdtempSync(join(tmpdir(), 'shrinkwell-units-'));
afterAll(() => rmSync(work, { recursive: true, force: true }));

const SITE_IDS = ['D01', 'D02', 'D03', 'Lake "North"', 'D05'];
const siteIndex = new Map(SITE_IDS.map((id, i) => [id, i]));

function layout(path = join(work, 'plots.csv')): UnitFileLayout {
  return {
    path,
    siteColumn: 'district',
    variables: ['rain', 'yield'],
    roles: ['covariate (model.covariates)', 'response (model.response)'],
    siteIndex,
    sitesFile: 'districts.csv',
  };
}

/** Reads CSV text through the streaming reader in chunks of the given size. */
function readText(text: string, chunk: number, m = SITE_IDS.length): UnitSums {
  const bytes = Buffer.from(text, 'utf8');
  const reader = new UnitFileReader(layout(), m);
  for (let at = 0; at < bytes.length; at += chunk) reader.push(bytes.subarray(at, Math.min(at + chunk, bytes.length)));
  return reader.finish();
}

function messageOf(action: () => unknown): string {
  try {
    action();
  } catch (error) {
    if (error instanceof UserError) return error.message;
    throw error;
  }
  throw new Error('expected a UserError');
}

describe('number parsing from bytes', () => {
  it('the fast path gives exactly what Number() gives, or defers', () => {
    const rng = createRng(31, 0);
    const forms: string[] = ['0', '-0', '+5', '007', '5.', '.5', '1e5', '1E-5', '2.5e+3', '123456789012345', '1234567890123456', '0.1', '0.30000000000000004', '9007199254740993', '1e22', '1e23', '4.35e-22', '1e-23'];
    for (let k = 0; k < 20000; k++) {
      const digits = Math.floor(rng.uniform() * 18) + 1;
      let s = rng.uniform() < 0.3 ? '-' : '';
      for (let d = 0; d < digits; d++) s += String(Math.floor(rng.uniform() * 10));
      const point = Math.floor(rng.uniform() * (digits + 1));
      if (rng.uniform() < 0.7) s = s.slice(0, s.length - point) + '.' + s.slice(s.length - point);
      if (rng.uniform() < 0.3) s += `e${Math.floor(rng.uniform() * 60) - 30}`;
      forms.push(s);
    }
    let fast = 0;
    for (const text of forms) {
      const bytes = Buffer.from(text);
      const value = fastDecimal(bytes, 0, bytes.length);
      if (Number.isNaN(value)) continue;
      fast++;
      expect(Object.is(value, Number(text)), text).toBe(true);
    }
    expect(fast).toBeGreaterThan(10000); // most plain numbers take the fast path
    for (const bad of ['', '-', '.', 'e5', '1e', '1.2.3', '12a', '0x10', '1,5', ' 1']) {
      const bytes = Buffer.from(bad);
      expect(fastDecimal(bytes, 0, bytes.length), bad).toBeNaN();
    }
  });
});

describe('streaming reader', () => {
  const text =
    '\ufeffdistrict,rain,yield,note\r\n' +
    'D01,812.5,2.31,ok\r\n' +
    '"D02", 905 ,3.10,"with, comma"\r\n' +
    '\r\n' +
    '"Lake ""North""",1002.25,4.0,"two\r\nlines"\r\n' +
    'D01,799,2.05e0,\r\n' +
    'D03,1e3,3.333333333333333333,x'; // no final line end; 19 significant digits: the strict path
  const rows: Array<[string, number, number]> = [
    ['D01', 812.5, 2.31],
    ['D02', 905, 3.1],
    ['Lake "North"', 1002.25, 4.0],
    ['D01', 799, 2.05],
    ['D03', 1000, Number('3.333333333333333333')],
  ];
  const reference = unitSumsFromArrays(
    SITE_IDS.length,
    ['rain', 'yield'],
    Int32Array.from(rows, (r) => siteIndex.get(r[0])!),
    Float64Array.from(rows.flatMap((r) => [r[1], r[2]])),
  );

  it('gives the in-memory statistics for any chunk size (BOM, CRLF, quotes, blank lines, no final newline)', () => {
    for (const chunk of [1, 2, 3, 7, 64, 1 << 20]) {
      const sums = readText(text, chunk);
      expect(sums.rows, `chunk ${chunk}`).toBe(5);
      expect(sums.count).toEqual(reference.count);
      expect(sums.sum).toEqual(reference.sum);
      expect(sums.cross).toEqual(reference.cross);
      expect(sums.shift).toEqual(reference.shift);
    }
  });

  const errors: Array<[string, string, string]> = [
    ['bad number', 'district,rain,yield\nD01,800,2.1\nD02,810,abc\n', 'plots.csv line 3, column "yield": "abc" is not a number'],
    ['blank site id', 'district,rain,yield\nD01,800,2.1\n ,810,2.2\n', 'plots.csv line 3, column "district": the site id is blank'],
    ['wrong column count', 'district,rain,yield\nD01,800,2.1\nD02,810,2.2,9\n', 'plots.csv line 3: 4 values, but the header has 3 columns'],
    ['too few columns', 'district,rain,yield\nD01,800\n', 'plots.csv line 2: 2 values, but the header has 3 columns'],
    ['blank response', 'district,rain,yield\nD01,800,\n', 'plots.csv line 2, column "yield": is blank; every unit needs a value for the response (model.response)'],
    ['missing marker', 'district,rain,yield\nD01,NA,2\n', 'plots.csv line 2, column "rain": "NA" is not a number; every unit needs a value for the covariate (model.covariates) (drop units with missing values before the fit)'],
    ['decimal comma', 'district,rain,yield\nD01,800,"2,5"\n', 'plots.csv line 2, column "yield": "2,5" is not a number; use a point as the decimal mark'],
    ['not finite', 'district,rain,yield\nD01,1e999,2\n', 'plots.csv line 2, column "rain": "1e999" is not finite'],
    ['line numbers count quoted line breaks', 'district,rain,yield,note\nD01,800,2,"a\nb\nc"\nD02,x,2,\n', 'plots.csv line 5, column "rain": "x" is not a number'],
    ['missing column', 'district,Rain,yield\nD01,800,2\n', 'plots.csv: no column "rain" for the covariate (model.covariates); did you mean "Rain"? (columns are: district, Rain, yield)'],
    ['repeated column', 'district,rain,yield,rain\n', 'plots.csv line 1: column "rain" appears twice (columns 2 and 4)'],
    ['empty file', '', 'plots.csv: the file is empty (expected a header line with column names)'],
    ['header only', 'district,rain,yield\n', 'plots.csv: no units (the file has a header but no rows)'],
    [
      'unknown site ids, each with its first line',
      'district,rain,yield\nD01,800,2\nD9,800,2\nD02,800,2\nX,1,1\nD9,1,1\n',
      'plots.csv: 3 units belong to site ids not in the sites file districts.csv (column "district"): "D9" (first on line 3), "X" (first on line 5); every unit\'s site must be listed in the sites file',
    ],
  ];
  for (const [what, csv, message] of errors) {
    it(`error: ${what}`, () => {
      expect(messageOf(() => readText(csv, 5))).toBe(message);
      expect(messageOf(() => readText(csv, 1 << 20))).toBe(message);
    });
  }

  it('a missing file is a data error naming it', async () => {
    await expect(readUnitsFile(layout(join(work, 'nope.csv')), 5)).rejects.toThrow(`units file not found: ${join(work, 'nope.csv')}`);
  });
});

/** A simulated survey of `rows` units over `m` sites: ids, two covariates and a response, as text and as numbers. */
function simulatedFile(rows: number, m: number, seed: number) {
  const rng = createRng(seed, 0);
  const site = new Int32Array(rows);
  const values = new Float64Array(rows * 3);
  const lines: string[] = ['site,x1,x2,y'];
  const effects = Float64Array.from({ length: m }, () => 0.5 * normal(rng));
  for (let r = 0; r < rows; r++) {
    const i = Math.floor(rng.uniform() * rng.uniform() * m); // uneven site sizes, unordered rows
    const x1 = (100 + 10 * normal(rng)).toFixed(3);
    const x2 = (0.4 + 0.1 * normal(rng)).toFixed(4);
    const y = (1.2 + 0.02 * Number(x1) + 2 * Number(x2) + effects[i] + normal(rng)).toFixed(5);
    site[r] = i;
    values[r * 3] = Number(x1);
    values[r * 3 + 1] = Number(x2);
    values[r * 3 + 2] = Number(y);
    lines.push(`S${i},${x1},${x2},${y}`);
  }
  return { site, values, text: lines.join('\n') + '\n' };
}

function sitesFor(m: number, unsampled: number[] = []) {
  const lines = ['site,name,x1,x2,N'];
  for (let i = 0; i < m + unsampled.length; i++) lines.push(`S${i},Site ${i},${(100 + (i % 7)).toFixed(1)},${(0.35 + (i % 5) * 0.02).toFixed(2)},${100000}`);
  const table = parseCsvTable(Buffer.from(lines.join('\n') + '\n'), join(work, 'sites.csv'), 'sites');
  return { table, sites: buildUnitSites(table, { idColumn: 'site', labelColumn: 'name', covariates: ['x1', 'x2'], populationSizeColumn: 'N', requirePopulationSize: false }) };
}

describe('a large streamed file equals the same rows loaded in memory', () => {
  it('300,000 rows over 400 sites: identical statistics, hence an identical posterior', async () => {
    const m = 400;
    const { site, values, text } = simulatedFile(300_000, m, 8);
    const path = join(work, 'large.csv');
    writeFileSync(path, text);
    const { sites, table } = sitesFor(m, [1]); // one more site in the sites file, with no units
    const streamLayout: UnitFileLayout = { path, siteColumn: 'site', variables: ['x1', 'x2', 'y'], roles: ['covariate', 'covariate', 'response'], siteIndex: sites.siteIndex, sitesFile: 'sites.csv' };
    const streamed = await readUnitsFile(streamLayout, sites.m, 64 * 1024);
    const memory = unitSumsFromArrays(sites.m, ['x1', 'x2', 'y'], site, values);
    expect(streamed.sums.rows).toBe(300_000);
    expect(streamed.sums.count).toEqual(memory.count);
    expect(streamed.sums.sum).toEqual(memory.sum);
    expect(streamed.sums.cross).toEqual(memory.cross);
    // Independently: two-pass site means of y from the numbers.
    const sumY = new Float64Array(sites.m);
    for (let r = 0; r < site.length; r++) sumY[site[r]] += values[r * 3 + 2];
    const options = { response: 'y', finitePopulation: false, unitsFile: 'large.csv', sitesPlace: { table } };
    const data = buildUnitData(streamed.sums, sites, options);
    for (let i = 0; i < m; i++) if (data.n[i] > 0) expect(data.ybar[i]).toBeCloseTo(sumY[i] / data.n[i], 10);
    expect(data.n[m]).toBe(0);
    const priors = { coefficients: { kind: 'flat' as const }, site_sd: { kind: 'uniform' as const }, unit_sd: { kind: 'uniform' as const } };
    const a = exactUnitPosterior(data, priors);
    const b = exactUnitPosterior(buildUnitData(memory, sites, options), priors);
    expect(a).toEqual(b);
  });
});

describe('pre-aggregated per-site statistics (the GROUP BY table)', () => {
  const m = 60;
  const { site, values } = simulatedFile(6000, m, 9);
  const variables = ['x1', 'x2', 'y'];

  /** The aggregation done as the documented query does it, in plain JavaScript, no shift. */
  function aggregatedCsv(split: boolean): string {
    const header = [
      'site',
      AGGREGATE_COLUMNS.count,
      ...variables.map((v) => AGGREGATE_COLUMNS.sum(v)),
      ...variables.flatMap((a, i) => variables.slice(0, i + 1).map((b) => AGGREGATE_COLUMNS.product(a, b))),
    ];
    const lines = [header.join(',')];
    // With `split`, each site's units go to two partial rows (as from two warehouse partitions).
    for (const part of split ? [0, 1] : [-1]) {
      for (let i = 0; i < m; i++) {
        let n = 0;
        const s = [0, 0, 0];
        const c: number[] = [];
        for (let r = 0; r < site.length; r++) {
          if (site[r] !== i || (part >= 0 && r % 2 !== part)) continue;
          n++;
          const z = values.subarray(r * 3, r * 3 + 3);
          for (let a = 0; a < 3; a++) s[a] += z[a];
          let k = 0;
          for (let a = 0; a < 3; a++) for (let b = 0; b <= a; b++) c[k] = (c[k++] ?? 0) + z[a] * z[b];
        }
        if (n > 0) lines.push([`S${i}`, n, ...s, ...c].map((v) => (typeof v === 'number' ? v.toPrecision(17) : v)).join(','));
      }
    }
    return lines.join('\n') + '\n';
  }

  it('gives the same posterior as the raw rows (whole and partial aggregates)', () => {
    const { sites, table } = sitesFor(m);
    const options = { response: 'y', finitePopulation: false, unitsFile: 'x.csv', sitesPlace: { table } };
    const raw = buildUnitData(unitSumsFromArrays(m, variables, site, values), sites, options);
    const priors = { coefficients: { kind: 'flat' as const }, site_sd: { kind: 'half_cauchy' as const, scale: 1 }, unit_sd: { kind: 'uniform' as const } };
    const reference = exactUnitPosterior(raw, priors);
    for (const split of [false, true]) {
      const aggregated = parseCsvTable(Buffer.from(aggregatedCsv(split)), join(work, 'site_sums.csv'), 'units');
      const sums = readAggregatedUnits(aggregated, 'site', variables, sites.siteIndex, m, 'sites.csv');
      const data = buildUnitData(sums, sites, options);
      expect(data.n).toEqual(raw.n);
      const exact = exactUnitPosterior(data, priors);
      // Sums of raw values round differently from shifted ones: agreement to ~1e-9 relative.
      const close = (x: { mean: number; sd: number }, y: { mean: number; sd: number }) => {
        expect(Math.abs(x.mean - y.mean)).toBeLessThan(1e-7 * y.sd);
        expect(Math.abs(x.sd - y.sd)).toBeLessThan(1e-7 * y.sd);
      };
      close(exact.siteSd, reference.siteSd);
      close(exact.unitSd, reference.unitSd);
      exact.coefficients.forEach((c, j) => close(c, reference.coefficients[j]));
      exact.sites.forEach((s, i) => close(s, reference.sites[i]));
    }
  });

  it('the documented query names exactly the columns the reader needs', () => {
    const query = aggregationQuery('plots', 'site', variables);
    const aliases = [...query.matchAll(/ AS ("?)([^",\n]+)\1/g)].map((r) => r[2]);
    const table = parseCsvTable(Buffer.from(aggregatedCsv(false)), join(work, 'site_sums.csv'), 'units');
    expect(new Set(aliases)).toEqual(new Set(table.header.filter((h) => h !== 'site')));
    expect(query).toContain('GROUP BY site;');
    expect(query).toContain('SUM(y * x1) AS sum_y_times_x1');
  });

  it('errors: a sum of squares no units can give, a fractional count, an unknown site, a missing column', () => {
    const { sites } = sitesFor(m);
    const read = (csv: string) => readAggregatedUnits(parseCsvTable(Buffer.from(csv), join(work, 'site_sums.csv'), 'units'), 'site', variables, sites.siteIndex, m, 'sites.csv');
    const header = 'site,n_units,sum_x1,sum_x2,sum_y,sum_x1_times_x1,sum_x2_times_x1,sum_x2_times_x2,sum_y_times_x1,sum_y_times_x2,sum_y_times_y';
    expect(messageOf(() => read(`${header}\nS1,2,10,1,4,40,5,1,20,2,8\n`))).toBe(
      'site_sums.csv line 2, column "sum_x1_times_x1": the sum of squares is smaller than (sum of "x1")² / n_units, which no set of units can give; check the columns and export the sums with 15 or more significant digits',
    );
    expect(messageOf(() => read(`${header}\nS1,2.5,10,1,4,60,5,1,20,2,8\n`))).toBe(
      'site_sums.csv line 2, column "n_units": the number of units must be a whole number of at least 1 (got 2.5)',
    );
    expect(messageOf(() => read(`${header}\nQ7,2,10,1,4,60,5,1,20,2,8\n`))).toBe(
      'site_sums.csv: site ids not in the sites file sites.csv (column "site"): "Q7" (line 2); every site must be listed in the sites file',
    );
    expect(messageOf(() => read(header.replace(',sum_y_times_y', '') + '\nS1,2,10,1,4,60,5,1,20,2\n'))).toMatch(
      /^site_sums.csv: no column "sum_y_times_y" for the sum of products of "y" and "y"/,
    );
    // Products are accepted in either order of their two variables.
    const swapped = header.replace('sum_x2_times_x1', 'sum_x1_times_x2');
    expect(read(`${swapped}\nS1,2,10,1,4,60,5,1,20,2,8\n`).count[1]).toBe(2);
  });
});

describe('sites file of the unit model', () => {
  const parse = (csv: string) => parseCsvTable(Buffer.from(csv), join(work, 'districts.csv'), 'sites');
  const options = { idColumn: 'district', covariates: ['rain'], populationSizeColumn: 'N', requirePopulationSize: true };
  it('finite-population estimates need every population size, whole and at least 1', () => {
    expect(messageOf(() => buildUnitSites(parse('district,rain,N\nD01,800,50\nD02,900,\n'), options))).toBe(
      'districts.csv line 3, column "N": is blank; model.finite_population needs the population size of every site',
    );
    expect(messageOf(() => buildUnitSites(parse('district,rain,N\nD01,800,50.5\n'), options))).toBe(
      'districts.csv line 2, column "N": population size 50.5 is not a whole number of at least 1',
    );
    expect(buildUnitSites(parse('district,rain,N\nD01,800,\n'), { ...options, requirePopulationSize: false }).populationSize[0]).toBeNaN();
  });
  it('population means are needed for every site; ids once each', () => {
    expect(messageOf(() => buildUnitSites(parse('district,rain,N\nD01,,50\n'), options))).toBe(
      'districts.csv line 2, column "rain": is blank; every site needs a value for this population mean of a covariate (model.covariates)',
    );
    expect(messageOf(() => buildUnitSites(parse('district,rain,N\nD01,1,50\nD01,2,50\n'), options))).toBe(
      'districts.csv: site id "D01" appears twice (lines 2 and 3, column "district")',
    );
  });
  it('a population smaller than its sample, too few sampled sites, no replication, collinear covariates', () => {
    const table = parse('district,rain,N\nA,1,2\nB,2,9\nC,3,9\nD,4,9\nE,5,9\n');
    const sites = buildUnitSites(table, { ...options, covariates: ['rain'] });
    const rows = (list: Array<[number, number, number]>) =>
      unitSumsFromArrays(5, ['rain', 'y'], Int32Array.from(list, (r) => r[0]), Float64Array.from(list.flatMap((r) => [r[1], r[2]])));
    const build = (list: Array<[number, number, number]>, finitePopulation = true) =>
      buildUnitData(rows(list), sites, { response: 'y', finitePopulation, unitsFile: 'plots.csv', sitesPlace: { table, populationSizeColumn: 'N' } });
    const good: Array<[number, number, number]> = [[0, 1, 1], [0, 2, 3], [1, 3, 2], [2, 1, 5], [3, 2, 1], [4, 5, 2], [4, 4, 4]];
    expect(build(good).sampledSites).toBe(5);
    expect(messageOf(() => build([...good, [0, 3, 3]]))).toBe(
      'districts.csv line 2, column "N": population size 2 is smaller than the 3 units sampled in site "A" (plots.csv)',
    );
    expect(messageOf(() => build(good.filter((r) => r[0] < 3)))).toBe(
      'plots.csv: only 3 sites have sampled units; the model with 2 coefficients needs at least p + 2 = 4 sampled sites',
    );
    expect(messageOf(() => build([[0, 1, 1], [1, 2, 2], [2, 3, 1], [3, 4, 5], [4, 2, 2]]))).toMatch(/every sampled site has a single unit/);
    expect(messageOf(() => build(good.map((r) => [r[0], 7, r[2]] as [number, number, number])))).toBe(
      'plots.csv: covariate "rain" is constant over the sampled units, so it cannot be told apart from the intercept; drop it',
    );
  });
  it('collinear covariates are named', () => {
    const table = parse('district,a,b\nA,1,3\nB,2,5\nC,3,7\nD,4,9\nE,5,11\n');
    const sites = buildUnitSites(table, { idColumn: 'district', covariates: ['a', 'b'], requirePopulationSize: false });
    const list: Array<[number, number, number]> = [[0, 1, 1], [0, 2, 3], [1, 3, 2], [2, 1, 5], [3, 2, 1], [4, 5, 2], [4, 4, 4], [1, 0.5, 2]];
    const sums = unitSumsFromArrays(5, ['a', 'b', 'y'], Int32Array.from(list, (r) => r[0]), Float64Array.from(list.flatMap((r) => [r[1], 2 * r[1] + 1, r[2]])));
    expect(messageOf(() => buildUnitData(sums, sites, { response: 'y', finitePopulation: false, unitsFile: 'plots.csv', sitesPlace: { table } }))).toBe(
      'plots.csv: covariate "b" is a linear combination of "a" (and the intercept) over the sampled units; drop one of them',
    );
  });
});
