/**
 * End-to-end report tests: the area demo (with a benchmark added, on copies of its config and
 * sites file) is fitted with the built CLI and rendered to PDF once; the auditor's sections are
 * checked against the run's own files;
 * a hand-made fixture run (tests/fixtures/run-area) checks the HTML snapshot, escaping, the
 * NOT CONVERGED marking and the offline guarantee with an office template that asks for URLs.
 *
 * Needs `npm run build` (npm test does it) for the fit, and Chromium + poppler-utils
 * (pdftotext, pdffonts, pdfinfo) on the machine.
 */
import { execFileSync, spawnSync } from 'node:child_process';
import { cpSync, existsSync, mkdirSync, mkdtempSync, readFileSync, rmSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { renderReport, type ReportResult } from '../src/report/index.js';
import { readRunFolder } from '../src/report/read-run.js';

const root = join(import.meta.dirname, '..');
const fixture = join(root, 'tests', 'fixtures', 'run-area');
const work = mkdtempSync(join(tmpdir(), 'shrinkwell-report-test-'));
afterAll(() => rmSync(work, { recursive: true, force: true }));

const pdftotext = (pdf: string, page?: number): string =>
  execFileSync('pdftotext', [...(page ? ['-f', String(page), '-l', String(page)] : []), '-layout', pdf, '-'], { encoding: 'utf8' });

/**
 * A copy of the area demo with `benchmark:` set: the sites file gains a column `share` (each
 * district's share of all households) and the weighted mean is benchmarked to 3.1 t/ha.
 * Returns the copied config's path.
 */
function demoWithBenchmark(dir: string): string {
  const demo = join(root, 'data-demo', 'area');
  mkdirSync(dir, { recursive: true });
  cpSync(join(demo, 'districts.geojson'), join(dir, 'districts.geojson'));
  const lines = readFileSync(join(demo, 'districts.csv'), 'utf8').trimEnd().split('\n');
  const column = lines[0].split(',').indexOf('households');
  const households = lines.slice(1).map((line) => Number(line.split(',')[column]));
  const all = households.reduce((a, b) => a + b, 0);
  writeFileSync(join(dir, 'districts.csv'), [`${lines[0]},share`, ...lines.slice(1).map((line, i) => `${line},${(households[i] / all).toFixed(6)}`)].join('\n') + '\n');
  const config = readFileSync(join(demo, 'config.yaml'), 'utf8');
  expect(config).toMatch(/^interval: 0\.95$/m);
  writeFileSync(join(dir, 'config.yaml'), config.replace(/^interval: 0\.95$/m, 'interval: 0.95\nbenchmark: { total: 3.1, weights: share, method: ratio }'));
  return join(dir, 'config.yaml');
}

describe('report of the area demo (fitted with the built CLI)', () => {
  const runDir = join(work, 'demo-run');
  const outDir = join(work, 'demo-report');
  let result: ReportResult;
  let text: string;

  beforeAll(async () => {
    const cli = join(root, 'dist', 'src', 'cli', 'main.js');
    if (!existsSync(cli)) throw new Error('dist/src/cli/main.js is missing: run `npm run build` first');
    const fit = spawnSync(process.execPath, [cli, 'fit', demoWithBenchmark(join(work, 'demo-input')), '--out', runDir], { encoding: 'utf8' });
    // 0 = converged, 5 = written but not converged: either way the run folder exists.
    expect([0, 5], fit.stderr).toContain(fit.status);
    result = await renderReport(runDir, { outDir });
    text = pdftotext(result.pdf as string);
  });

  it('writes report.html, report.pdf and estimates.geojson without warnings or requests', () => {
    expect(result.warning).toBeUndefined();
    expect(existsSync(result.html)).toBe(true);
    expect(existsSync(result.pdf as string)).toBe(true);
    expect(result.blocked).toEqual([]);
    const geo = JSON.parse(readFileSync(result.geojson as string, 'utf8'));
    expect(geo.features).toHaveLength(40);
    for (const feature of geo.features) {
      expect(typeof feature.properties.estimate).toBe('number');
      expect(['publish', 'caution', 'suppress']).toContain(feature.properties.flag);
    }
  });

  it('shows every site id, the flags and the appendix headings in the PDF text', () => {
    const run = readRunFolder(runDir);
    for (const site of run.estimates) expect(text).toContain(site.site);
    for (const flag of new Set(run.estimates.map((s) => s.flag))) {
      expect(text).toContain({ publish: 'Publish', caution: 'Caution', suppress: 'Suppressed' }[flag]);
    }
    for (const heading of [
      'Methodology appendix', 'Model', 'Priors', 'Sampling variances', 'Data fingerprints', 'Coefficients',
      'Sampler settings', 'Convergence diagnostics', 'Trace and density plots', 'Reproducing this run',
    ]) {
      expect(text).toContain(heading);
    }
    expect(text).toContain(run.manifest.inputs[0].sha256.slice(0, 32));
    expect(text).toContain(String(run.summary.sampling.seed));
  });

  it('shows the auditor\'s sections with the figures of the run\'s own files', () => {
    const flat = text.replace(/\s+/g, ' ');
    const summary = JSON.parse(readFileSync(join(runDir, 'summary.json'), 'utf8'));
    const html = readFileSync(result.html, 'utf8');
    for (const heading of ['Sampler certificate', 'Model checks', 'Frequentist cross-check', 'Benchmarking']) expect(text).toContain(heading);

    const certificate = summary.certificate;
    expect(certificate.quantities).toBe(readFileSync(join(runDir, 'certificate.csv'), 'utf8').trim().split('\n').length - 1);
    expect(flat).toContain(certificate.all_within
      ? `All ${certificate.quantities} quantities agree with the exact posterior within Monte Carlo error`
      : 'disagree with the exact posterior by more than Monte Carlo error allows');
    expect(flat).toContain(`z = ${certificate.worst.z.toFixed(2)}`);
    expect(flat).toContain(`±${certificate.bound.toFixed(2)}`);

    const checks = summary.model_checks;
    expect(flat).toContain(`the model: ${checks.overall_ppp.toFixed(2)}.`);
    if (checks.extreme_sites.length === 0) expect(flat).toContain(`None of the ${summary.counts.sampled} sampled sites`);
    for (const site of checks.extreme_sites) expect(html).toMatch(new RegExp(`<tr><td class="code">${site}</td>`));
    expect(flat).toContain(`mean of the direct estimates is ${checks.mean_direct.toFixed(3)} t/ha`);

    const frequentist = JSON.parse(readFileSync(join(runDir, 'frequentist.json'), 'utf8'));
    expect(frequentist.site_variance).toBe(summary.frequentist.site_variance);
    expect(flat).toMatch(new RegExp(`Between-site standard deviation σ ?u ${Math.sqrt(frequentist.site_variance).toPrecision(3)} `));
    expect(flat).toMatch(new RegExp(`Between-site variance σ ?u ?2 ${frequentist.site_variance.toPrecision(3)} `));
    expect(flat).toContain(summary.frequentist.reading.slice(0, 60));
    expect(flat).toContain(`Intercept ${frequentist.coefficients.intercept.estimate.toPrecision(4)} `);

    const benchmark = summary.benchmark;
    expect(flat).toContain(`Total ${benchmark.total}`);
    expect(flat).toContain(`${benchmark.adjustment.mean.toFixed(4)} (95% interval ${benchmark.adjustment.lower.toFixed(4)} – ${benchmark.adjustment.upper.toFixed(4)})`);
    expect(text).toContain('Benchmarked');
    // Each site row of the table: the unadjusted estimate and, beside it, the benchmarked one.
    const benchmarked = readFileSync(join(runDir, 'benchmarked.csv'), 'utf8').trim().split('\n').slice(1).map((line) => line.split(','));
    const run = readRunFolder(runDir);
    expect(benchmarked).toHaveLength(run.estimates.length);
    for (const site of run.estimates) {
      const row = benchmarked.find((cells) => cells[0] === site.site) as string[];
      const line = text.split('\n').find((l) => l.trimStart().startsWith(`${site.site} `)) ?? '';
      if (site.flag === 'suppress') {
        expect(line).not.toContain(Number(row[2]).toFixed(2));
      } else {
        expect(line, site.site).toMatch(new RegExp(`${site.estimate.toFixed(2)} .*${Number(row[2]).toFixed(2)} `));
      }
    }
  });

  it('has a sane page count, page numbers, and embeds every font', () => {
    const info = execFileSync('pdfinfo', [result.pdf as string], { encoding: 'utf8' });
    const pages = Number(/Pages:\s+(\d+)/.exec(info)?.[1]);
    expect(result.pages).toBe(pages);
    expect(pages).toBeGreaterThanOrEqual(6);
    expect(pages).toBeLessThanOrEqual(16);
    expect(/Page size:\s+594\.\d+ x 841\.\d+/.test(info)).toBe(true); // A4 in points
    expect(pdftotext(result.pdf as string, pages)).toContain(`Page ${pages} of ${pages}`);
    const fonts = execFileSync('pdffonts', [result.pdf as string], { encoding: 'utf8' }).trim().split('\n').slice(2);
    expect(fonts.length).toBeGreaterThan(0);
    for (const row of fonts) {
      // Columns: name type encoding emb sub uni object ID: "emb" must be yes for every font.
      const cells = row.trim().split(/\s+/);
      expect(cells.slice(-5, -2)[0], row).toBe('yes');
    }
    expect(fonts.some((row) => row.includes('KaTeX_Main'))).toBe(true);
  });

  it('keeps the charts vector (no raster images in the PDF) and the page offline', () => {
    const pdf = readFileSync(result.pdf as string).toString('latin1');
    expect(/\/Subtype\s*\/Image/.test(pdf)).toBe(false);
    const html = readFileSync(result.html, 'utf8');
    expect(html).not.toMatch(/(?:src|href)\s*=\s*["']?\s*(?:https?:)?\/\//i);
    expect(html).not.toMatch(/url\(\s*["']?\s*(?:https?:)?\/\//i);
    expect(html).not.toMatch(/<script/i);
    // No URL at all except the SVG namespace name (an identifier, never fetched).
    expect(html.replace(/xmlns="http:\/\/www\.w3\.org\/2000\/svg"/g, '')).not.toMatch(/[a-z]+:\/\//i);
  });
});

describe('report of the fixture run', () => {
  it('renders the same HTML every time (snapshot of the whole file)', async () => {
    const first = await renderReport(fixture, { outDir: join(work, 'fixture-a'), pdf: false });
    const second = await renderReport(fixture, { outDir: join(work, 'fixture-b'), pdf: false });
    const html = readFileSync(first.html, 'utf8');
    expect(readFileSync(second.html, 'utf8')).toBe(html);
    await expect(html).toMatchFileSnapshot('./__snapshots__/report-fixture.html');
  });

  it('prints a site name with markup as text and never shows a suppressed figure', async () => {
    const { html: path } = await renderReport(fixture, { outDir: join(work, 'fixture-c'), pdf: false });
    const html = readFileSync(path, 'utf8');
    expect(html).toContain('&lt;b&gt;x&lt;/b&gt; &amp; &quot;y&quot;');
    expect(html).not.toContain('<b>x</b>');
    const run = readRunFolder(fixture);
    const suppressed = run.estimates.filter((s) => s.flag === 'suppress');
    expect(suppressed.length).toBeGreaterThan(0);
    for (const site of suppressed) {
      const row = new RegExp(`<tr class="row-suppress">\\s*<td class="site-id">${site.site}</td>[\\s\\S]*?</tr>`).exec(html)?.[0];
      expect(row, site.site).toBeDefined();
      expect(row).toContain('suppressed');
      expect(row).not.toContain(site.estimate.toFixed(2));
      expect(row).not.toContain(site.lower.toFixed(2));
    }
  });

  it('default templates never use triple-stash output', () => {
    const files = ['report.hbs', ...['appendix', 'audit', 'cautions', 'charts', 'cover', 'maps', 'site-table', 'status'].map((p) => `partials/${p}.hbs`)];
    for (const file of files) expect(readFileSync(join(root, 'templates', file), 'utf8'), file).not.toContain('{{{');
  });
});

describe('a run that did not converge, with an office template that asks for URLs', () => {
  const runDir = join(work, 'not-converged');
  const officeDir = join(work, 'office-templates');
  let result: ReportResult;

  beforeAll(async () => {
    cpSync(fixture, runDir, { recursive: true });
    const summaryPath = join(runDir, 'summary.json');
    const summary = JSON.parse(readFileSync(summaryPath, 'utf8'));
    summary.converged = false;
    summary.gate.failing = ['site_sd', 'coef:intercept'];
    writeFileSync(summaryPath, JSON.stringify(summary, null, 2));
    mkdirSync(join(officeDir, 'partials'), { recursive: true });
    const defaultCss = readFileSync(join(root, 'templates', 'report.css'), 'utf8');
    writeFileSync(
      join(officeDir, 'report.css'),
      '@import url("https://example.invalid/office.css");\n' +
        '@font-face { font-family: OfficeFont; src: url("https://example.invalid/office-font.woff2"); }\n' +
        `${defaultCss}\n.office-logo { font-family: OfficeFont; background: url("http://example.invalid/bg.png"); }\n`,
    );
    const cautions = readFileSync(join(root, 'templates', 'partials', 'cautions.hbs'), 'utf8');
    writeFileSync(
      join(officeDir, 'partials', 'cautions.hbs'),
      `<img src="https://example.invalid/logo.png" alt="Office logo"><p class="office-logo">Office of statistics</p>\n${cautions}`,
    );
    result = await renderReport(runDir, { outDir: join(work, 'not-converged-report'), templateDir: officeDir });
  });

  it('lets the page make no request: every one the interceptor saw was aborted', () => {
    const blocked = result.blocked ?? [];
    expect(blocked).toContain('https://example.invalid/logo.png');
    expect(blocked).toContain('https://example.invalid/office.css');
    expect(blocked.every((url) => url.includes('example.invalid'))).toBe(true);
    expect(pdftotext(result.pdf as string)).toContain('Office of statistics'); // the office's partial was used
  });

  it('marks NOT CONVERGED on every page', () => {
    expect(result.pages).toBeGreaterThan(3);
    for (let page = 1; page <= (result.pages as number); page++) {
      expect(pdftotext(result.pdf as string, page), `page ${page}`).toContain('NOT CONVERGED');
    }
    const text = pdftotext(result.pdf as string);
    expect(text).toContain('provisional');
    expect(text).toContain('site_sd, coef:intercept');
  });

  it('prints the markup site name as plain text', () => {
    expect(pdftotext(result.pdf as string)).toContain('<b>x</b> & "y"');
  });
});
