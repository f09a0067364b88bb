/**
 * The report's parts without a browser: number helpers, density estimate, charts, maps,
 * template handling and browser discovery.
 */
import { cpSync, mkdirSync, mkdtempSync, readFileSync, rmSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { geoArea } from 'd3-geo';
import { afterAll, describe, expect, it } from 'vitest';
import { UserError } from '../src/errors.js';
import { findBrowser } from '../src/report/browser.js';
import { SITES_PER_PANEL, cvChart, intervalsChart, shrinkageChart, type ChartSite } from '../src/report/charts.js';
import { fixed, normalQuantile, percent, significant } from '../src/report/format.js';
import { renderReport } from '../src/report/index.js';
import { estimatesGeojson, estimatesMap, flagsMap, readSiteMap, rewindForD3 } from '../src/report/map.js';
import { describePrior, katexCss, normalisePrior, tex } from '../src/report/maths.js';
import { kernelDensity } from '../src/report/mcmc-plots.js';
import { readRunFolder } from '../src/report/read-run.js';
import { cssString } from '../src/report/templates.js';

const fixture = join(import.meta.dirname, 'fixtures', 'run-area');
const work = mkdtempSync(join(tmpdir(), 'shrinkwell-report-parts-'));
afterAll(() => rmSync(work, { recursive: true, force: true }));

describe('number helpers', () => {
  it('normal quantiles match the printed table to the table precision', () => {
    // Percentage points of the standard normal: Abramowitz & Stegun (1964), Handbook of
    // Mathematical Functions, Table 26.5 (values recalled from memory, 9 decimals).
    expect(normalQuantile(0.975)).toBeCloseTo(1.959963985, 8);
    expect(normalQuantile(0.95)).toBeCloseTo(1.644853627, 8);
    expect(normalQuantile(0.995)).toBeCloseTo(2.575829304, 8);
    expect(normalQuantile(0.001)).toBeCloseTo(-3.090232306, 8);
    expect(normalQuantile(0.5)).toBe(0);
    expect(Number.isNaN(normalQuantile(1.5))).toBe(true);
  });

  it('formats without locale and without negative zero', () => {
    expect(fixed(-0.0001, 2)).toBe('0.00');
    expect(fixed(Number.NaN, 2)).toBe('—');
    expect(fixed(null, 2)).toBe('—');
    expect(percent(0.1234)).toBe('12.3%');
    expect(significant(0.000123456, 3)).toBe('0.000123');
    expect(significant(1234.5678, 4)).toBe('1235');
  });

  it('a kernel density estimate integrates to 1 (trapezoid rule over ±10 bandwidths)', () => {
    // Exact property: a Gaussian KDE is an equal mixture of normal densities.
    const values = Float64Array.from({ length: 301 }, (_, i) => Math.sin(i * 1.7) * 2 + (i % 7) * 0.3);
    const grid = Array.from({ length: 4001 }, (_, i) => -12 + (i * 26) / 4000);
    const density = kernelDensity(values, grid);
    let integral = 0;
    for (let i = 1; i < grid.length; i++) integral += ((density[i] + density[i - 1]) / 2) * (grid[i] - grid[i - 1]);
    expect(integral).toBeCloseTo(1, 6);
  });
});

const site = (i: number, extra: Partial<ChartSite> = {}): ChartSite => ({
  id: `S${String(i).padStart(3, '0')}`,
  label: `Site ${i}`,
  n: i % 5,
  direct: i % 5 === 0 ? null : 2 + (i % 7) * 0.2,
  directLower: i % 5 === 0 ? null : 1.5 + (i % 7) * 0.2,
  directUpper: i % 5 === 0 ? null : 2.5 + (i % 7) * 0.2,
  directCv: i % 5 === 0 ? null : 0.05 * (i % 9),
  estimate: 2.2 + (i % 6) * 0.1,
  lower: 1.9 + (i % 6) * 0.1,
  upper: 2.5 + (i % 6) * 0.1,
  cv: 0.04 + (i % 8) * 0.03,
  weight: i % 5 === 0 ? 0 : (i % 10) / 10,
  flag: i % 11 === 0 ? 'suppress' : i % 4 === 0 ? 'caution' : 'publish',
  ...extra,
});

describe('charts', () => {
  it('splits many sites into panels that share one axis, and escapes labels', () => {
    const sites = Array.from({ length: 100 }, (_, i) => site(i + 1));
    sites[3] = site(4, { label: '<b>x</b> & "y"' });
    const panels = intervalsChart(sites, { unit: 't/ha', level: '95%' });
    expect(panels).toHaveLength(Math.ceil(100 / SITES_PER_PANEL));
    const all = panels.join('');
    for (const s of sites) expect(all).toContain(`>${s.id}<`);
    expect(all).not.toContain('<b>x');
    expect(all).toContain('&lt;b&gt;x&lt;/b&gt; &amp; &quot;y&quot;');
    // Same tick labels in every panel: the axis is shared.
    const ticks = (svg: string) => [...svg.matchAll(/class="tick"[^>]*>([^<]*)</g)].map((m) => m[1]).join('|');
    expect(ticks(panels[0])).toBe(ticks(panels[2]));
    // Vector hatching only: Chromium rasterises SVG <pattern> fills into the PDF.
    expect(all).not.toContain('<pattern');
  });

  it('draws the shrinkage and CV charts for sites with and without a sample', () => {
    const sites = Array.from({ length: 30 }, (_, i) => site(i + 1));
    const shrink = shrinkageChart(sites, { unit: 't/ha' });
    // One line per sampled site from the survey axis to the model axis.
    const sampled = sites.filter((s) => s.direct !== null).length;
    expect((shrink.match(/<line x1="[^"]*" y1="56"/g) ?? []).length).toBe(sampled);
    const cv = cvChart(sites, { cvCaution: 0.15, cvSuppress: 0.3 });
    expect(cv).toContain('caution above 15%');
    expect(cv).toContain('suppressed above 30%');
  });
});

describe('maps', () => {
  const mapPath = join(import.meta.dirname, '..', 'data-demo', 'area', 'districts.geojson');

  it('turns RFC 7946 rings so d3-geo sees small polygons, and leaves d3-wound rings alone', () => {
    const ccw = [[0, 0], [1, 0], [1, 1], [0, 1], [0, 0]];
    const turned = rewindForD3({ type: 'Polygon', coordinates: [ccw] });
    expect(geoArea(turned as never)).toBeLessThan(2 * Math.PI);
    const again = rewindForD3(turned);
    expect(again).toEqual(turned);
    const withHole = rewindForD3({ type: 'Polygon', coordinates: [ccw, [[0.2, 0.2], [0.2, 0.8], [0.8, 0.8], [0.8, 0.2], [0.2, 0.2]]] });
    // Exterior minus hole: 0.64 of the unit square's area remains (small-angle approximation).
    const square = geoArea({ type: 'Polygon', coordinates: [turned.coordinates[0] as number[][]] } as never);
    expect(geoArea(withHole as never) / square).toBeCloseTo(1 - 0.36, 2);
  });

  it('draws both choropleths with every district and writes estimates.geojson', () => {
    const map = readSiteMap(mapPath, 'district');
    expect(map?.features).toHaveLength(40);
    const run = readRunFolder(fixture);
    const sites = run.estimates.map((s) => ({ id: s.site, label: s.label, n: s.n, estimate: s.estimate, flag: s.flag }));
    const estimates = estimatesMap(map!, sites, { unit: 't/ha', decimals: 2, title: 'Mean maize yield' });
    const flags = flagsMap(map!, sites, {});
    for (const s of sites) {
      expect(estimates).toContain(`>${s.id}<`);
      expect(flags).toContain(`>${s.id}<`);
    }
    expect(estimates).not.toContain('<pattern');
    expect(flags).toContain(`suppressed (${run.summary.counts.suppress})`);
    const geo = JSON.parse(estimatesGeojson(map!, run.estimates));
    const d12 = geo.features.find((f: { properties: { district: string } }) => f.properties.district === 'D12');
    expect(d12.properties.label).toBe('<b>x</b> & "y"');
    expect(d12.properties.estimate).toBe(run.estimates[11].estimate);
    // Geometry kept exactly as in the office's file.
    expect(d12.geometry).toEqual(JSON.parse(readFileSync(mapPath, 'utf8')).features[11].geometry);
  });

  it('returns null for a missing file and a one-line data error for a bad one', () => {
    expect(readSiteMap(join(work, 'none.geojson'), 'district')).toBeNull();
    const bad = join(work, 'bad.geojson');
    writeFileSync(bad, JSON.stringify({ type: 'FeatureCollection', features: [{ type: 'Feature', properties: { name: 'x' }, geometry: null }] }));
    expect(() => readSiteMap(bad, 'district')).toThrow(new UserError('data', `${bad}: feature 1: property "district" is missing`));
  });
});

describe('maths', () => {
  it('reads priors in both spellings and states their values', () => {
    expect(normalisePrior('flat')).toEqual({ kind: 'flat', params: {} });
    expect(normalisePrior({ kind: 'half_cauchy', scale: 2.5 })).toEqual({ kind: 'half_cauchy', params: { scale: 2.5 } });
    expect(normalisePrior({ normal: { mean: 0, sd: 10 } })).toEqual({ kind: 'normal', params: { mean: 0, sd: 10 } });
    expect(describePrior('coefficients', normalisePrior({ normal: { mean: 0, sd: 10 } })).values).toBe('normal, mean 0, sd 10, independent across coefficients');
    expect(describePrior('site_sd', normalisePrior({ inverse_gamma: { shape: 2, scale: 0.2 } })).tex).toContain('a = 2');
    for (const prior of [{ uniform: {} }, { half_cauchy: { scale: 1 } }, { inverse_gamma: { shape: 2, scale: 0.2 } }]) {
      expect(() => tex(describePrior('site_sd', normalisePrior(prior)).tex)).not.toThrow();
    }
  });

  it('embeds only the KaTeX fonts the page uses, as data: URLs', () => {
    const css = katexCss(tex('\\theta_i = \\mathbf{x}_i^{\\top}\\boldsymbol{\\beta}', true));
    expect(css).not.toMatch(/url\((?!data:)/);
    expect(css).toContain('font-family: "KaTeX_Main"');
    expect(css).not.toContain('KaTeX_Fraktur-Regular');
  });
});

describe('templates', () => {
  it('quotes strings for CSS content without a way out of the <style> block', () => {
    expect(cssString('a "b" </style><b>')).toBe('"a \\22 b\\22  \\3c /style\\3e \\3c b\\3e "');
  });

  it('reports a broken office template as a one-line config error naming the file', async () => {
    const office = join(work, 'office-broken');
    mkdirSync(join(office, 'partials'), { recursive: true });
    writeFileSync(join(office, 'partials', 'cover.hbs'), '<h1>{{#if title}}{{title}}</h1>\n');
    const attempt = renderReport(fixture, { outDir: join(work, 'out-broken'), templateDir: office, pdf: false });
    await expect(attempt).rejects.toBeInstanceOf(UserError);
    await expect(attempt).rejects.toMatchObject({ kind: 'config' });
    await expect(attempt).rejects.toThrow(new RegExp(`^${join(office, 'partials', 'cover.hbs').replace(/[.*+?^${}()|[\]\\/]/g, '\\$&')}: template error: [^\\n]+$`));
  });

  it('warns and leaves the maps out when the boundary file is missing', async () => {
    const runDir = join(work, 'run-no-map');
    cpSync(fixture, runDir, { recursive: true });
    rmSync(join(runDir, 'districts.geojson'));
    const result = await renderReport(runDir, { outDir: join(work, 'out-no-map'), pdf: false });
    expect(result.warning).toMatch(/districts\.geojson: map file not found; the report has no maps$/);
    expect(result.geojson).toBeUndefined();
    expect(readFileSync(result.html, 'utf8')).not.toContain('class="chart map"');
  });

  it('honours the paper size and notes sites missing from the map', async () => {
    const map = JSON.parse(readFileSync(join(fixture, 'districts.geojson'), 'utf8'));
    map.features = map.features.filter((f: { properties: { district: string } }) => f.properties.district !== 'D12');
    const mapFile = join(work, 'without-d12.geojson');
    writeFileSync(mapFile, JSON.stringify(map));
    const result = await renderReport(fixture, { outDir: join(work, 'out-letter'), pdf: false, paper: 'Letter', mapFile });
    const html = readFileSync(result.html, 'utf8');
    expect(html).toContain('size: Letter;');
    expect(result.warning).toBe(`${mapFile}: 1 site(s) have no feature with district = their id (D12)`);
    expect(html).toContain('Sites without a boundary in the map file (not drawn): D12.');
  });
});

describe('browser discovery', () => {
  const none = () => false;
  it('prefers PUPPETEER_EXECUTABLE_PATH, then CHROME_PATH, then system paths', () => {
    const all = () => true;
    expect(findBrowser({ PUPPETEER_EXECUTABLE_PATH: '/x/chrome', CHROME_PATH: '/y/chrome', HOME: work }, all)).toBe('/x/chrome');
    expect(findBrowser({ CHROME_PATH: '/y/chrome', HOME: work }, all)).toBe('/y/chrome');
    expect(findBrowser({ HOME: work }, (p) => p === '/usr/bin/chromium-browser')).toBe('/usr/bin/chromium-browser');
    expect(findBrowser({ HOME: work }, none)).toBeUndefined();
  });

  it('finds a Chrome in the puppeteer download cache', () => {
    const home = join(work, 'home');
    const exe = join(home, '.cache', 'puppeteer', 'chrome', 'linux-131.0.1', 'chrome-linux64', 'chrome');
    mkdirSync(join(exe, '..'), { recursive: true });
    writeFileSync(exe, '');
    expect(findBrowser({ HOME: home }, (p) => p === exe)).toBe(exe);
  });
});
