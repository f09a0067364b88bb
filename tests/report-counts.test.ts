/**
 * The report of a counts run (the demo): the survey figure is a share shown with its Wilson
 * interval, never as the empty "0.000 ± 0.000" of a district with 0 cases; the CV rule of shares
 * and the sampler note are stated in the appendix. HTML only (no browser needed).
 */
import { mkdtempSync, readFileSync, rmSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { runFit } from '../src/pipeline/fit.js';
import { renderReport } from '../src/report/index.js';
import { summaryEquations } from '../src/report/maths.js';
import { readRunFolder, type RunFolder } from '../src/report/read-run.js';

const work = mkdtempSync(join(tmpdir(), 'shrinkwell-report-counts-'));
afterAll(() => rmSync(work, { recursive: true, force: true }));

const demoConfig = join(import.meta.dirname, '..', 'data-demo', 'counts', 'config.yaml');
let run: RunFolder;
let html: string;

beforeAll(async () => {
  const outcome = await runFit({ configPath: demoConfig, outDir: join(work, 'run'), command: ['test'] });
  run = readRunFolder(outcome.runDir);
  const result = await renderReport(outcome.runDir, { outDir: join(work, 'report'), pdf: false });
  html = readFileSync(result.html, 'utf8');
}, 120_000);

/** The table row of one site, as HTML. */
function siteRow(id: string): string {
  const start = html.indexOf(`<td class="site-id">${id}</td>`);
  expect(start, id).toBeGreaterThan(0);
  return html.slice(start, html.indexOf('</tr>', start));
}

describe('report of a counts run', () => {
  it('reads the direct interval columns and the model notes of the run folder', () => {
    const tiny = run.estimates.find((s) => s.site === 'V51')!;
    expect(tiny.direct).toBe(0);
    // Wilson (1927, JASA 22, 209–212) at 0 cases of n: [0, z²/(n + z²)]; n = 3, z = 1.959964.
    const z = 1.959963985;
    expect(tiny.direct_lower).toBe(0);
    expect(tiny.direct_upper!).toBeCloseTo((z * z) / (3 + z * z), 6);
    expect(run.summary.model.cv_rule).toMatch(/^sd \/ min\(p, 1 − p\)/);
    expect(run.summary.model.direct_interval).toMatch(/^Wilson score interval/);
    expect(run.summary.model.method_note).toContain('Pólya–Gamma');
  });

  it('shows the survey share with its Wilson interval, not ± se, also at 0 cases', () => {
    expect(html).toContain('Survey share (95% interval)');
    expect(html).not.toContain('Survey mean ± se');
    const tiny = siteRow('V51');
    expect(tiny).toContain('0.000 (0.000–0.561)');
    expect(tiny).not.toContain('±');
    const first = run.estimates[0];
    const fmt = (x: number | null) => (x as number).toFixed(3);
    expect(siteRow(first.site)).toContain(`${fmt(first.direct)} (${fmt(first.direct_lower)}–${fmt(first.direct_upper)})`);
  });

  it('states the CV rule of shares, the direct interval and the sampler note in the appendix', () => {
    const equations = summaryEquations(run.summary.interval, 'counts');
    expect(equations[1].tex).toContain('\\min(\\hat{p}_i,\\ 1 - \\hat{p}_i)');
    expect(summaryEquations(run.summary.interval, 'area')[1].tex).toContain('|\\hat{\\theta}_i|');
    expect(html).toContain('<h3>Direct estimates</h3>');
    expect(html).toContain('<dt>Direct interval</dt><dd>Wilson score interval (Wilson 1927)');
    expect(html).toContain('<dt>CV rule</dt><dd>sd / min(p, 1 − p)');
    expect(html).toMatch(/<dt>For this model<\/dt><dd>Pólya–Gamma augmentation/);
  });
});
