/**
 * The auditor's sections of the methodology appendix (frequentist cross-check, sampler
 * certificate, model checks, benchmarking), rendered to HTML only (no browser): each section
 * appears when its files are in the run folder and is absent when not; the figures shown are the
 * files' own; suppressed sites stay suppressed; broken files give one-line errors.
 *
 * The audit files here are written by hand onto a copy of the fixture run (their numbers are
 * made up to exercise the layout, not reference values). The real files written by `fit` are
 * checked in the PDF of tests/report.test.ts.
 */
import { cpSync, mkdtempSync, readFileSync, rmSync, unlinkSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { afterAll, describe, expect, it } from 'vitest';
import { UserError } from '../src/errors.js';
import { CERTIFICATE_BIN, certificateChart, crossCheckChart, normalScores, residualQqPlot } from '../src/report/audit-charts.js';
import { auditView } from '../src/report/audit.js';
import { renderReport } from '../src/report/index.js';
import { readRunFolder, type SiteRow } from '../src/report/read-run.js';

const fixture = join(import.meta.dirname, 'fixtures', 'run-area');
const work = mkdtempSync(join(tmpdir(), 'shrinkwell-report-audit-'));
afterAll(() => rmSync(work, { recursive: true, force: true }));

const SECTION_HEADINGS = ['Sampler certificate', 'Model checks', 'Frequentist cross-check', 'Benchmarking'];
const csvNumber = (v: number) => String(Number(v.toPrecision(8)));
const csv = (header: string[], rows: Array<Array<string | number>>) =>
  [header.join(','), ...rows.map((r) => r.map((c) => (typeof c === 'number' ? csvNumber(c) : c)).join(','))].join('\n') + '\n';

interface AuditOptions {
  /** Sites whose flag is changed to suppress in the copy's estimates.csv. */
  suppress?: string[];
  /** A site whose certificate z lies outside the bound. */
  failing?: string;
  benchmark?: boolean;
}

const BOUND = 3.686597;
const EXTREME_LOW = 'D03'; // p near 0: survey mean higher than the model expects
const EXTREME_HIGH = 'D05'; // p near 1, and suppressed in some copies
const LARGEST = 'D07'; // the site whose EBLUP differs most from the posterior mean

let copies = 0;
/** A copy of the fixture with hand-written audit files. */
function auditCopy(opts: AuditOptions = {}): { dir: string; sites: SiteRow[] } {
  const dir = join(work, `audit-${copies++}`);
  cpSync(fixture, dir, { recursive: true });
  if (opts.suppress?.length) {
    const path = join(dir, 'estimates.csv');
    const lines = readFileSync(path, 'utf8').split('\n').map((line) =>
      opts.suppress!.some((id) => line.startsWith(`${id},`)) ? line.replace(/,(publish|caution),/, ',suppress,') : line);
    writeFileSync(path, lines.join('\n'));
  }
  const run = readRunFolder(dir);
  const sites = run.estimates;
  const summaryPath = join(dir, 'summary.json');
  const summary = JSON.parse(readFileSync(summaryPath, 'utf8'));

  // Frequentist: EBLUP = posterior mean + a small multiple of the posterior sd, LARGEST off by 0.3 sd.
  writeFileSync(join(dir, 'frequentist.csv'), csv(['site', 'eblup', 'rmse'], sites.map((s, i) => [
    s.site, s.estimate + (s.site === LARGEST ? 0.3 : 0.01 * ((i % 5) - 2)) * s.sd, s.sd * (0.95 + 0.01 * (i % 6)),
  ])));
  writeFileSync(join(dir, 'frequentist.json'), JSON.stringify({
    model: 'area', method: 'REML', site_variance: 0.1936,
    coefficients: { intercept: { estimate: 1.0123, se: 0.8011 }, rain: { estimate: 0.0017321, se: 0.0014111 }, veg: { estimate: 1.1, se: 2.01 } },
    converged: true, iterations: 7, at_boundary: false, log_likelihood: -30.5, mse_note: 'Test note on the MSE.',
  }, null, 2));
  summary.frequentist = {
    method: 'REML', site_variance: 0.1936, at_boundary: false, converged: true,
    largest_difference_sd: { site: LARGEST, value: 0.3 }, mean_difference_sd: 0.02, rmse_over_sd: { min: 0.95, max: 1 },
    reading: 'Test reading: the two fits agree closely.', mse_note: 'Test note on the MSE.',
  };

  // Certificate: every monitored quantity, z within ±2.4 except the failing one.
  const quantities = run.diagnostics.map((d) => d.quantity);
  const zOf = (q: string, i: number) => (q === `site:${opts.failing}` ? 5.25 : Math.round(((i * 37) % 49) - 24) / 10);
  const certRows = quantities.map((q, i) => {
    const z = zOf(q, i);
    const gibbs = q.startsWith('site:') ? sites.find((s) => `site:${s.site}` === q)!.estimate : run.parameters.find((p) => p.quantity === q)!.estimate;
    return [q, gibbs, gibbs - z * 0.004, 0.004, z] as [string, number, number, number, number];
  });
  writeFileSync(join(dir, 'certificate.csv'), csv(['quantity', 'gibbs_mean', 'exact_mean', 'mcse', 'z'], certRows));
  const worst = [...certRows].sort((a, b) => Math.abs(b[4]) - Math.abs(a[4]))[0];
  summary.certificate = {
    note: 'Test certificate note.', quantities: certRows.length,
    worst: { quantity: worst[0], gibbs: worst[1], exact: worst[2], mcse: worst[3], z: worst[4] },
    bound: BOUND, all_within: Math.abs(worst[4]) <= BOUND,
  };

  // Model checks: two extreme sites, blank cells for unsampled sites.
  const pOf = (s: SiteRow, i: number) => (s.site === EXTREME_LOW ? 0.0123 : s.site === EXTREME_HIGH ? 0.9912 : 0.1 + ((i * 13) % 80) / 100);
  writeFileSync(join(dir, 'model_checks.csv'), csv(['site', 'ppp', 'std_residual', 'extreme'], sites.map((s, i) => s.n === 0
    ? [s.site, '', '', '']
    : [s.site, pOf(s, i), s.site === EXTREME_LOW ? 2.61 : s.site === EXTREME_HIGH ? -2.4 : ((i % 7) - 3) / 2, s.site === EXTREME_LOW || s.site === EXTREME_HIGH ? 'yes' : 'no'])));
  summary.model_checks = {
    note: 'Test model-checks note.', overall_ppp: 0.3123, extreme_level: 0.05,
    extreme_sites: [EXTREME_LOW, EXTREME_HIGH], mean_direct: 3.12345, mean_model: 3.11111,
  };

  if (opts.benchmark) {
    writeFileSync(join(dir, 'benchmarked.csv'), csv(['site', 'label', 'estimate', 'sd', 'lower', 'upper', 'estimate_unadjusted', 'flag'], sites.map((s) => [
      s.site, `"${s.label.replace(/"/g, '""')}"`, s.estimate * 1.0421, s.sd * 1.0421, s.lower * 1.03, s.upper * 1.05, s.estimate, s.flag,
    ])));
    summary.benchmark = {
      method: 'ratio', method_note: 'Test method note.', total: 3.25, weights: 'share',
      unadjusted_sum: { mean: 3.1187, lower: 2.9, upper: 3.3 }, adjustment: { mean: 1.04213, lower: 0.98456, upper: 1.10123 },
    };
  } else {
    summary.benchmark = null;
  }
  writeFileSync(summaryPath, JSON.stringify(summary, null, 2));
  return { dir, sites };
}

let renders = 0;
async function html(dir: string): Promise<string> {
  const { html: path } = await renderReport(dir, { outDir: join(work, `report-${renders++}`), pdf: false });
  return readFileSync(path, 'utf8');
}

/** The HTML of one appendix section: from its <h3> to the next <h3> or the end of the appendix. */
function section(page: string, heading: string): string {
  const start = page.indexOf(`<h3>${heading}</h3>`);
  if (start < 0) return '';
  const rest = page.slice(start + 4);
  const end = rest.search(/<h3>|<\/section>/);
  return rest.slice(0, end < 0 ? undefined : end);
}

/** The site table row of `site`. */
function siteRow(page: string, site: string): string {
  return new RegExp(`<tr class="row-[a-z]+">\\s*<td class="site-id">${site}</td>[\\s\\S]*?</tr>`).exec(page)?.[0] ?? '';
}

describe('a run folder without the audit files', () => {
  it('has no audit section and no benchmarked column', async () => {
    const run = readRunFolder(fixture);
    expect(auditView(run)).toEqual({ frequentist: null, certificate: null, modelChecks: null, benchmark: null });
    const page = await html(fixture);
    for (const heading of SECTION_HEADINGS) expect(page).not.toContain(`<h3>${heading}</h3>`);
    expect(page).not.toContain('Benchmarked estimate');
    expect(page).not.toContain('class="c-bench"');
  });

  it('leaves out just the section whose file and summary key are missing', async () => {
    const { dir } = auditCopy();
    unlinkSync(join(dir, 'certificate.csv'));
    const summaryPath = join(dir, 'summary.json');
    const summary = JSON.parse(readFileSync(summaryPath, 'utf8'));
    delete summary.certificate;
    summary.model_checks = null;
    unlinkSync(join(dir, 'model_checks.csv'));
    writeFileSync(summaryPath, JSON.stringify(summary));
    const page = await html(dir);
    expect(page).not.toContain('<h3>Sampler certificate</h3>');
    expect(page).not.toContain('<h3>Model checks</h3>');
    expect(page).toContain('<h3>Frequentist cross-check</h3>');
    expect(page).not.toContain('<h3>Benchmarking</h3>');
  });
});

describe('a run folder with the audit files', () => {
  const built = auditCopy({ benchmark: true, suppress: [EXTREME_HIGH, LARGEST] });
  let page: string;
  const pageReady = html(built.dir).then((p) => (page = p));

  it('renders all four sections, after the trace plots and before the reproduction notes', async () => {
    await pageReady;
    const positions = ['Trace and density plots', ...SECTION_HEADINGS, 'Reproducing this run'].map((h) => page.indexOf(`<h3>${h}</h3>`));
    for (const p of positions) expect(p).toBeGreaterThan(0);
    expect([...positions].sort((a, b) => a - b)).toEqual(positions);
  });

  it('renders the same HTML every time', async () => {
    await pageReady;
    expect(await html(built.dir)).toBe(page);
  });

  it('certificate: verdict, worst quantity, bound and one dot per quantity, as in the files', async () => {
    await pageReady;
    const part = section(page, 'Sampler certificate');
    const summary = JSON.parse(readFileSync(join(built.dir, 'summary.json'), 'utf8')).certificate;
    expect(summary.all_within).toBe(true);
    expect(part).toContain(`<strong>Passed.</strong> All ${summary.quantities} quantities agree with the exact posterior within Monte Carlo error`);
    expect(part).toContain(`${Math.abs(summary.worst.z).toFixed(2)}`);
    expect(part).toContain(`±${BOUND.toFixed(2)}`);
    expect(part).toContain(summary.worst.quantity);
    // Parameters tabled; site rows only in the chart (44 circles: 4 filled, 40 open).
    for (const q of ['coef:intercept', 'coef:rain', 'coef:veg', 'site_sd']) expect(part).toContain(`<td class="code">${q}</td>`);
    const chart = /<svg[\s\S]*?<\/svg>/.exec(part)?.[0] ?? '';
    const circles = (chart.match(/<circle /g) ?? []).length - 2; // minus the two legend marks
    expect(circles).toBe(44);
    expect(part).toContain('Test certificate note.');
  });

  it('model checks: overall p-value, the extreme sites with their p-values, means and the quantile plot', async () => {
    await pageReady;
    const part = section(page, 'Model checks');
    expect(part).toContain('<strong>0.31</strong>');
    expect(part).toContain('no sign of misfit');
    const rows = [...part.matchAll(/<tr><td class="code">(D\d+)<\/td>[\s\S]*?<\/tr>/g)];
    expect(rows.map((r) => r[1])).toEqual([EXTREME_HIGH, EXTREME_LOW]); // 0.9912 is nearer an end than 0.0123
    expect(rows[0][0]).toContain('0.991');
    expect(rows[0][0]).toContain('(suppressed)');
    expect(rows[0][0]).toContain('lower than the model expects');
    expect(rows[1][0]).toContain('0.012');
    expect(rows[1][0]).toContain('2.61');
    expect(rows[1][0]).toContain('higher than the model expects');
    expect(part).toContain('2 of 36 sampled sites');
    expect(part).toContain('about 1.8 would be expected');
    expect(part).toContain('3.123 t/ha');
    expect(part).toContain('3.111 t/ha');
    expect(part).toContain('-0.012 t/ha');
    // One plotted mark per sampled site: 35 dots, 1 suppressed cross, extreme D03 as a diamond.
    const chart = /<svg[\s\S]*?<\/svg>/.exec(part)?.[0] ?? '';
    expect(chart).toContain('>D03<');
    expect(chart).toContain('>D05<');
  });

  it('frequentist: variance on both scales, coefficients side by side, reading, and suppressed figures withheld', async () => {
    await pageReady;
    const part = section(page, 'Frequentist cross-check');
    expect(part).toContain('restricted maximum likelihood (REML)');
    expect(part).toContain('Fay &amp; Herriot 1979');
    expect(part).toContain('Prasad &amp; Rao (1990)');
    expect(part).toContain('Datta &amp; Lahiri (2000)');
    const spread = /<table class="plain audit-spread">[\s\S]*?<\/table>/.exec(part)?.[0] ?? '';
    expect(spread).toContain(`>${Math.sqrt(0.1936).toPrecision(3)}<`); // 0.440
    expect(spread).toContain('>0.194<');
    expect(spread).toContain('>0.452<'); // posterior mean of site_sd (parameters.csv)
    expect(spread).toContain(`>${(0.31266483 ** 2).toPrecision(3)} – ${(0.65704941 ** 2).toPrecision(3)}<`);
    const coefficients = /<table class="plain audit-coefficients">[\s\S]*?<\/table>/.exec(part)?.[0] ?? '';
    expect(coefficients).toContain('>1.012<');
    expect(coefficients).toContain('>0.001732<');
    expect(coefficients).toContain('>1.022<'); // posterior mean of the intercept
    expect(coefficients).toContain(`>${((1.0123 - 1.0221538) / 0.82756899).toFixed(2)}<`);
    expect(part).toContain('Test reading: the two fits agree closely.');
    expect(part).toContain('Test note on the MSE.');
    // The largest difference first; its figures withheld because it is suppressed in this copy.
    const largest = /<table class="plain audit-largest">[\s\S]*?<\/table>/.exec(part)?.[0] ?? '';
    const first = /<tbody>\s*<tr>([\s\S]*?)<\/tr>/.exec(largest)?.[1] ?? '';
    expect(first).toContain(`>${LARGEST}<`);
    expect(first).toContain('suppressed');
    expect(first).toContain('>0.30<');
    const site = built.sites.find((s) => s.site === LARGEST)!;
    expect(first).not.toContain(site.estimate.toFixed(2));
    const suppressed = built.sites.filter((s) => s.flag === 'suppress').length;
    expect(suppressed).toBe(4); // D01 and D40 in the fixture, D05 and D07 here
    expect(part).toContain(`${suppressed} suppressed site(s) are left out of the left panel`);
  });

  it('benchmarking: method, total, weights and adjustment, and a benchmarked column beside the unadjusted estimate', async () => {
    await pageReady;
    const part = section(page, 'Benchmarking');
    expect(part).toContain('Test method note.');
    expect(part).toContain('<dd>3.25</dd>');
    expect(part).toContain('<span class="code">share</span>');
    expect(part).toContain('1.0421 (95% interval 0.9846 – 1.1012)');
    expect(part).toContain('3.119 (95% interval 2.900 – 3.300)');
    expect(part).toContain('lies inside the 95% interval');
    expect(part).toContain('benchmarked.csv');
    expect(page).toContain('Benchmarked estimate</th>');
    for (const site of built.sites) {
      const row = siteRow(page, site.site);
      expect(row, site.site).not.toBe('');
      if (site.flag === 'suppress') {
        expect(row).not.toContain(site.estimate.toFixed(2));
        expect(row).not.toContain((site.estimate * 1.0421).toFixed(2));
        expect((row.match(/suppressed/g) ?? []).length).toBeGreaterThanOrEqual(3);
      } else {
        expect(row).toContain(`>${site.estimate.toFixed(2)}`); // the unadjusted estimate stays
        expect(row).toContain(`<td class="num bench">${(site.estimate * 1.0421).toFixed(2)}</td>`);
      }
    }
  });
});

describe('verdicts and warnings', () => {
  it('a certificate with a quantity outside the bound prints a failure box naming it', async () => {
    const { dir } = auditCopy({ failing: 'D09' });
    const part = section(await html(dir), 'Sampler certificate');
    expect(part).toContain('status-failed');
    expect(part).toContain('<strong>Failed.</strong>');
    expect(part).toContain('1 of 44 quantities disagree');
    expect(part).toContain('site:D09 (z = 5.25)');
    expect(part).not.toContain('Passed.');
  });

  it('a small overall p-value, a boundary fit and a total outside the interval are read out as warnings', async () => {
    const { dir } = auditCopy({ benchmark: true });
    const summaryPath = join(dir, 'summary.json');
    const summary = JSON.parse(readFileSync(summaryPath, 'utf8'));
    summary.model_checks.overall_ppp = 0.012;
    summary.benchmark.total = 4.2;
    writeFileSync(summaryPath, JSON.stringify(summary));
    const frequentist = JSON.parse(readFileSync(join(dir, 'frequentist.json'), 'utf8'));
    frequentist.at_boundary = true;
    frequentist.site_variance = 0;
    writeFileSync(join(dir, 'frequentist.json'), JSON.stringify(frequentist));
    const page = await html(dir);
    expect(section(page, 'Model checks')).toMatch(/<p class="audit-warning">[^<]*<strong>0\.01<\/strong>\.\s*The direct estimates lie further from the model/);
    expect(section(page, 'Frequentist cross-check')).toContain('is zero (at the boundary)');
    expect(section(page, 'Benchmarking')).toMatch(/<p class="audit-warning">The total 4\.2 lies outside the 95% interval/);
  });
});

describe('broken audit files', () => {
  const failure = (dir: string): UserError => {
    try {
      auditView(readRunFolder(dir));
    } catch (error) {
      expect(error).toBeInstanceOf(UserError);
      return error as UserError;
    }
    throw new Error('expected auditView to fail');
  };

  it('name the file, line and column', () => {
    const { dir } = auditCopy();
    const path = join(dir, 'certificate.csv');
    const lines = readFileSync(path, 'utf8').split('\n');
    lines[2] = lines[2].replace(/,[^,]*$/, ',abc');
    writeFileSync(path, lines.join('\n'));
    const error = failure(dir);
    expect(error.kind).toBe('runFolder');
    expect(error.message).toBe(`${path}: line 3, column z: "abc" is not a number`);
  });

  it('refuse a site that is not in estimates.csv and a summary key of the wrong type', () => {
    const { dir } = auditCopy();
    const path = join(dir, 'frequentist.csv');
    writeFileSync(path, readFileSync(path, 'utf8').replace('\nD02,', '\nD99,'));
    expect(failure(dir).message).toBe(`${path}: line 3, column site: site "D99" is not in estimates.csv`);
    const other = auditCopy().dir;
    const summaryPath = join(other, 'summary.json');
    const summary = JSON.parse(readFileSync(summaryPath, 'utf8'));
    summary.certificate.bound = 'high';
    writeFileSync(summaryPath, JSON.stringify(summary));
    expect(failure(other).message).toBe(`${summaryPath}: "certificate.bound" is not a number`);
  });
});

describe('audit charts', () => {
  it('normal scores follow the expected normal order statistics', () => {
    // Expected values of standard normal order statistics, Harter (1961), Biometrika 48,
    // "Expected values of normal order statistics", Table 1 (values recalled from memory).
    // Blom's plotting positions approximate them; the tolerance 0.02 is the largest gap over
    // these two sample sizes (0.017 at n = 5, i = 1), rounded up.
    const tabled: Record<number, number[]> = { 5: [1.16296, 0.49502, 0], 10: [1.53875, 1.00136, 0.65606, 0.37576, 0.12267] };
    for (const [n, values] of Object.entries(tabled)) {
      const scores = normalScores(Number(n));
      values.forEach((v, i) => {
        expect(Math.abs(scores[Number(n) - 1 - i] - v)).toBeLessThan(0.02);
        expect(scores[i]).toBeCloseTo(-scores[Number(n) - 1 - i], 12); // symmetric
      });
    }
  });

  it('the cross-check leaves suppressed estimates out of the point panel but keeps their uncertainty', () => {
    const points = Array.from({ length: 120 }, (_, i) => ({
      id: `S${i}`, eblup: 2 + i / 100, rmse: 0.2, estimate: 2 + i / 100 + 0.001, sd: 0.21, sampled: i % 9 !== 0, suppressed: i % 10 === 0,
    }));
    const svg = crossCheckChart(points, { unit: 't/ha' });
    const suppressed = points.filter((p) => p.suppressed).length;
    const crosses = (svg.match(/rotate\(45\)/g) ?? []).length - 1; // minus the legend mark
    expect(crosses).toBe(suppressed);
    // Sampled sites are dots, unsampled ones open triangles, in both panels when not suppressed.
    const shown = points.filter((p) => !p.suppressed);
    expect((svg.match(/<circle /g) ?? []).length - 1).toBe(2 * shown.filter((p) => p.sampled).length);
    expect((svg.match(/fill="#ffffff" stroke="#23374d"/g) ?? []).length - 1).toBe(2 * shown.filter((p) => !p.sampled).length);
    expect(svg).toContain('identity line');
    expect(svg).not.toContain('NaN');
  });

  it('the certificate chart stacks one dot per quantity and labels only those outside the bound', () => {
    const points = Array.from({ length: 60 }, (_, i) => ({ quantity: `site:S${i}`, z: ((i * 17) % 31) / 10 - 1.5, parameter: false }));
    points.push({ quantity: 'coef:x', z: 4.4, parameter: true });
    const svg = certificateChart(points, { bound: 3.7 });
    expect((svg.match(/<circle /g) ?? []).length - 2).toBe(61);
    expect(svg).toContain('>coef:x<');
    expect(svg).not.toContain('>site:S1<');
    expect(svg).toContain('+3.70');
    expect(svg).toContain('−3.70');
    expect(CERTIFICATE_BIN).toBeGreaterThan(0);
    // With no bound recorded: no bound lines, still every dot.
    const plain = certificateChart(points, { bound: null });
    expect(plain).not.toContain('+3.70');
    expect((plain.match(/<circle /g) ?? []).length - 2).toBe(61);
  });

  it('the quantile plot draws one mark per residual and is deterministic', () => {
    const points = Array.from({ length: 300 }, (_, i) => ({ id: `S${i}`, residual: Math.sin(i * 2.1) * 2.2, extreme: i === 7, suppressed: i === 8 }));
    const svg = residualQqPlot(points);
    expect(residualQqPlot([...points].reverse())).toBe(svg);
    const dots = (svg.match(/<circle /g) ?? []).length - 1; // minus the legend dot
    expect(dots).toBe(298);
    expect(svg).toContain('>S7<');
  });
});
