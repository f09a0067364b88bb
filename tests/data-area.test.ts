import { createHash } from 'node:crypto';
import { readFileSync } from 'node:fs';
import { dirname, join } from 'node:path';
import { fileURLToPath } from 'node:url';
import { describe, expect, test } from 'vitest';
import { UserError } from '../src/errors.js';
import { validateConfig } from '../src/config/load.js';
import type { Settings } from '../src/config/types.js';
import { buildAreaData, loadAreaData } from '../src/data/area.js';
import { numericColumn, parseCsvTable, readCsvTable, readNumberCell } from '../src/data/csv.js';
import { findCollinearity } from '../src/data/linalg-check.js';

const here = dirname(fileURLToPath(import.meta.url));
const dataDir = join(here, 'fixtures', 'data');
const checksDir = join(here, '..', '..', 'shared', 'checks');

type ModelKeys = Record<string, unknown>;

/** Settings for an area model reading `file` from the fixtures. */
function settingsFor(file: string, model: ModelKeys = {}, sites: Record<string, unknown> = {}): Settings {
  const raw = {
    title: 'Maize yield, Vellmark region',
    measure: { name: 'Mean yield', unit: 't/ha' },
    sites: { file, id: 'district', label: 'name', ...sites },
    model: { kind: 'area', direct: 'mean_yield', variance: 'var_mean', covariates: ['rain', 'veg'], ...model },
    sampling: { seed: 5 },
  };
  return validateConfig(raw, join(dataDir, 'config.yaml')).settings;
}

/** The one-line data error that loading `file` raises (fails the test if it loads). */
async function loadError(file: string, model: ModelKeys = {}, sites: Record<string, unknown> = {}): Promise<string> {
  try {
    await loadAreaData(settingsFor(file, model, sites));
  } catch (error) {
    expect(error).toBeInstanceOf(UserError);
    expect((error as UserError).kind).toBe('data');
    expect((error as UserError).message).not.toContain('\n');
    return (error as UserError).message;
  }
  throw new Error(`${file} loaded but should have been rejected`);
}

const SD_MODE = { variance: undefined, sd: 'sd_yield', sample_size: 'n' };
const POOLED_MODE = { ...SD_MODE, variance_from: 'pooled' };

describe('readCsvTable', () => {
  test('reads columns, rows, line numbers and the SHA-256 of the raw bytes', async () => {
    const path = join(dataDir, 'districts.csv');
    const table = await readCsvTable(path, 'sites');
    expect(table.header).toEqual(['district', 'name', 'mean_yield', 'var_mean', 'sd_yield', 'n', 'rain', 'veg']);
    expect(table.rows).toBe(8);
    expect(table.lines).toEqual([2, 3, 4, 5, 6, 7, 8, 9]);
    expect(table.columns.get('name')?.[6]).toBe('Yellowfen Reach');
    // Independent hash of the file bytes (node:crypto on the raw file).
    expect(table.sha256).toBe(createHash('sha256').update(readFileSync(path)).digest('hex'));
  });

  test('BOM, CRLF and quoted fields give the same table as the plain file', async () => {
    const plain = await readCsvTable(join(dataDir, 'districts.csv'), 'sites');
    const crlf = await readCsvTable(join(dataDir, 'districts_bom_crlf.csv'), 'sites');
    expect(crlf.header).toEqual(plain.header); // no BOM glued to "district"
    expect(crlf.columns.get('name')?.[1]).toBe('Kettlewane "old town"');
    expect(crlf.columns.get('name')?.[6]).toBe('Yellowfen Reach, upper');
    expect(crlf.columns.get('veg')).toEqual(plain.columns.get('veg')); // no stray \r
    expect(crlf.lines).toEqual(plain.lines);
  });

  test('line numbers follow the file even after blank lines and multi-line quoted fields', () => {
    const text = 'id,note,x\r\n1,"two\r\nlines",3\r\n\r\n2,plain,4\r\n3,"a\nb",oops\n';
    const table = parseCsvTable(Buffer.from(text), '/data/t.csv', 'sites');
    expect(table.lines).toEqual([2, 5, 6]);
    expect(() => numericColumn(table, 'x', { allowBlank: false, what: 'covariate' })).toThrow(
      't.csv line 6, column "x": "oops" is not a number',
    );
  });

  test('a missing file names the role and the path', async () => {
    const path = join(dataDir, 'no-such.csv');
    await expect(readCsvTable(path, 'sites')).rejects.toMatchObject({ kind: 'data', message: `sites file not found: ${path}` });
  });

  test('a ragged row names its line', async () => {
    await expect(readCsvTable(join(dataDir, 'ragged.csv'), 'sites')).rejects.toMatchObject({
      kind: 'data',
      message: 'ragged.csv line 7: 7 values, but the header has 8 columns',
    });
  });

  test('empty file, repeated column name', async () => {
    await expect(readCsvTable(join(dataDir, 'empty.csv'), 'sites')).rejects.toThrow(
      'empty.csv: the file is empty (expected a header line with column names)',
    );
    await expect(readCsvTable(join(dataDir, 'duplicate_header.csv'), 'sites')).rejects.toThrow(
      'duplicate_header.csv line 1: column "rain" appears twice (columns 3 and 5)',
    );
  });

  test('an unclosed quote is reported as unreadable CSV', () => {
    expect(() => parseCsvTable(Buffer.from('a,b\n1,"2\n3,4\n'), '/d/q.csv', 'sites')).toThrow(/^q\.csv: not readable as CSV: Quote Not Closed/);
  });

  test('numbers are read strictly', () => {
    expect(readNumberCell('2.5e-3')).toEqual({ ok: true, value: 0.0025 });
    expect(readNumberCell('-.5')).toEqual({ ok: true, value: -0.5 });
    expect(readNumberCell('')).toEqual({ ok: false, reason: 'blank' });
    expect(readNumberCell('0x10')).toEqual({ ok: false, reason: 'not a number' });
    expect(readNumberCell('1,5')).toEqual({ ok: false, reason: 'decimal comma' });
    expect(readNumberCell('NA')).toEqual({ ok: false, reason: 'missing marker' });
    expect(readNumberCell('-Inf')).toEqual({ ok: false, reason: 'not finite' });
    expect(readNumberCell('1e999')).toEqual({ ok: false, reason: 'not finite' });
  });
});

describe('buildAreaData: happy path', () => {
  test('variance from a column; sites without a sample', async () => {
    const { data, files } = await loadAreaData(settingsFor('districts.csv', { sample_size: 'n' }));
    expect(data.m).toBe(8);
    expect(data.p).toBe(3);
    expect(data.siteIds).toEqual(['D01', 'D02', 'D03', 'D04', 'D05', 'D06', 'D07', 'D08']);
    expect(data.labels[6]).toBe('Yellowfen Reach');
    expect(data.coefficientNames).toEqual(['intercept', 'rain', 'veg']);
    expect(Array.from(data.hasData)).toEqual([1, 1, 1, 0, 1, 1, 0, 1]);
    expect(Array.from(data.direct)).toEqual([2.41, 1.87, 3.05, NaN, 2.2, 2.76, NaN, 1.95]);
    expect(Array.from(data.variance)).toEqual([0.0512, 0.121, 0.029, NaN, 0.245, 0.04, NaN, 0.08]);
    expect(Array.from(data.sampleSize)).toEqual([8, 5, 12, 0, 2, 16, 0, 3]);
    expect(Array.from(data.X.subarray(0, 6))).toEqual([1, 812, 0.41, 1, 640, 0.33]);
    expect(Array.from(data.X.subarray(18, 21))).toEqual([1, 605, 0.29]); // site without a sample keeps its covariates
    expect(data.varianceNote).toBe('ψ_i read from column "var_mean"');
    expect(files).toHaveLength(1);
    expect(files[0]).toMatchObject({ role: 'sites', path: join(dataDir, 'districts.csv'), rows: 8 });
    expect(files[0].sha256).toMatch(/^[0-9a-f]{64}$/);
  });

  test('without a sample-size column, n is NaN where the site has data and 0 where it has none', async () => {
    const { data } = await loadAreaData(settingsFor('districts.csv'));
    expect(Array.from(data.sampleSize)).toEqual([NaN, NaN, NaN, 0, NaN, NaN, 0, NaN]);
  });

  test('labels fall back to the site id', async () => {
    const { data } = await loadAreaData(settingsFor('districts.csv', {}, { label: undefined }));
    expect(data.labels).toEqual(data.siteIds);
  });

  test('variance from sd² / n, times the design effect', async () => {
    const { data } = await loadAreaData(settingsFor('districts.csv', { ...SD_MODE, design_effect: 1.5 }));
    // Hand arithmetic on the fixture: 1.5 × sd² / n.
    const expected = [1.5 * 0.64 ** 2 / 8, 1.5 * 0.55 ** 2 / 5, 1.5 * 0.71 ** 2 / 12, NaN, 1.5 * 0.7 ** 2 / 2, 1.5 * 0.8 ** 2 / 16, NaN, 1.5 * 0.49 ** 2 / 3];
    expected.forEach((v, i) => (Number.isNaN(v) ? expect(data.variance[i]).toBeNaN() : expect(data.variance[i]).toBeCloseTo(v, 14)));
    expect(data.varianceNote).toBe('ψ_i = sd_i² / n_i from columns "sd_yield" and "n", times a design effect of 1.5');
  });

  test('pooled variance: Σ(n_i − 1) sd_i² / Σ(n_i − 1) over sites with data, / n_i', async () => {
    const { data } = await loadAreaData(settingsFor('districts.csv', POOLED_MODE));
    const pooled = (7 * 0.64 ** 2 + 4 * 0.55 ** 2 + 11 * 0.71 ** 2 + 1 * 0.7 ** 2 + 15 * 0.8 ** 2 + 2 * 0.49 ** 2) / 40;
    const n = [8, 5, 12, 0, 2, 16, 0, 3];
    n.forEach((ni, i) => (ni === 0 ? expect(data.variance[i]).toBeNaN() : expect(data.variance[i]).toBeCloseTo(pooled / ni, 14)));
    expect(data.varianceNote).toContain(`= ${Number(pooled.toPrecision(6))} over 6 sites (columns "sd_yield" and "n")`);
  });

  test('pooled variance of the Dyestuff batches equals the published within-batch mean square', async () => {
    // Davies (1947) / Box & Tiao (1973, sec. 5.1.2) Dyestuff data: 6 batches × 5 preparations.
    // Balanced one-way ANOVA: the within-batch mean square on 24 df is 2451.25
    // (checks/dyestuff_estimates.csv, MS_within_24df; lme4 REML residual variance 2451, recalled).
    // The pooled variance Σ(n_i − 1)s_i² / Σ(n_i − 1) is that mean square exactly.
    const lines = readFileSync(join(checksDir, 'dyestuff_data.csv'), 'utf8').trim().split('\n').slice(1);
    const byBatch = new Map<string, number[]>();
    for (const line of lines) {
      const [batch, , value] = line.split(',');
      byBatch.set(batch, [...(byBatch.get(batch) ?? []), Number(value)]);
    }
    let csv = 'district,mean_yield,sd_yield,n\n';
    for (const [batch, values] of byBatch) {
      const mean = values.reduce((a, b) => a + b, 0) / values.length;
      const sd = Math.sqrt(values.reduce((a, b) => a + (b - mean) ** 2, 0) / (values.length - 1));
      csv += `${batch},${mean},${sd},${values.length}\n`;
    }
    const table = parseCsvTable(Buffer.from(csv), '/checks/dyestuff_batches.csv', 'sites');
    const settings = settingsFor('unused.csv', { ...POOLED_MODE, covariates: [] }, { label: undefined });
    const data = buildAreaData(table, settings);
    expect(data.m).toBe(6);
    for (let i = 0; i < 6; i++) expect(data.variance[i]).toBeCloseTo(2451.25 / 5, 9);
    expect(data.varianceNote).toContain('= 2451.25 over 6 sites');
    // Grand mean 1527.5 (checks/dyestuff_estimates.csv, grand_mean): balanced, so the mean of batch means.
    expect(data.direct.reduce((a, b) => a + b, 0) / 6).toBeCloseTo(1527.5, 10);
  });

  test('eight schools: standard errors read as a variance column (Rubin 1981, Table 1)', () => {
    // checks/eight_schools_data.csv: y and sigma (BDA3 sec. 5.5); ψ_j = sigma_j².
    const text = readFileSync(join(checksDir, 'eight_schools_data.csv'), 'utf8');
    const table = parseCsvTable(Buffer.from(text), join(checksDir, 'eight_schools_data.csv'), 'sites');
    const sigma = numericColumn(table, 'sigma', { allowBlank: false, what: 'sd' });
    const csv = `school,y,psi\n${table.columns.get('school')!.map((s, i) => `${s},${table.columns.get('y')![i]},${sigma[i] ** 2}`).join('\n')}\n`;
    const settings = settingsFor('unused.csv', { direct: 'y', variance: 'psi', covariates: [] }, { id: 'school', label: undefined });
    const data = buildAreaData(parseCsvTable(Buffer.from(csv), '/checks/schools.csv', 'sites'), settings);
    expect(Array.from(data.direct)).toEqual([28, 8, -3, 7, -1, 1, 18, 12]);
    expect(Array.from(data.variance)).toEqual([225, 100, 256, 121, 81, 121, 100, 324]);
  });
});

describe('buildAreaData: each check has its own one-line error', () => {
  test('missing sites file', async () => {
    expect(await loadError('no-such.csv')).toBe(`sites file not found: ${join(dataDir, 'no-such.csv')}`);
  });

  test('missing column, with a did-you-mean hint and the list of columns', async () => {
    expect(await loadError('districts.csv', { covariates: ['rian'] })).toBe(
      'districts.csv: no column "rian" for the covariate (model.covariates); did you mean "rain"? ' +
        '(columns are: district, name, mean_yield, var_mean, sd_yield, n, rain, veg)',
    );
    expect(await loadError('districts.csv', { direct: 'yield_mean' })).toMatch(
      /^districts\.csv: no column "yield_mean" for the direct estimate \(model\.direct\)/,
    );
  });

  test('a semicolon-separated file is recognised in the message', async () => {
    expect(await loadError('semicolons.csv')).toMatch(/the file seems to separate values by ";", but shrinkwell reads comma-separated files$/);
  });

  test('duplicate site id names the id and both lines', async () => {
    expect(await loadError('dup_id.csv')).toBe('dup_id.csv: site id "D03" appears twice (lines 4 and 7, column "district")');
  });

  test('blank site id', async () => {
    expect(await loadError('blank_id.csv')).toBe('blank_id.csv line 6, column "district": the site id is blank');
  });

  test('no rows', async () => {
    expect(await loadError('header_only.csv')).toBe('header_only.csv: no sites (the file has a header but no rows)');
  });

  test('a value that is not a number (line counted as in an editor, blank lines included)', async () => {
    expect(await loadError('bad_number.csv')).toBe('bad_number.csv line 7, column "var_mean": "abc" is not a number');
  });

  test('covariates: blank, NaN and infinite values', async () => {
    expect(await loadError('covariate_blank.csv')).toBe(
      'covariate_blank.csv line 8, column "rain": is blank; every site needs a value for this covariate (model.covariates)',
    );
    expect(await loadError('covariate_nan.csv')).toBe(
      'covariate_nan.csv line 4, column "rain": "NaN" is not a number; every site needs a value for this covariate (model.covariates)',
    );
    expect(await loadError('covariate_inf.csv')).toBe('covariate_inf.csv line 9, column "veg": "1e999" is not finite');
  });

  test('a direct estimate written as a missing-value code', async () => {
    expect(await loadError('direct_text.csv')).toBe(
      'direct_text.csv line 3, column "mean_yield": "n/a" is not a number; leave the cell blank where the value is missing',
    );
  });

  test('a blank variance where the site has a direct estimate', async () => {
    expect(await loadError('variance_blank.csv')).toBe(
      'variance_blank.csv line 4, column "var_mean": is blank, but the site has a direct estimate (column "mean_yield")',
    );
  });

  test('non-positive sampling variance', async () => {
    expect(await loadError('variance_zero.csv')).toBe('variance_zero.csv line 7, column "var_mean": non-positive sampling variance (0)');
    expect(await loadError('sd_zero.csv', SD_MODE)).toBe(
      'sd_zero.csv line 9, column "sd_yield": sd is 0, giving a non-positive sampling variance',
    );
    expect(await loadError('pooled_zero.csv', POOLED_MODE)).toBe(
      'pooled_zero.csv: every sd in column "sd_yield" is 0, giving a non-positive sampling variance',
    );
  });

  test('sample size below 1, not a whole number, or given without a direct estimate', async () => {
    expect(await loadError('sample_size_zero.csv', SD_MODE)).toBe(
      'sample_size_zero.csv line 2, column "n": sample size 0 is below 1, but the site has a direct estimate',
    );
    expect(await loadError('sample_size_fraction.csv', SD_MODE)).toBe(
      'sample_size_fraction.csv line 3, column "n": sample size 2.5 is not a whole number',
    );
    expect(await loadError('sample_without_direct.csv', { sample_size: 'n' })).toBe(
      'sample_without_direct.csv line 5, column "n": sample size is 4, but the direct estimate (column "mean_yield") is blank; ' +
        'leave the sample size blank or 0 for a site without a sample',
    );
  });

  test('pooling needs a site with at least two sampled units', async () => {
    expect(await loadError('pooled_single.csv', POOLED_MODE)).toBe(
      'pooled_single.csv: the pooled variance needs at least one site with a sample of 2 or more (column "n")',
    );
  });

  test('fewer sites with data than p + 2', async () => {
    expect(await loadError('too_few.csv')).toBe(
      'too_few.csv: only 3 sites have a direct estimate (column "mean_yield"); the model with 3 coefficients needs at least p + 2 = 5',
    );
    // The same file is fine for an intercept-only model (p = 1 needs 3).
    await expect(loadAreaData(settingsFor('too_few.csv', { covariates: [] }))).resolves.toBeDefined();
  });

  test('collinear covariates are named, with the relation, on the sites with data', async () => {
    const collinear = (covariates: string[]) => loadError('collinear.csv', { covariates }, { label: undefined });
    expect(await collinear(['rain', 'rain_mm'])).toBe(
      'collinear.csv: covariates "rain" and "rain_mm" are collinear (rain_mm = 25.4 × rain) on the 6 sites with a direct estimate; drop one of them',
    );
    expect(await collinear(['rain', 'flat'])).toBe(
      'collinear.csv: covariate "flat" is constant (7) on the 6 sites with a direct estimate, so it cannot be told apart from the intercept; drop it',
    );
    expect(await collinear(['a', 'b', 'c'])).toBe(
      'collinear.csv: covariate "c" is a linear combination of "a" and "b" (c = 2 × a − 1 × b + 1) on the 6 sites with a direct estimate; drop one of them',
    );
    // rain and a are not related: the file loads.
    await expect(loadAreaData(settingsFor('collinear.csv', { covariates: ['rain', 'a'] }, { label: undefined }))).resolves.toBeDefined();
  });
});

describe('findCollinearity', () => {
  test('full rank even when badly conditioned: the 5 × 5 Hilbert matrix', () => {
    // Hilbert matrices are nonsingular (condition number of H5 ≈ 4.8e5, recalled from memory).
    const p = 5;
    const X = new Float64Array(p * p);
    for (let i = 0; i < p; i++) for (let j = 0; j < p; j++) X[i * p + j] = 1 / (i + j + 1);
    expect(findCollinearity(X, p, [0, 1, 2, 3, 4])).toBeNull();
  });

  test('restricted to some rows: dependence only there is found', () => {
    // Rows 0–3: x2 = 3·x1 − 2; row 4 breaks it.
    const rows = [
      [1, 1, 1],
      [1, 2, 4],
      [1, 5, 13],
      [1, -1, -5],
      [1, 0, 9],
    ];
    const X = Float64Array.from(rows.flat());
    expect(findCollinearity(X, 3, [0, 1, 2, 3, 4])).toBeNull();
    const found = findCollinearity(X, 3, [0, 1, 2, 3]);
    expect(found?.column).toBe(2);
    const terms = Object.fromEntries(found!.terms.map((t) => [t.index, t.coefficient]));
    expect(terms[0]).toBeCloseTo(-2, 12);
    expect(terms[1]).toBeCloseTo(3, 12);
  });
});
