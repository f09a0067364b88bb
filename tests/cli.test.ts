/**
 * The built `shrinkwell` command end to end: exit codes, one-line errors, nothing half-written,
 * byte-identical reruns. Runs dist/ (npm test builds first).
 */
import { spawnSync } from 'node:child_process';
import { copyFileSync, existsSync, mkdtempSync, readFileSync, readdirSync, rmSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { fileURLToPath } from 'node:url';
import { afterAll, describe, expect, it } from 'vitest';
import { EXIT } from '../src/errors.js';

const root = fileURLToPath(new URL('..', import.meta.url));
const cli = join(root, 'dist', 'src', 'cli', 'main.js');
const work = mkdtempSync(join(tmpdir(), 'shrinkwell-cli-'));
afterAll(() => rmSync(work, { recursive: true, force: true }));

function run(args: string[], cwd = work): { code: number; stdout: string; stderr: string } {
  const r = spawnSync(process.execPath, [cli, ...args], { cwd, encoding: 'utf8', env: { ...process.env, CI: 'true' } });
  return { code: r.status ?? -1, stdout: r.stdout, stderr: r.stderr };
}

/** A config in its own folder reading a copy of one data fixture. */
function configFor(fixture: string, model: string[] = [], extra: string[] = []): string {
  const dir = mkdtempSync(join(work, 'case-'));
  copyFileSync(join(root, 'tests', 'fixtures', 'data', fixture), join(dir, 'sites.csv'));
  const yaml = [
    'title: CLI test',
    'measure: { name: Mean yield, unit: t/ha }',
    'sites: { file: sites.csv, id: district, label: name }',
    'model:',
    '  kind: area',
    '  direct: mean_yield',
    ...(model.length ? model : ['  variance: var_mean']),
    '  covariates: [rain, veg]',
    'sampling: { chains: 2, warmup: 200, draws: 500, seed: 5 }',
    ...extra,
  ];
  writeFileSync(join(dir, 'config.yaml'), yaml.join('\n') + '\n');
  return join(dir, 'config.yaml');
}

const leftovers = (dir: string): string[] => readdirSync(dir).filter((f) => f !== 'config.yaml' && f !== 'sites.csv');

describe('bad input: one line, its exit code, nothing written', () => {
  const cases: Array<[string, string, string[], RegExp]> = [
    ['duplicate site id', 'dup_id.csv', [], /site id "D03" appears twice \(lines 4 and 7, column "district"\)$/],
    ['blank site id', 'blank_id.csv', [], /line 6, column "district": the site id is blank$/],
    ['non-numeric value', 'bad_number.csv', [], /line 7, column "var_mean": "abc" is not a number$/],
    ['blank covariate', 'covariate_blank.csv', [], /line 8, column "rain": is blank/],
    ['NaN covariate', 'covariate_nan.csv', [], /line 4, column "rain": "NaN" is not a number/],
    ['infinite covariate', 'covariate_inf.csv', [], /line 9, column "veg": "1e999" is not finite$/],
    ['non-positive variance', 'variance_zero.csv', [], /line 7, column "var_mean": non-positive sampling variance/],
    ['sample size below 1', 'sample_size_zero.csv', ['  sd: sd_yield', '  sample_size: n'], /line 2, column "n": sample size 0 is below 1/],
    ['too few sites with data', 'too_few.csv', [], /only 3 sites have a direct estimate/],
    ['ragged row', 'ragged.csv', [], /line \d+/],
  ];
  for (const [what, fixture, model, message] of cases) {
    it(what, () => {
      const config = configFor(fixture, model);
      const dir = join(config, '..');
      const r = run(['fit', config, '--out', join(dir, 'run')]);
      expect(r.code).toBe(EXIT.data);
      expect(r.stderr.trim().split('\n')).toHaveLength(1);
      expect(r.stderr).toMatch(/^shrinkwell: /);
      expect(r.stderr.trim()).toMatch(message);
      expect(r.stderr).not.toMatch(/\bat .*\.js:\d+/); // no stack trace
      expect(leftovers(dir)).toEqual([]);
    });
  }

  it('collinear covariates are named', () => {
    const config = configFor('collinear.csv');
    const yaml = readFileSync(config, 'utf8').replace('[rain, veg]', '[rain, rain_mm]').replace(', label: name', '');
    writeFileSync(config, yaml);
    const r = run(['fit', config, '--out', join(config, '..', 'run')]);
    expect(r.code).toBe(EXIT.data);
    expect(r.stderr.trim()).toMatch(/covariates "rain" and "rain_mm" are collinear/);
    expect(leftovers(join(config, '..'))).toEqual([]);
  });

  it('missing data file', () => {
    const config = configFor('districts.csv');
    rmSync(join(config, '..', 'sites.csv'));
    const r = run(['fit', config, '--out', join(config, '..', 'run')]);
    expect(r.code).toBe(EXIT.data);
    expect(r.stderr.trim()).toMatch(/sites file not found: .*sites\.csv$/);
  });

  it('missing column', () => {
    const config = configFor('districts.csv', ['  variance: var_meen']);
    const r = run(['validate', config]);
    expect(r.code).toBe(EXIT.data);
    expect(r.stderr.trim()).toMatch(/no column "var_meen".*did you mean "var_mean"/);
  });

  it('config errors exit with the config code: unknown key with a hint, missing file', () => {
    const config = configFor('districts.csv', [], ['reliabilty: { cv_caution: 0.2 }']);
    const r = run(['fit', config, '--out', join(config, '..', 'run')]);
    expect(r.code).toBe(EXIT.config);
    expect(r.stderr.trim()).toMatch(/config\.yaml: reliabilty: unknown key \(did you mean "reliability"\?\)/);
    expect(leftovers(join(config, '..'))).toEqual([]);
    expect(run(['fit', join(work, 'nope.yaml')]).code).toBe(EXIT.config);
  });

  it('usage errors exit 2; --help exits 0', () => {
    expect(run(['frobnicate']).code).toBe(EXIT.usage);
    expect(run(['fit']).code).toBe(EXIT.usage);
    const help = run(['fit', '--help']);
    expect(help.code).toBe(0);
    expect(help.stdout).toMatch(/run folder/);
  });
});

describe('fit writes a complete, reproducible run folder', () => {
  it('same config and seed give byte-identical estimates.csv, whatever the thread count', () => {
    const config = configFor('districts.csv');
    const dir = join(config, '..');
    const a = run(['fit', config, '--out', join(dir, 'a'), '--threads', '1']);
    const b = run(['fit', config, '--out', join(dir, 'b'), '--threads', '2']);
    expect(a.code, a.stderr).toBe(0);
    expect(b.code, b.stderr).toBe(0);
    for (const f of ['estimates.csv', 'parameters.csv', 'diagnostics.csv'])
      expect(readFileSync(join(dir, 'b', f), 'utf8')).toBe(readFileSync(join(dir, 'a', f), 'utf8'));
    const header = readFileSync(join(dir, 'a', 'estimates.csv'), 'utf8').split('\n')[0];
    expect(header).toBe(
      'site,label,n,direct,direct_se,direct_cv,direct_lower,direct_upper,estimate,sd,lower,upper,cv,weight_direct,flag,reasons',
    );
    // Area model: the direct interval is the normal one, direct ± z·se, z = 1.959964 at 95% (common practice).
    const sampled = readFileSync(join(dir, 'a', 'estimates.csv'), 'utf8').split('\n').slice(1)
      .map((line) => line.split(','))
      .filter((cells) => cells.length >= 8 && cells[4] !== '');
    expect(sampled.length).toBeGreaterThan(0);
    for (const [, , , direct, se, , lower, upper] of sampled) {
      expect(Number(lower)).toBeCloseTo(Number(direct) - 1.959963985 * Number(se), 5);
      expect(Number(upper)).toBeCloseTo(Number(direct) + 1.959963985 * Number(se), 5);
    }
    const model = JSON.parse(readFileSync(join(dir, 'a', 'summary.json'), 'utf8')).model;
    expect(model.cv_rule).toBe('sd / |estimate|');
    expect(model.direct_interval).toMatch(/^normal interval ± z·se/);
    expect(model.method_note).toBeUndefined();
    for (const f of ['parameters.csv', 'diagnostics.csv', 'summary.json', 'manifest.json', 'draws.json', 'draws.bin'])
      expect(existsSync(join(dir, 'a', f)), f).toBe(true);
    // A rerun replaces the run folder in place, leaving no temporary folders behind.
    expect(run(['fit', config, '--out', join(dir, 'a')]).code).toBe(0);
    expect(readdirSync(dir).filter((f) => f.includes('.tmp-'))).toEqual([]);
  });

  it('a run that fails the convergence gate still writes its outputs, marked, with its own exit code', () => {
    const config = configFor('districts.csv');
    writeFileSync(config, readFileSync(config, 'utf8').replace('warmup: 200, draws: 500', 'warmup: 0, draws: 20'));
    const out = join(config, '..', 'run');
    const r = run(['fit', config, '--out', out]);
    expect(r.code).toBe(EXIT.notConverged);
    expect(r.stdout).toMatch(/NOT CONVERGED/);
    const summary = JSON.parse(readFileSync(join(out, 'summary.json'), 'utf8'));
    expect(summary.converged).toBe(false);
    expect(summary.gate.failing.length).toBeGreaterThan(0);
    const rows = readFileSync(join(out, 'estimates.csv'), 'utf8').trim().split('\n').slice(1);
    for (const row of rows) expect(row).toMatch(/,suppress,.*convergence gate/);
  });

  it('benchmarking writes the adjusted figures beside the unadjusted ones; bad weights are refused', () => {
    const config = configFor('districts.csv', [], ['benchmark: { total: 2.5, weights: veg, method: difference }']);
    const out = join(config, '..', 'run');
    const r = run(['fit', config, '--out', out]);
    expect(r.code, r.stderr).toBe(0);
    const rows = readFileSync(join(out, 'benchmarked.csv'), 'utf8').trim().split('\n');
    expect(rows[0]).toBe('site,label,estimate,sd,lower,upper,estimate_unadjusted,flag');
    const summary = JSON.parse(readFileSync(join(out, 'summary.json'), 'utf8'));
    expect(summary.benchmark.method).toBe('difference');
    const bad = configFor('districts.csv', [], ['benchmark: { total: 2.5, weights: name }']);
    const failed = run(['fit', bad, '--out', join(bad, '..', 'run')]);
    expect(failed.code).toBe(EXIT.data);
    expect(failed.stderr.trim()).toMatch(/line 2, column "name": .* is not a number/);
  });

  it('refuses to overwrite a folder that is not a run folder', () => {
    const config = configFor('districts.csv');
    const out = join(config, '..', 'precious');
    rmSync(out, { recursive: true, force: true });
    writeFileSync(join(config, '..', 'keep.txt'), 'x');
    const r = run(['fit', config, '--out', join(config, '..')]);
    expect(r.code).toBe(EXIT.output);
    expect(r.stderr.trim()).toMatch(/is not a shrinkwell run folder/);
  });
});
