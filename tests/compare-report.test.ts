/**
 * The report's comparisons section: present only when the run folder has comparisons/, readable
 * at 40 sites and summarized beyond, suppressed sites withheld, stale or broken files caught.
 * Renders HTML only (no browser).
 */
import { cpSync, mkdtempSync, readFileSync, rmSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { fileURLToPath } from 'node:url';
import { parse } from 'csv-parse/sync';
import { afterAll, describe, expect, it } from 'vitest';
import { compareRuns, type CompareArguments } from '../src/cli/compare.js';
import { UserError } from '../src/errors.js';
import { COMPARE_PALETTE, heatClass, probabilityText, rankText } from '../src/report/compare-charts.js';
import { comparisonsView } from '../src/report/comparisons.js';
import { renderReport } from '../src/report/index.js';
import { readRunFolder } from '../src/report/read-run.js';
import { createRng } from '../src/sampler/rng.js';
import { normal } from '../src/sampler/variates.js';
import { writeSyntheticRun, type SyntheticSite } from './support/synthetic-run.js';

const root = fileURLToPath(new URL('..', import.meta.url));
const work = mkdtempSync(join(tmpdir(), 'shrinkwell-compare-report-'));
afterAll(() => rmSync(work, { recursive: true, force: true }));
let count = 0;

async function compare(dir: string, args: CompareArguments = {}): Promise<void> {
  await compareRuns([dir], args, ['shrinkwell', 'compare', dir], { out: () => {}, warn: () => {} });
}

/** A run of m sites with means spread over [0, spread] and sd 1. */
function spreadRun(m: number, spread: number, extra: { suppress?: number[]; caution?: number[]; converged?: boolean; compare?: Record<string, unknown> } = {}): string {
  const rng = createRng(900 + m, 0);
  const chains = 2;
  const per = 300;
  const sites: SyntheticSite[] = Array.from({ length: m }, (_, i) => ({
    id: `S${String(i + 1).padStart(2, '0')}`,
    label: `Place ${i + 1}`,
    flag: extra.suppress?.includes(i) ? 'suppress' : extra.caution?.includes(i) ? 'caution' : 'publish',
  }));
  const draws = sites.map((_, i) => Float32Array.from({ length: chains * per }, () => (spread * i) / Math.max(1, m - 1) + normal(rng)));
  return writeSyntheticRun(join(work, `run-${++count}`), { sites, draws, chains, drawsPerChain: per, converged: extra.converged, compare: extra.compare });
}

const section = (html: string): string => {
  const start = html.indexOf('<section class="comparisons">');
  return start < 0 ? '' : html.slice(start, html.indexOf('</section>', start));
};

describe('comparisons section', () => {
  it('is absent without a comparisons folder (the fixture report is unchanged)', async () => {
    const dir = join(work, `fixture-${++count}`);
    cpSync(join(root, 'tests', 'fixtures', 'run-area'), dir, { recursive: true });
    expect(comparisonsView(readRunFolder(dir))).toBeNull();
    const html = readFileSync((await renderReport(dir, { pdf: false })).html, 'utf8');
    expect(section(html)).toBe('');
  });

  it('12 sites: every rank row, a numbered heat map, suppressed site withheld, caution noted', async () => {
    const dir = spreadRun(12, 6, { suppress: [4], caution: [7] });
    await compare(dir, { above: '3', top: '3' });
    const html = section(readFileSync((await renderReport(dir, { pdf: false })).html, 'utf8'));
    expect(html).toContain('Comparing sites');
    expect(html).toContain('P(top 3)');
    expect(html).toContain('P(&gt; 3.00 units)');
    const figures = html.split('<figure').slice(1);
    expect(figures).toHaveLength(2); // one rank panel, one heat map
    const [ranks, heat] = figures;
    for (let i = 1; i <= 12; i++) {
      const id = `S${String(i).padStart(2, '0')}`;
      const shown = i !== 5;
      expect(ranks.includes(`>${id}<`)).toBe(shown);
      expect(heat.includes(`>${id}<`)).toBe(shown);
    }
    expect(html).toMatch(/their own ranks and comparisons are withheld here:\s*S05 Place 5\./);
    expect(ranks).toContain('>caution<');
    expect(heat).toContain('numbers: percent');
    expect(html).not.toContain('provisional');
  });

  it('lower is better: the heat map shows P(row ranks ahead), a clear order fills the upper triangle', async () => {
    const dir = spreadRun(12, 200, { compare: { lower_is_better: true } });
    await compare(dir);
    const html = section(readFileSync((await renderReport(dir, { pdf: false })).html, 'utf8'));
    expect(html).toContain('Rank 1 is the site with the lowest value (lower is better)');
    const heat = html.split('<figure').slice(1)[1];
    const darkest = heat.split(`fill="${COMPARE_PALETTE.heat[6]}"`).length - 1;
    const lightest = heat.split(`fill="${COMPARE_PALETTE.heat[0]}"`).length - 1;
    // 66 cells each (12·11/2) plus one legend swatch each: sites 200 sds apart are ordered for certain.
    expect([darkest, lightest]).toEqual([67, 67]);
    // Ordered best (lowest) first, cells row by row: brown (row ahead) above the diagonal.
    expect(heat.indexOf('>S01<')).toBeLessThan(heat.indexOf('>S02<'));
    const fills = [...heat.matchAll(/<rect [^>]*fill="(#[0-9a-f]{6})"/g)].map((m) => m[1]).slice(0, 144);
    for (let r = 0; r < 12; r++) {
      for (let c = 0; c < 12; c++) {
        expect(fills[r * 12 + c]).toBe(r === c ? '#ffffff' : c > r ? COMPARE_PALETTE.heat[6] : COMPARE_PALETTE.heat[0]);
      }
    }
  });

  it('85 sites: top and bottom 20 listed, every site in the overview band, heat map of 40, histogram of all pairs', async () => {
    const dir = spreadRun(85, 8, { suppress: [0] });
    await compare(dir, { top: '10' });
    const run = readRunFolder(dir);
    const view = comparisonsView(run)!;
    expect(view.rankSummarized).toBe(true);
    expect(view.rankCharts).toHaveLength(2);
    expect(view.overview).not.toBeNull();
    expect(view.heatmapSummarized).toBe(true);
    // The count of clearly ordered pairs, straight from pairwise.csv (84 shown sites: 3486 pairs).
    const pairs = parse(readFileSync(join(dir, 'comparisons', 'pairwise.csv'), 'utf8'), { columns: true }) as Array<Record<string, string>>;
    let clear = 0;
    let total = 0;
    for (const p of pairs) {
      if (p.site_a === 'S01' || p.site_b === 'S01' || p.site_a >= p.site_b) continue;
      total++;
      const q = Number(p.p_a_greater);
      if (Math.max(q, 1 - q) >= 0.95) clear++;
    }
    expect(total).toBe((84 * 83) / 2);
    expect(view.clearPairs).toEqual({ count: String(clear).replace(/\B(?=(\d{3})+(?!\d))/g, '\u2009'), total: '3\u2009486', share: `${Math.round((100 * clear) / total)}%` });
    const html = section(readFileSync((await renderReport(dir, { pdf: false })).html, 'utf8'));
    expect(html.split('<figure')).toHaveLength(1 + 5); // 2 rank panels, overview, heat map, histogram
    expect(html).toContain('The 20 sites with the best median rank');
    expect(html).toContain('aria-label="Rank intervals of all sites"');
    expect(html).toContain('aria-label="How clearly the pairs of sites are ordered"');
    const heat = html.split('<figure')[4];
    expect(heat.split('class="row-id"').length - 1).toBe(2 * 40); // 40 row and 40 column labels
  });

  it('listed pairs become a table; pairs with a suppressed site are withheld', async () => {
    const dir = spreadRun(6, 3, { suppress: [2] });
    await compare(dir, { pairs: ['S01:S02,S03:S04,S06:S01'] });
    const html = section(readFileSync((await renderReport(dir, { pdf: false })).html, 'utf8'));
    expect(html).toContain('Pairs compared');
    expect(html).toMatch(/<td>S01 Place 1<\/td><td>S02 Place 2<\/td>/);
    expect(html).toMatch(/<td>S06 Place 6<\/td><td>S01 Place 1<\/td>/);
    expect(html).not.toMatch(/<td>S03 /);
    expect(html).toContain('1 pair(s) involving a suppressed site are not shown.');
  });

  it('a run that failed its gate is marked provisional', async () => {
    const dir = spreadRun(5, 2, { converged: false });
    await compare(dir);
    const html = section(readFileSync((await renderReport(dir, { pdf: false })).html, 'utf8'));
    expect(html).toContain('(provisional, not converged)');
    expect(html).toContain('these comparisons are provisional and not for publication');
  });

  it('comparisons made from other draws are not shown, and the section says why', async () => {
    const dir = spreadRun(5, 2);
    await compare(dir);
    const path = join(dir, 'draws.bin');
    const bytes = readFileSync(path);
    bytes.writeFloatLE(bytes.readFloatLE(bytes.length - 4) + 1, bytes.length - 4);
    writeFileSync(path, bytes);
    const html = section(readFileSync((await renderReport(dir, { pdf: false })).html, 'utf8'));
    expect(html).toContain('were made from other draws than this run');
    expect(html).not.toContain('<figure');
  });

  it('broken comparison files are one-line run-folder errors naming file, line and column', async () => {
    const dir = spreadRun(5, 2);
    await compare(dir);
    const settingsPath = join(dir, 'comparisons', 'settings.json');
    const ranksPath = join(dir, 'comparisons', 'ranks.csv');
    const settings = readFileSync(settingsPath, 'utf8');
    const ranks = readFileSync(ranksPath, 'utf8');
    const expectError = (pattern: RegExp) => {
      let error: unknown;
      try {
        comparisonsView(readRunFolder(dir));
      } catch (e) {
        error = e;
      }
      expect(error).toBeInstanceOf(UserError);
      expect((error as UserError).kind).toBe('runFolder');
      expect((error as UserError).message).toMatch(pattern);
      expect((error as UserError).message).not.toContain('\n');
    };
    writeFileSync(settingsPath, settings.replace('"format_version": 1', '"format_version": 2'));
    expectError(/comparisons\/settings\.json: format_version 2 is not supported \(this version reads 1\); rerun shrinkwell compare$/);
    writeFileSync(settingsPath, '{ not json');
    expectError(/comparisons\/settings\.json: not valid JSON/);
    writeFileSync(settingsPath, settings);
    const lines = ranks.split('\n');
    lines[3] = lines[3].replace(/^([^,]*,[^,]*,[^,]*,[^,]*,)[^,]*/, '$1many');
    writeFileSync(ranksPath, lines.join('\n'));
    expectError(/comparisons\/ranks\.csv: line 4, column rank_mean: "many" is not a number$/);
    rmSync(ranksPath);
    expectError(/comparisons\/ranks\.csv: missing \(rerun shrinkwell compare\)$/);
  });
});

describe('chart helpers', () => {
  it('probabilities print as whole percentages without a false 0% or 100%', () => {
    expect([0, 0.004, 0.005, 0.5, 0.994, 0.995, 1].map(probabilityText)).toEqual(['<1%', '<1%', '1%', '50%', '99%', '>99%', '>99%']);
    expect([probabilityText(null), probabilityText(Number.NaN)]).toEqual(['—', '—']);
    expect([rankText(3), rankText(2.5)]).toEqual(['3', '2.5']);
  });

  it('heat-map classes split at 5, 20, 40, 60, 80 and 95 percent', () => {
    expect([0, 0.0499, 0.05, 0.2, 0.39, 0.5, 0.6, 0.8, 0.9499, 0.95, 1].map(heatClass)).toEqual([0, 0, 1, 2, 2, 3, 4, 5, 5, 6, 6]);
  });
});
