/**
 * The unit model end to end: config → streamed units file → sampler → run folder, on the corn
 * data of Battese, Harter & Fuller (1988, JASA 83(401), Table 1; ../shared/checks/bhf_*.csv,
 * SOURCES.md §3), the outlying Hardin segment dropped as in the paper. The same data given as a
 * pre-aggregated per-site table must give the same estimates; a bad row stops the run with its
 * line and column and writes nothing.
 */
import { spawnSync } from 'node:child_process';
import { existsSync, mkdtempSync, readFileSync, rmSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { fileURLToPath } from 'node:url';
import { afterAll, describe, expect, it } from 'vitest';
import { validateConfig } from '../src/config/load.js';
import { AGGREGATE_COLUMNS } from '../src/data/units.js';
import { EXIT } from '../src/errors.js';
import { runFit } from '../src/pipeline/fit.js';
import { readChecks } from './support/unit-fit.js';

const root = fileURLToPath(new URL('..', import.meta.url));
const work = mkdtempSync(join(tmpdir(), 'shrinkwell-unit-run-'));
afterAll(() => rmSync(work, { recursive: true, force: true }));

const counties = readChecks('bhf_counties.csv');
const segments = readChecks('bhf_segments.csv').filter((r) => r.outlier_flag === '0');
/** A site with no segments, added only to exercise the no-sample and outside-range flags. */
const EXTRA = 'No survey (test)';

function writeInputs(dir: string): void {
  const sites = ['county,n_segments,corn_pixels,soy_pixels'];
  for (const c of counties) sites.push(`${c.county},${c.N_segments},${c.mean_corn_pixels_pop},${c.mean_soy_pixels_pop}`);
  sites.push(`${EXTRA},500,400,200`);
  writeFileSync(join(dir, 'counties.csv'), sites.join('\n') + '\n');
  const units = ['county,segment,corn_pixels,soy_pixels,corn_ha'];
  for (const s of segments) units.push(`${s.county},${s.segment},${s.corn_pixels},${s.soy_pixels},${s.corn_ha}`);
  writeFileSync(join(dir, 'segments.csv'), units.join('\n') + '\n');
  // The GROUP BY table of the README, computed here by plain accumulation.
  const variables = ['corn_pixels', 'soy_pixels', 'corn_ha'];
  const header = ['county', AGGREGATE_COLUMNS.count, ...variables.map(AGGREGATE_COLUMNS.sum)];
  variables.forEach((a, i) => variables.slice(0, i + 1).forEach((b) => header.push(AGGREGATE_COLUMNS.product(a, b))));
  const lines = [header.join(',')];
  for (const c of counties) {
    const rows = segments.filter((s) => s.county === c.county).map((s) => variables.map((v) => Number(s[v])));
    const cells: number[] = [rows.length, ...variables.map((_, a) => rows.reduce((t, r) => t + r[a], 0))];
    variables.forEach((_, a) => variables.slice(0, a + 1).forEach((__, b) => cells.push(rows.reduce((t, r) => t + r[a] * r[b], 0))));
    lines.push([c.county, ...cells.map((v) => v.toPrecision(17))].join(','));
  }
  writeFileSync(join(dir, 'county_sums.csv'), lines.join('\n') + '\n');
}

let configCount = 0;
function writeConfig(dir: string, units: string, extra: string[] = []): string {
  const yaml = [
    'title: Corn hectares per segment, BHF (1988) counties',
    'measure: { name: Corn, unit: ha per segment, decimals: 1 }',
    'sites: { file: counties.csv, id: county }',
    `units: ${units}`,
    'model:',
    '  kind: unit',
    '  response: corn_ha',
    '  covariates: [corn_pixels, soy_pixels]',
    ...extra,
    'sampling: { chains: 4, warmup: 500, draws: 2500, seed: 1988 }',
  ];
  const path = join(dir, `config-${++configCount}.yaml`);
  writeFileSync(path, yaml.join('\n') + '\n');
  return path;
}

function readCsv(path: string): Array<Record<string, string>> {
  const [header, ...lines] = readFileSync(path, 'utf8').trim().split('\n');
  const names = header.split(',');
  // No quoted commas in these files except in `reasons`, which is last.
  return lines.map((line) => {
    const cells = line.split(',');
    const row: Record<string, string> = {};
    names.forEach((n, i) => (row[n] = i === names.length - 1 ? cells.slice(i).join(',').replace(/^"|"$/g, '') : cells[i]));
    return row;
  });
}

describe('unit model run folder (corn data of Battese, Harter & Fuller 1988)', () => {
  const dir = mkdtempSync(join(work, 'bhf-'));
  writeInputs(dir);

  it('direct figures, flags, unit_sd, and the same estimates from raw rows and from the per-site table', async () => {
    const raw = await runFit({ configPath: writeConfig(dir, '{ file: segments.csv, site: county }'), outDir: join(dir, 'raw'), command: ['test'], threads: 2 });
    const summed = await runFit({ configPath: writeConfig(dir, '{ file: county_sums.csv, site: county, aggregated: true }'), outDir: join(dir, 'summed'), command: ['test'], threads: 2 });
    expect(raw.converged).toBe(true);
    expect(summed.converged).toBe(true);

    const estimates = readCsv(join(raw.runDir, 'estimates.csv'));
    const diagnostics = readCsv(join(raw.runDir, 'diagnostics.csv'));
    for (const c of counties) {
      const row = estimates.find((r) => r.site === c.county)!;
      const ys = segments.filter((s) => s.county === c.county).map((s) => Number(s.corn_ha));
      const n = ys.length;
      expect(Number(row.n)).toBe(n);
      // direct = the county's sample mean (bhf_counties.csv, 3 decimals); direct_se = s/√n, blank for n = 1.
      expect(Math.abs(Number(row.direct) - Number(c.sample_mean_corn_ha))).toBeLessThan(0.0006);
      if (n < 2) expect(row.direct_se).toBe('');
      else {
        const mean = ys.reduce((a, b) => a + b, 0) / n;
        const s = Math.sqrt(ys.reduce((a, y) => a + (y - mean) ** 2, 0) / (n - 1));
        expect(Number(row.direct_se) / (s / Math.sqrt(n))).toBeCloseTo(1, 6);
      }
      // The weight on own data is near γ_i at REML (bhf_counties.csv), averaged over σ's.
      expect(Math.abs(Number(row.weight_direct) - Number(c.gamma_corn))).toBeLessThan(0.1);
    }
    const extra = estimates.find((r) => r.site === EXTRA)!;
    expect(extra.n).toBe('0');
    expect(extra.direct).toBe('');
    expect(extra.weight_direct).toBe('0');
    expect(extra.reasons).toContain('no sample: synthetic estimate');
    expect(extra.reasons).toMatch(/outside the range of sampled sites \(corn_pixels\)/);
    expect(readCsv(join(raw.runDir, 'parameters.csv')).map((r) => r.quantity)).toEqual(['coef:intercept', 'coef:corn_pixels', 'coef:soy_pixels', 'site_sd', 'unit_sd']);
    expect(diagnostics.some((r) => r.quantity === 'unit_sd')).toBe(true);
    const manifest = JSON.parse(readFileSync(join(raw.runDir, 'manifest.json'), 'utf8'));
    expect(manifest.inputs.map((f: { role: string }) => f.role)).toEqual(['sites', 'units']);
    expect(manifest.inputs[1].rows).toBe(36);

    // Same data, two routes: estimates agree within Monte Carlo error (4.5 combined MCSE).
    const other = readCsv(join(summed.runDir, 'estimates.csv'));
    const otherDiagnostics = readCsv(join(summed.runDir, 'diagnostics.csv'));
    for (const row of estimates) {
      const twin = other.find((r) => r.site === row.site)!;
      expect(twin.direct).toBe(row.direct);
      const mcse = Number(diagnostics.find((r) => r.quantity === `site:${row.site}`)!.mcse_mean);
      const mcseTwin = Number(otherDiagnostics.find((r) => r.quantity === `site:${row.site}`)!.mcse_mean);
      expect(Math.abs(Number(twin.estimate) - Number(row.estimate)), row.site).toBeLessThan(4.5 * Math.hypot(mcse, mcseTwin));
    }
  });

  it('finite-population targets pull each estimate toward the sampled segments by f_i = n_i/N_i', async () => {
    const run = await runFit({
      configPath: writeConfig(dir, '{ file: segments.csv, site: county }', ['  population_size: n_segments', '  finite_population: true']),
      outDir: join(dir, 'finite'),
      command: ['test'],
      threads: 2,
    });
    const rows = readCsv(join(run.runDir, 'estimates.csv'));
    for (const c of counties) {
      const row = rows.find((r) => r.site === c.county)!;
      const n = Number(row.n);
      const gamma = Number(c.gamma_corn);
      // weight on own data = f + (1 − f)γ̄ ≥ f, with f ≤ 6/394 here.
      expect(Number(row.weight_direct)).toBeGreaterThan(n / Number(c.N_segments));
      expect(Math.abs(Number(row.weight_direct) - gamma)).toBeLessThan(0.1);
    }
  });
});

describe('unit model config and bad input', () => {
  it('finite_population needs population_size; population_size alone is warned about', () => {
    const base = {
      title: 't',
      measure: { name: 'm' },
      sites: { file: 's.csv', id: 'id' },
      units: { file: 'u.csv', site: 'id', aggregated: true },
      model: { kind: 'unit', response: 'y', finite_population: true },
      sampling: { seed: 1 },
    };
    expect(() => validateConfig(base, '/x/c.yaml')).toThrow(/model.population_size: required with model.finite_population: true/);
    const { warnings, settings } = validateConfig({ ...base, model: { kind: 'unit', response: 'y', population_size: 'N' } }, '/x/c.yaml');
    expect(warnings).toContain('model.population_size is used only with model.finite_population: true; without it the target is the model mean X̄ᵀβ + u_i');
    expect((settings.units as { aggregated?: boolean }).aggregated).toBe(true);
  });

  it('the response and the site id need columns of their own', async () => {
    const dir = mkdtempSync(join(work, 'roles-'));
    writeInputs(dir);
    const fitWith = (units: string, extra: string[]) => runFit({ configPath: writeConfig(dir, units, extra), outDir: join(dir, 'run'), command: ['test'] });
    await expect(fitWith('{ file: segments.csv, site: corn_pixels }', [])).rejects.toThrow(/units\.site: "corn_pixels" is also the column of a covariate; the site id needs its own column$/);
    expect(existsSync(join(dir, 'run'))).toBe(false);
  });

  it('a bad row stops `shrinkwell fit` with exit code 4, its line and column, and nothing written', () => {
    const cli = join(root, 'dist', 'src', 'cli', 'main.js');
    const dir = mkdtempSync(join(work, 'bad-'));
    writeInputs(dir);
    const text = readFileSync(join(dir, 'segments.csv'), 'utf8').split('\n');
    text[7] = text[7].replace(/,([0-9.]+)$/, ',12O.5'); // a letter O typed for a zero
    writeFileSync(join(dir, 'segments.csv'), text.join('\n'));
    const config = writeConfig(dir, '{ file: segments.csv, site: county }');
    const r = spawnSync(process.execPath, [cli, 'fit', config, '--out', join(dir, 'run')], { encoding: 'utf8', env: { ...process.env, CI: 'true' } });
    expect(r.status).toBe(EXIT.data);
    expect(r.stderr.trim()).toMatch(/segments\.csv line 8, column "corn_ha": "12O\.5" is not a number$/);
    expect(existsSync(join(dir, 'run'))).toBe(false);
  });
});
