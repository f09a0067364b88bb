/**
 * The counts model end to end through the shared pipeline: config → loader → Pólya–Gamma Gibbs in
 * worker threads → diagnostics, flags → run folder; the demo's run folder, and the sampler
 * certificate (Gibbs vs exact means, src/summaries/certificate.ts) on an intercept-only fit.
 */
import { copyFileSync, mkdtempSync, readFileSync, rmSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { afterAll, describe, expect, it } from 'vitest';
import { runFit } from '../src/pipeline/fit.js';

const work = mkdtempSync(join(tmpdir(), 'shrinkwell-counts-'));
afterAll(() => rmSync(work, { recursive: true, force: true }));

const demoConfig = join(import.meta.dirname, '..', 'data-demo', 'counts', 'config.yaml');

function csvRows(path: string): Array<Record<string, string>> {
  const [header, ...lines] = readFileSync(path, 'utf8').trim().split('\n');
  const names = header.split(',');
  // The demo's labels and reasons hold no commas except inside quoted reasons: split those last.
  return lines.map((line) => {
    const cells: string[] = [];
    let cell = '';
    let quoted = false;
    for (const ch of line) {
      if (ch === '"') quoted = !quoted;
      else if (ch === ',' && !quoted) {
        cells.push(cell);
        cell = '';
      } else cell += ch;
    }
    cells.push(cell);
    return Object.fromEntries(names.map((n, i) => [n, cells[i]]));
  });
}

describe('counts model through the pipeline', () => {
  it('the demo: 60 districts, shares in (0, 1), unsampled and tiny sites flagged, converged', async () => {
    const outcome = await runFit({ configPath: demoConfig, outDir: join(work, 'demo'), command: ['test'] });
    expect(outcome.converged).toBe(true);
    const rows = csvRows(join(outcome.runDir, 'estimates.csv'));
    expect(rows).toHaveLength(60);
    for (const r of rows) {
      const p = Number(r.estimate);
      expect(p > 0 && p < 1, `${r.site} estimate ${p}`).toBe(true);
      expect(Number(r.lower) < p && p < Number(r.upper)).toBe(true);
    }
    const unsampled = rows.filter((r) => r.n === '0');
    expect(unsampled.map((r) => r.site)).toEqual(['V05', 'V24', 'V42', 'V58']);
    for (const r of unsampled) {
      expect(r.direct).toBe('');
      expect(r.weight_direct).toBe('0');
      expect(r.reasons).toContain('no sample: synthetic estimate');
    }
    const tiny = rows.find((r) => r.site === 'V51')!;
    expect(tiny.n).toBe('3');
    expect(tiny.direct).toBe('0');
    expect(tiny.direct_cv).toBe(''); // sd relative to a share of 0: not defined
    // The direct interval is Wilson's (1927, JASA 22, 209–212) score interval: at 0 cases of n it is
    // [0, z²/(n + z²)] (the formula with p̂ = 0), here n = 3, z = 1.959964 (95%), not the empty 0 ± 0.
    const z = 1.959963985;
    expect(tiny.direct_lower).toBe('0');
    expect(Number(tiny.direct_upper)).toBeCloseTo((z * z) / (3 + z * z), 6);
    for (const u of unsampled) expect([u.direct_lower, u.direct_upper]).toEqual(['', '']);
    expect(tiny.reasons).toContain('small sample (n = 3');
    expect(Number(tiny.estimate)).toBeGreaterThan(0.1); // pulled far from 0 of 3
    expect(Number(tiny.weight_direct)).toBeLessThan(0.2);
    // CV column follows the rule for shares: sd / min(p, 1 − p).
    const r = rows[0];
    const p = Number(r.estimate);
    expect(Number(r.cv)).toBeCloseTo(Number(r.sd) / Math.min(p, 1 - p), 6);
    const summary = JSON.parse(readFileSync(join(outcome.runDir, 'summary.json'), 'utf8'));
    expect(summary.model.kind).toBe('counts');
    expect(summary.model.variance_note).toContain('Wilson');
    expect(summary.model.direct_interval).toMatch(/^Wilson score interval \(Wilson 1927\)/);
    expect(summary.model.cv_rule).toMatch(/^sd \/ min\(p, 1 − p\)/);
    expect(summary.model.method_note).toContain('Pólya–Gamma');
    // The notes have their own keys: the variance note keeps only how the direct figures were formed.
    expect(summary.model.variance_note).not.toContain('min(p, 1 − p)');
    expect(summary.model.variance_note).not.toContain('Pólya');
    const parameters = readFileSync(join(outcome.runDir, 'parameters.csv'), 'utf8');
    expect(parameters).toContain('coef:water');
    expect(parameters).toContain('site_sd');
  });

  it('intercept only: the run carries a certificate, and every Gibbs mean is within its bound of the exact mean', async () => {
    const fixture = join(import.meta.dirname, 'fixtures', 'data', 'counts_ok.csv');
    const folder = mkdtempSync(join(work, 'intercept-'));
    copyFileSync(fixture, join(folder, 'sites.csv'));
    writeFileSync(
      join(folder, 'config.yaml'),
      [
        'title: intercept-only counts',
        'measure: { name: Share, unit: share, decimals: 3 }',
        'sites: { file: sites.csv, id: district, label: name }',
        'model: { kind: counts, cases: anaemic, trials: tested, priors: { site_sd: { half_cauchy: { scale: 1 } } } }',
        'sampling: { chains: 4, warmup: 500, draws: 2000, seed: 99 }',
      ].join('\n') + '\n',
    );
    const outcome = await runFit({ configPath: join(folder, 'config.yaml'), outDir: join(folder, 'run'), command: ['test'] });
    const certificate = csvRows(join(outcome.runDir, 'certificate.csv'));
    expect(certificate.map((c) => c.quantity)).toEqual([
      'coef:intercept',
      'site_sd',
      ...['K1', 'K2', 'K3', 'K4', 'K5', 'K6', 'K7', 'K8'].map((k) => `site:${k}`),
    ]);
    const summary = JSON.parse(readFileSync(join(outcome.runDir, 'summary.json'), 'utf8'));
    expect(summary.certificate.all_within).toBe(true);
  });
});
