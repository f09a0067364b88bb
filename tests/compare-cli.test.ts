/**
 * `shrinkwell compare`: one-line errors with their exit codes, nothing written on a bad argument,
 * the files it writes, and the demo fitted, compared and reported. A few cases run the built
 * command (dist/; npm test builds first) to check argument parsing, stderr and exit codes as a
 * user sees them; the rest call the command's function in-process (same checks, no process start).
 */
import { spawnSync } from 'node:child_process';
import { cpSync, existsSync, mkdtempSync, readFileSync, rmSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { fileURLToPath } from 'node:url';
import { parse } from 'csv-parse/sync';
import { afterAll, describe, expect, it } from 'vitest';
import { compareRuns, type CompareArguments } from '../src/cli/compare.js';
import { EXIT, UserError } from '../src/errors.js';
import { renderReport } from '../src/report/index.js';
import { createRng } from '../src/sampler/rng.js';
import { normal } from '../src/sampler/variates.js';
import { Z_TWO_SIDED_1E5, normalCdf } from './support/reference-distributions.js';
import { writeSyntheticRun, type SyntheticRun } from './support/synthetic-run.js';

const root = fileURLToPath(new URL('..', import.meta.url));
const cli = join(root, 'dist', 'src', 'cli', 'main.js');
const fixture = join(root, 'tests', 'fixtures', 'run-area');
const work = mkdtempSync(join(tmpdir(), 'shrinkwell-compare-'));
afterAll(() => rmSync(work, { recursive: true, force: true }));

function run(args: string[]): { code: number; stdout: string; stderr: string } {
  const r = spawnSync(process.execPath, [cli, ...args], { cwd: work, encoding: 'utf8', env: { ...process.env, CI: 'true' } });
  return { code: r.status ?? -1, stdout: r.stdout, stderr: r.stderr };
}

let copies = 0;
/** A fresh copy of the hand-made run folder fixture. */
function fixtureCopy(): string {
  const dir = join(work, `run-${++copies}`);
  cpSync(fixture, dir, { recursive: true });
  return dir;
}

function synthetic(spec: SyntheticRun): string {
  return writeSyntheticRun(join(work, `synthetic-${++copies}`), spec);
}

function csv(path: string): Array<Record<string, string>> {
  return parse(readFileSync(path, 'utf8'), { columns: true }) as Array<Record<string, string>>;
}

/** The command's work in-process: exit code and output, or the UserError's exit code and message. */
async function compareHere(dirs: string[], args: CompareArguments): Promise<{ code: number; out: string; warnings: string[]; message: string }> {
  let out = '';
  const warnings: string[] = [];
  try {
    const code = await compareRuns(dirs, args, ['shrinkwell', 'compare', ...dirs], { out: (t) => (out += t), warn: (t) => warnings.push(t) });
    return { code, out, warnings, message: '' };
  } catch (error) {
    if (!(error instanceof UserError)) throw error;
    expect(error.message).not.toContain('\n');
    return { code: EXIT[error.kind], out, warnings, message: error.message };
  }
}

/** One line on stderr, prefixed, no stack trace. */
function expectOneLine(stderr: string, message: RegExp): void {
  const lines = stderr.trim().split('\n');
  expect(lines).toHaveLength(1);
  expect(lines[0]).toMatch(/^shrinkwell: /);
  expect(lines[0]).toMatch(message);
  expect(stderr).not.toMatch(/\bat .*\.js:\d+/);
}

describe('as a user sees it (built command)', () => {
  it('unknown site: one line with a hint, exit code 2, nothing written', () => {
    const dir = fixtureCopy();
    const r = run(['compare', dir, '--pairs', 'D01:D02,D03:D7']);
    expect(r.code, r.stderr).toBe(EXIT.usage);
    expectOneLine(r.stderr, /--pairs: site "D7" is not in .* \(did you mean "D07"\?\)$/);
    expect(existsSync(join(dir, 'comparisons'))).toBe(false);
  });

  it('target not a number: one line, exit code 2', () => {
    const r = run(['compare', fixtureCopy(), '--above', 'high']);
    expect(r.code, r.stderr).toBe(EXIT.usage);
    expectOneLine(r.stderr, /--above: "high" is not a number/);
  });

  it('missing run folder: one line, exit code 8', () => {
    const r = run(['compare', join(work, 'no-such-run')]);
    expect(r.code, r.stderr).toBe(EXIT.runFolder);
    expectOneLine(r.stderr, /no-such-run: run folder not found$/);
  });

  it('an unknown option is a usage error', () => {
    const r = run(['compare', fixtureCopy(), '--bogus']);
    expect(r.code, r.stderr).toBe(EXIT.usage);
  });

  it('repeated --pairs, ids containing a colon, a negative target; --no-pairs on a rerun replaces the folder', () => {
    const rng = createRng(13, 0);
    const ids = ['N:1', 'N:2', 'M3'];
    const draws = ids.map((_, i) => Float32Array.from({ length: 200 }, () => i + normal(rng)));
    const dir = synthetic({ sites: ids.map((id) => ({ id })), draws, chains: 2, drawsPerChain: 100 });
    const r = run(['compare', dir, '--pairs', 'M3:N:1', '--pairs', 'N:2:N:1,M3:N:1', '--above', '-0.5', '--lower-is-better']);
    expect(r.code, r.stderr).toBe(EXIT.ok);
    expect(r.stdout).toMatch(/pairwise\.csv \(2 ordered pairs\)/);
    const pairs = csv(join(dir, 'comparisons', 'pairwise.csv'));
    expect(pairs.map((p) => [p.site_a, p.site_b])).toEqual([['M3', 'N:1'], ['N:2', 'N:1']]); // duplicate dropped
    const settings = JSON.parse(readFileSync(join(dir, 'comparisons', 'settings.json'), 'utf8'));
    expect(settings).toMatchObject({ pairs: 'listed', target: -0.5, rank_1_is: 'lowest' });
    expect(settings.command).toEqual(['shrinkwell', 'compare', dir, '--pairs', 'M3:N:1', '--pairs', 'N:2:N:1,M3:N:1', '--above', '-0.5', '--lower-is-better']);
    const rerun = run(['compare', dir, '--no-pairs', '--no-lower-is-better']);
    expect(rerun.code, rerun.stderr).toBe(EXIT.ok);
    expect(JSON.parse(readFileSync(join(dir, 'comparisons', 'settings.json'), 'utf8')).rank_1_is).toBe('highest');
    expect(existsSync(join(dir, 'comparisons', 'pairwise.csv'))).toBe(false);
    expect(existsSync(join(dir, 'comparisons', 'ranks.csv'))).toBe(true);
  });

  it('a run that failed its gate: files written, one warning line, exit code 5', () => {
    const rng = createRng(14, 0);
    const draws = [0, 1].map((mu) => Float32Array.from({ length: 100 }, () => mu + normal(rng)));
    const dir = synthetic({ sites: [{ id: 'U' }, { id: 'V' }], draws, chains: 1, drawsPerChain: 100, converged: false });
    const r = run(['compare', dir]);
    expect(r.code, r.stderr).toBe(EXIT.notConverged);
    expectOneLine(r.stderr, /^shrinkwell: warning: .* did not pass the convergence gate; its comparisons are provisional/);
    expect(JSON.parse(readFileSync(join(dir, 'comparisons', 'settings.json'), 'utf8')).converged).toBe(false);
  });
});

describe('bad arguments: exit code 2, one line, nothing written', () => {
  const cases: Array<[string, CompareArguments, RegExp]> = [
    ['unknown site, no close id', { pairs: ['D01:Nowhere'] }, /--pairs: site "Nowhere" is not in [^(]*$/],
    ['a pair without a colon', { pairs: ['D01'] }, /--pairs: "D01" is not a pair; write two site ids joined by a colon, e.g. D01:D02$/],
    ['a pair missing one side', { pairs: ['D01:'] }, /--pairs: "D01:" is missing a site id/],
    ['a site compared with itself', { pairs: ['D05:D05'] }, /compares site "D05" with itself/],
    ['no pairs in the list', { pairs: [' , '] }, /--pairs: no pairs given/],
    ['target with a comma decimal', { above: '2,5' }, /--above: "2,5" is not a number/],
    ['target not finite', { above: '1e999' }, /--above: "1e999" is not a number/],
    ['target blank', { above: '' }, /--above: "" is not a number/],
    ['top k zero', { top: '0' }, /--top: "0" is not a whole number ≥ 1/],
    ['top k fractional', { top: '2.5' }, /--top: "2.5" is not a whole number ≥ 1/],
    ['top k beyond the sites', { top: '41' }, /--top 41: the run has only 40 sites/],
    ['all pairs and listed pairs', { allPairs: true, pairs: ['D01:D02'] }, /either --all-pairs or --pairs/],
    ['all pairs and no pairs', { allPairs: true, pairs: false }, /either --all-pairs or --no-pairs/],
  ];
  for (const [what, args, message] of cases) {
    it(what, async () => {
      const dir = fixtureCopy();
      const r = await compareHere([dir], args);
      expect(r.code, r.message).toBe(EXIT.usage);
      expect(r.message).toMatch(message);
      expect(existsSync(join(dir, 'comparisons'))).toBe(false);
    });
  }

  it('--all-pairs refuses more sites than it sweeps at once; without it, ranks only', async () => {
    const m = 201;
    const rng = createRng(7, 1);
    const dir = synthetic({
      sites: Array.from({ length: m }, (_, i) => ({ id: `S${i + 1}` })),
      draws: Array.from({ length: m }, () => Float32Array.from({ length: 8 }, () => normal(rng))),
      chains: 2,
      drawsPerChain: 4,
    });
    const refused = await compareHere([dir], { allPairs: true });
    expect(refused.code).toBe(EXIT.usage);
    expect(refused.message).toMatch(/--all-pairs: 201 sites make 20100 pairs, .* name the pairs with --pairs$/);
    const ok = await compareHere([dir], {});
    expect(ok.code).toBe(EXIT.ok);
    expect(ok.out).toMatch(/no pairwise probabilities \(more than 200 sites/);
    expect(existsSync(join(dir, 'comparisons', 'pairwise.csv'))).toBe(false);
    expect(csv(join(dir, 'comparisons', 'ranks.csv'))).toHaveLength(m);
  });
});

describe('broken or older run folders: exit code 8, one line naming the file', () => {
  const cases: Array<[string, (dir: string) => void, RegExp]> = [
    ['not a folder', (dir) => {
      rmSync(dir, { recursive: true });
      writeFileSync(dir, 'x');
    }, /not a folder/],
    ['older format', (dir) => {
      const path = join(dir, 'summary.json');
      writeFileSync(path, readFileSync(path, 'utf8').replace('"format_version": 1', '"format_version": 0'));
    }, /summary\.json: format_version 0 is not supported/],
    ['not a run summary', (dir) => writeFileSync(join(dir, 'summary.json'), '{"format": "other"}'), /summary\.json: not a shrinkwell run summary/],
    ['draws missing', (dir) => rmSync(join(dir, 'draws.bin')), /draws\.bin: missing from the run folder$/],
    ['draws truncated', (dir) => {
      const path = join(dir, 'draws.bin');
      writeFileSync(path, readFileSync(path).subarray(0, 4000));
    }, /draws\.bin: 4000 bytes, but draws\.json describes/],
    ['no draws for a site', (dir) => {
      const path = join(dir, 'draws.json');
      writeFileSync(path, readFileSync(path, 'utf8').replace('"site:D17"', '"site:X17"'));
    }, /draws\.json: no draws for site "D17"/],
    ['a draw that is not a number', (dir) => {
      const path = join(dir, 'draws.bin');
      const bytes = readFileSync(path);
      const meta = JSON.parse(readFileSync(join(dir, 'draws.json'), 'utf8')) as { quantities: string[]; chains: number; draws_per_chain: number };
      const q = meta.quantities.indexOf('site:D09');
      bytes.writeFloatLE(Number.NaN, 4 * (q * meta.chains * meta.draws_per_chain + meta.draws_per_chain + 6));
      writeFileSync(path, bytes);
    }, /draws\.bin: site "D09" has a draw that is not a number \(chain 2, draw 7\)$/],
    ['estimates file broken', (dir) => writeFileSync(join(dir, 'estimates.csv'), 'site,label\nD01,x\n'), /estimates\.csv: line 1: column "n" is missing$/],
  ];
  for (const [what, breakIt, message] of cases) {
    it(what, async () => {
      const dir = fixtureCopy();
      breakIt(dir);
      const r = await compareHere([dir], {});
      expect(r.code, r.message).toBe(EXIT.runFolder);
      expect(r.message).toMatch(message);
      expect(existsSync(join(dir, 'comparisons'))).toBe(false);
    });
  }

  it('several folders: one broken folder means nothing is written anywhere', async () => {
    const good = fixtureCopy();
    const bad = fixtureCopy();
    rmSync(join(bad, 'draws.json'));
    const r = await compareHere([good, bad], {});
    expect(r.code, r.message).toBe(EXIT.runFolder);
    expect(r.message).toMatch(/draws\.json: missing from the run folder$/);
    expect(existsSync(join(good, 'comparisons'))).toBe(false);
  });
});

describe('what compare writes', () => {
  it('two independent normal sites: the files carry the closed-form answers', async () => {
    // P(θ_a > θ_b) = Φ((μ_a − μ_b)/√(σ_a² + σ_b²)), P(θ > t) = 1 − Φ((t − μ)/σ) (common practice);
    // tolerance Z = 4.4172 binomial sds (false-alarm rate 1e-5).
    const n = 40_000;
    const rng = createRng(11, 0);
    const a = Float32Array.from({ length: n }, () => 1 + 0.5 * normal(rng));
    const b = Float32Array.from({ length: n }, () => 0.6 + 0.4 * normal(rng));
    const dir = synthetic({ sites: [{ id: 'A1', label: 'First' }, { id: 'B2', label: 'Second' }], draws: [a, b], chains: 4, drawsPerChain: n / 4 });
    const r = await compareHere([dir], { above: '0.9', top: '1' });
    expect(r.code, r.message).toBe(EXIT.ok);
    expect(r.warnings).toEqual([]);
    const pairs = csv(join(dir, 'comparisons', 'pairwise.csv'));
    expect(pairs.map((p) => `${p.site_a}>${p.site_b}`)).toEqual(['A1>B2', 'B2>A1']);
    const exact = normalCdf(0.4 / Math.hypot(0.5, 0.4));
    const sd = (p: number) => Math.sqrt((p * (1 - p)) / n);
    expect(Math.abs(Number(pairs[0].p_a_greater) - exact)).toBeLessThanOrEqual(Z_TWO_SIDED_1E5 * sd(exact));
    expect(Number(pairs[0].p_a_greater) + Number(pairs[1].p_a_greater)).toBeCloseTo(1, 7);
    const ranks = csv(join(dir, 'comparisons', 'ranks.csv'));
    expect(Object.keys(ranks[0])).toEqual([
      'site', 'label', 'flag', 'estimate', 'rank_mean', 'rank_median', 'rank_lower', 'rank_upper',
      'p_top_k', 'p_top_k_mcse', 'p_bottom_k', 'p_bottom_k_mcse', 'p_above_target', 'p_above_target_mcse',
    ]);
    expect(Number(ranks[0].p_top_k)).toBeCloseTo(Number(pairs[0].p_a_greater), 7);
    for (const [row, mu, s] of [[ranks[0], 1, 0.5], [ranks[1], 0.6, 0.4]] as const) {
      const above = 1 - normalCdf((0.9 - mu) / s);
      expect(Math.abs(Number(row.p_above_target) - above)).toBeLessThanOrEqual(Z_TWO_SIDED_1E5 * sd(above));
      expect(Number(row.p_above_target_mcse)).toBeGreaterThan(0);
    }
    const settings = JSON.parse(readFileSync(join(dir, 'comparisons', 'settings.json'), 'utf8'));
    expect(settings).toMatchObject({
      format: 'shrinkwell-comparisons', format_version: 1, rank_1_is: 'highest', interval: 0.95, top: 1,
      target: 0.9, target_source: 'command line', pairs: 'all', pair_count: 2, sites: 2,
      draws: { chains: 4, draws_per_chain: n / 4, total: n }, converged: true,
    });
    expect(settings.draws.draws_bin_sha256).toMatch(/^[0-9a-f]{64}$/);
  });

  it('the target, k and direction from the config (compare: in the recorded settings); the command line wins', async () => {
    const rng = createRng(12, 0);
    const draws = [0, 1, 2].map((mu) => Float32Array.from({ length: 400 }, () => mu + normal(rng)));
    const sites = ['P', 'Q', 'R'].map((id) => ({ id }));
    const dir = synthetic({ sites, draws, chains: 2, drawsPerChain: 200, compare: { target: 1.5, top: 2, lower_is_better: true } });
    expect((await compareHere([dir], {})).code).toBe(EXIT.ok);
    let settings = JSON.parse(readFileSync(join(dir, 'comparisons', 'settings.json'), 'utf8'));
    expect(settings).toMatchObject({ target: 1.5, target_source: 'config', top: 2, rank_1_is: 'lowest' });
    expect((await compareHere([dir], { above: '-0.5', top: '1' })).code).toBe(EXIT.ok);
    settings = JSON.parse(readFileSync(join(dir, 'comparisons', 'settings.json'), 'utf8'));
    expect(settings).toMatchObject({ target: -0.5, target_source: 'command line', top: 1, rank_1_is: 'lowest' });
    expect((await compareHere([dir], { lowerIsBetter: false })).code).toBe(EXIT.ok);
    settings = JSON.parse(readFileSync(join(dir, 'comparisons', 'settings.json'), 'utf8'));
    expect(settings.rank_1_is).toBe('highest');
    const bad = synthetic({ sites, draws, chains: 2, drawsPerChain: 200, compare: { target: 'high' } });
    const r = await compareHere([bad], {});
    expect(r.code, r.message).toBe(EXIT.runFolder);
    expect(r.message).toMatch(/manifest\.json: compare\.target "high" is not a number$/);
  });

  it('several run folders each get their own comparisons', async () => {
    const first = fixtureCopy();
    const second = fixtureCopy();
    const r = await compareHere([first, second], { top: '3' });
    expect(r.code, r.message).toBe(EXIT.ok);
    expect(r.out.trim().split('\n')).toHaveLength(2);
    for (const dir of [first, second]) expect(csv(join(dir, 'comparisons', 'ranks.csv'))).toHaveLength(40);
    expect(readFileSync(join(first, 'comparisons', 'ranks.csv'), 'utf8')).toBe(readFileSync(join(second, 'comparisons', 'ranks.csv'), 'utf8'));
  });
});

describe('demo end to end: fit, compare, report', () => {
  it('the report gains a comparisons section with the rank chart and the heat map', async () => {
    const out = join(work, 'demo-run');
    const fit = spawnSync(process.execPath, [cli, 'fit', join(root, 'data-demo', 'area', 'config.yaml'), '--out', out], { encoding: 'utf8' });
    expect(fit.status, fit.stderr).toBe(EXIT.ok);
    const before = await renderReport(out, { pdf: false });
    expect(readFileSync(before.html, 'utf8')).not.toContain('Comparing sites');

    const r = run(['compare', out, '--above', '3', '--top', '5']);
    expect(r.code, r.stderr).toBe(EXIT.ok);
    const ranks = csv(join(out, 'comparisons', 'ranks.csv'));
    const estimates = csv(join(out, 'estimates.csv'));
    expect(ranks.map((x) => x.site)).toEqual(estimates.map((x) => x.site));
    // Σ P(top 5) = 5 and Σ P(bottom 5) = 5 (ranks form a permutation in every draw).
    const sum = (key: string) => ranks.reduce((acc, x) => acc + Number(x[key]), 0);
    expect(sum('p_top_k')).toBeCloseTo(5, 5);
    expect(sum('p_bottom_k')).toBeCloseTo(5, 5);
    expect(csv(join(out, 'comparisons', 'pairwise.csv'))).toHaveLength(40 * 39);
    // The site with the highest estimate has the best median rank (common sense check on real output).
    const best = estimates.reduce((a, b) => (Number(a.estimate) >= Number(b.estimate) ? a : b));
    const bestRank = Math.min(...ranks.map((x) => Number(x.rank_median)));
    expect(Number(ranks.find((x) => x.site === best.site)!.rank_median)).toBe(bestRank);

    const after = await renderReport(out, { pdf: false });
    const html = readFileSync(after.html, 'utf8');
    expect(html).toContain('Comparing sites');
    expect(html).toContain('aria-label="Rank of each site with its interval"');
    expect(html).toContain('aria-label="Probability that one site ranks ahead of another"');
    expect(html).toContain('P(&gt; 3.00 t/ha)');
  });
});
