/**
 * Charts of the comparisons section, as SVG strings (d3-scale for positions, d3-shape for the
 * overview band): rank intervals per site, an overview band of every site's rank interval, the
 * pairwise-probability heat map and a histogram of how clearly pairs are ordered.
 *
 * Grey print and colour-blind readers: the heat map's diverging classes run from a blue-green
 * (row behind) through near-white (a coin toss) to a brown (row ahead), with lightness falling
 * away from the middle; the two decisive classes also carry a mark (filled dot: row ahead with
 * probability ≥ 95%; open ring: ≤ 5%), so the picture reads without colour.
 */
import { scaleBand, scaleLinear, scaleThreshold } from 'd3-scale';
import { area, curveStepAfter, line } from 'd3-shape';
import { PALETTE, axisBottom, axisLeft, clip, el, num, svgRoot, text } from './svg.js';

const WIDTH = 680;

/** One site's rank summary as the charts need it. */
export interface RankRow {
  id: string;
  label: string;
  median: number;
  lower: number;
  upper: number;
  mean: number;
  /** P(rank ≤ k). */
  pTop: number;
  /** P(θ > target), or null without a target. */
  pAbove: number | null;
  /** A caution flag is noted beside the row. */
  caution: boolean;
}

/** Probability as a whole percentage; the ends say "<1%" / ">99%" rather than a false 0 or 100. */
export function probabilityText(p: number | null): string {
  if (p === null || !Number.isFinite(p)) return '—';
  if (p < 0.005) return '<1%';
  if (p >= 0.995) return '>99%';
  return `${Math.round(p * 100)}%`;
}

/** Rank as printed: whole, or with ".5" for an averaged tie. */
export function rankText(rank: number): string {
  return Number.isInteger(rank) ? String(rank) : rank.toFixed(1);
}

/** Rows ordered best first: by median rank, then mean rank, then id. */
export function byRank(a: RankRow, b: RankRow): number {
  return a.median - b.median || a.mean - b.mean || (a.id < b.id ? -1 : a.id > b.id ? 1 : 0);
}

/** Most rows per rank panel, so a panel fits on a page. */
export const RANK_ROWS_PER_PANEL = 45;

/** Colours of the comparison charts (our own). */
export const COMPARE_PALETTE = {
  /** Rank interval bar and median mark. */
  intervalBar: '#b7c4d1',
  median: PALETTE.model,
  /** Shaded zones of the top k and bottom k ranks. */
  zone: '#efede6',
  /** Heat map classes, P(row ahead): <5%, 5–20%, 20–40%, 40–60%, 60–80%, 80–95%, ≥95%. */
  heat: ['#1d5a6e', '#5b93a6', '#b4d1da', '#f5f3ed', '#e9c39c', '#c07f45', '#6f3b12'],
  histogram: '#8fa3b6',
  histogramClear: '#23374d',
} as const;

/** Class boundaries of the heat map. */
export const HEAT_THRESHOLDS = [0.05, 0.2, 0.4, 0.6, 0.8, 0.95] as const;
const HEAT_LABELS = ['<5%', '5–20%', '20–40%', '40–60%', '60–80%', '80–95%', '≥95%'];

export interface RankChartOptions {
  /** Number of sites ranked (the rank axis runs 1..sites). */
  sites: number;
  top: number;
  /** Column heading for P(θ > target), e.g. "P(> 2.5 t/ha)"; null without a target. */
  targetHeading: string | null;
  /** Accessible title of the chart. */
  title: string;
  /** The interval's probability as printed, e.g. "95%". */
  level: string;
  /** Heading printed above the rows (e.g. "Top 20"); none when omitted. */
  heading?: string;
}

/**
 * Rank intervals: one row per site (in the order given), the equal-tailed rank interval as a pale
 * bar with the median rank as a dark mark, the top-k and bottom-k ranks shaded, and the figures
 * printed on the right: median rank (interval), P(top k) and P(θ > target).
 * Split into panels of at most `RANK_ROWS_PER_PANEL` rows that share the rank axis.
 */
export function rankChart(rows: readonly RankRow[], opts: RankChartOptions): string[] {
  const left = 150;
  const plotRight = 430;
  const rowHeight = 13;
  const top = opts.heading ? 46 : 34;
  const x = scaleLinear().domain([0.5, opts.sites + 0.5]).range([left, plotRight]);
  const ticks = rankTicks(opts.sites);
  const columns = { caution: 434, rank: 506, pTop: 592, pAbove: 668 };
  const panels: string[] = [];
  for (let start = 0; start < rows.length || start === 0; start += RANK_ROWS_PER_PANEL) {
    const chunk = rows.slice(start, start + RANK_ROWS_PER_PANEL);
    const plotBottom = top + Math.max(chunk.length, 1) * rowHeight;
    const height = plotBottom + 42;
    let body = '';
    if (opts.heading) body += text(6, 14, opts.heading, { class: 'plot-title' });
    // Zones: top k and bottom k ranks.
    const zone = (from: number, to: number, label: string) =>
      el('rect', { x: x(from - 0.5), y: top - 4, width: Math.max(0.5, x(to + 0.5) - x(from - 0.5)), height: plotBottom - top + 8, fill: COMPARE_PALETTE.zone }) +
      text((x(from - 0.5) + x(to + 0.5)) / 2, top - 7, label, { class: 'legend small', 'text-anchor': 'middle' });
    body += zone(1, opts.top, `top ${opts.top}`);
    if (opts.sites - opts.top + 1 > opts.top) body += zone(opts.sites - opts.top + 1, opts.sites, `bottom ${opts.top}`);
    for (const t of ticks) body += el('line', { x1: x(t), x2: x(t), y1: top - 4, y2: plotBottom + 4, stroke: PALETTE.grid, 'stroke-width': 0.6 });
    body += el('line', { x1: left, x2: plotRight, y1: plotBottom + 4, y2: plotBottom + 4, stroke: PALETTE.axis, 'stroke-width': 0.8 });
    for (const t of ticks) {
      body += el('line', { x1: x(t), x2: x(t), y1: plotBottom + 4, y2: plotBottom + 8, stroke: PALETTE.axis, 'stroke-width': 0.8 });
      body += text(x(t), plotBottom + 17, String(t), { class: 'tick', 'text-anchor': 'middle' });
    }
    body += text((left + plotRight) / 2, plotBottom + 34, `Rank (1 = best of ${opts.sites}); bar: ${opts.level} interval, mark: median rank`, { class: 'axis-label', 'text-anchor': 'middle' });
    // Column headings.
    body += text(columns.rank, top - 7, 'Rank (interval)', { class: 'legend small', 'text-anchor': 'middle' });
    body += text(columns.pTop, top - 7, `P(top ${opts.top})`, { class: 'legend small', 'text-anchor': 'end' });
    if (opts.targetHeading) body += text(columns.pAbove, top - 7, opts.targetHeading, { class: 'legend small', 'text-anchor': 'end' });
    chunk.forEach((row, i) => {
      const y = top + i * rowHeight + rowHeight / 2;
      if (i % 2 === 1) body += el('rect', { x: 4, y: y - rowHeight / 2, width: WIDTH - 8, height: rowHeight, fill: '#f6f5f1', 'fill-opacity': 0.7 });
      body += text(6, y + 3.5, clip(row.id, 6), { class: 'row-id' });
      body += text(44, y + 3.5, clip(row.label, 18), { class: 'row-label' });
      const x0 = x(row.lower - 0.4);
      const x1 = x(row.upper + 0.4);
      body += el('rect', { x: x0, y: y - 2.5, width: Math.max(1, x1 - x0), height: 5, fill: COMPARE_PALETTE.intervalBar });
      body += el('rect', { x: x(row.median) - 1.2, y: y - 4.5, width: 2.4, height: 9, fill: COMPARE_PALETTE.median });
      body += text(columns.rank, y + 3.5, `${rankText(row.median)} (${rankText(row.lower)}–${rankText(row.upper)})`, { class: 'row-n', 'text-anchor': 'middle' });
      body += text(columns.pTop, y + 3.5, probabilityText(row.pTop), { class: 'row-n', 'text-anchor': 'end' });
      if (opts.targetHeading) body += text(columns.pAbove, y + 3.5, probabilityText(row.pAbove), { class: 'row-n', 'text-anchor': 'end' });
      if (row.caution) body += text(columns.caution, y + 3.5, 'caution', { class: 'row-note' });
    });
    const panel = rows.length > RANK_ROWS_PER_PANEL ? `, panel ${start / RANK_ROWS_PER_PANEL + 1}` : '';
    panels.push(svgRoot(WIDTH, height, `${opts.title}${panel}`, body));
    if (rows.length === 0) break;
  }
  return panels;
}

/** Whole-number rank ticks, always including 1 and the last rank. */
function rankTicks(sites: number): number[] {
  const inner = scaleLinear().domain([1, sites]).ticks(Math.min(10, sites)).filter((t) => Number.isInteger(t) && t > 1 && t < sites);
  const ticks = [1, ...inner, sites];
  // Drop inner ticks that would crowd the last one.
  const minGap = Math.max(1, sites / 14);
  return ticks.filter((t, i) => i === ticks.length - 1 || i === 0 || ticks[ticks.length - 1] - t >= minGap);
}

/**
 * Every site's rank interval at once, for runs with too many sites to label: sites along the
 * bottom in order of median rank, the band between the interval ends, the median as a line.
 * A narrow band means a site's place is well determined.
 */
export function rankOverviewChart(rows: readonly RankRow[], opts: { sites: number; title: string }): string {
  const height = 240;
  const left = 56;
  const right = 20;
  const top = 22;
  const bottom = 192;
  const count = rows.length;
  const x = scaleLinear().domain([0, Math.max(count, 1)]).range([left, WIDTH - right]);
  const y = scaleLinear().domain([1, opts.sites]).range([top, bottom]);
  const positions = rows.map((r, i) => ({ ...r, at: i }));
  const band = area<(typeof positions)[number]>()
    .x((d) => x(d.at))
    .y0((d) => y(d.lower))
    .y1((d) => y(d.upper))
    .curve(curveStepAfter);
  const medianLine = line<(typeof positions)[number]>()
    .x((d) => x(d.at))
    .y((d) => y(d.median))
    .curve(curveStepAfter);
  // Close the last step: repeat the last row one position further.
  const closed = count > 0 ? [...positions, { ...positions[count - 1], at: count }] : positions;
  let body = axisLeft(y, { at: left, grid: [left, WIDTH - right], label: 'Rank (1 = best)', labelOffset: 40, ticks: 6, format: (v) => String(v) });
  body += axisBottom(x, { at: bottom + 4, label: `Sites in order of median rank (${count})`, labelOffset: 32, ticks: 8, format: (v) => String(v) });
  body += el('path', { d: band(closed) ?? '', fill: COMPARE_PALETTE.intervalBar, stroke: 'none' });
  body += el('path', { d: medianLine(closed) ?? '', fill: 'none', stroke: COMPARE_PALETTE.median, 'stroke-width': 1.2 });
  body += el('rect', { x: left + 10, y: 6, width: 16, height: 8, fill: COMPARE_PALETTE.intervalBar });
  body += text(left + 30, 13, 'rank interval', { class: 'legend' });
  body += el('line', { x1: left + 110, x2: left + 126, y1: 10, y2: 10, stroke: COMPARE_PALETTE.median, 'stroke-width': 1.2 });
  body += text(left + 130, 13, 'median rank', { class: 'legend' });
  return svgRoot(WIDTH, height, opts.title, body);
}

/** The heat map's class of a probability (index into COMPARE_PALETTE.heat). */
export function heatClass(p: number): number {
  return scaleThreshold<number, number>().domain([...HEAT_THRESHOLDS]).range([0, 1, 2, 3, 4, 5, 6])(p);
}

export interface HeatmapOptions {
  title: string;
  /** Print the percentage in each cell (readable up to about 20 sites). */
  numbers?: boolean;
  /** Optional gap after this many rows/columns (e.g. between a top and a bottom group). */
  splitAfter?: number;
}

/**
 * Pairwise heat map: cell (row r, column c) coloured by P(site r ranks ahead of site c), sites in
 * the order given (best first) on both axes, so a clear ordering shows as dark brown above the
 * diagonal and dark blue-green below it.
 */
export function pairwiseHeatmap(ids: readonly string[], ahead: (row: number, column: number) => number, opts: HeatmapOptions): string {
  const n = ids.length;
  const left = 50;
  const top = 58;
  const gap = opts.splitAfter !== undefined && opts.splitAfter > 0 && opts.splitAfter < n ? 6 : 0;
  const cell = Math.max(6, Math.min(22, Math.floor((WIDTH - left - 16 - gap) / Math.max(n, 1))));
  const band = scaleBand<number>().domain(ids.map((_, i) => i)).range([0, cell * n]);
  const pos = (i: number) => (band(i) ?? 0) + (gap && i >= (opts.splitAfter as number) ? gap : 0);
  const size = cell * n + gap;
  const legendTop = top + size + 18;
  const height = legendTop + 46;
  const fontSize = Math.min(8, Math.max(5, cell * 0.42));
  let body = '';
  for (let r = 0; r < n; r++) {
    body += text(left - 4, top + pos(r) + cell / 2 + fontSize * 0.35, clip(ids[r], 7), { class: 'row-id', 'text-anchor': 'end', 'font-size': num(fontSize) });
    const cx = left + pos(r) + cell / 2;
    body += text(cx, top - 4, clip(ids[r], 7), { class: 'row-id', 'font-size': num(fontSize), transform: `rotate(-60 ${num(cx)} ${num(top - 4)})` });
  }
  for (let r = 0; r < n; r++) {
    for (let c = 0; c < n; c++) {
      const x0 = left + pos(c);
      const y0 = top + pos(r);
      if (r === c) {
        body += el('rect', { x: x0, y: y0, width: cell, height: cell, fill: '#ffffff', stroke: PALETTE.grid, 'stroke-width': 0.4 });
        continue;
      }
      const p = ahead(r, c);
      const k = heatClass(p);
      body += el('rect', { x: x0, y: y0, width: cell, height: cell, fill: COMPARE_PALETTE.heat[k], stroke: '#ffffff', 'stroke-width': 0.4 });
      const dark = k <= 1 || k >= 5;
      if (opts.numbers) {
        body += text(x0 + cell / 2, y0 + cell / 2 + fontSize * 0.35, probabilityText(p).replace('%', ''), {
          'text-anchor': 'middle', 'font-size': num(fontSize * 0.95), fill: dark ? '#ffffff' : PALETTE.ink,
        });
      } else if (k === 6) {
        body += el('circle', { cx: x0 + cell / 2, cy: y0 + cell / 2, r: Math.max(1, cell * 0.16), fill: '#ffffff' });
      } else if (k === 0) {
        body += el('circle', { cx: x0 + cell / 2, cy: y0 + cell / 2, r: Math.max(1, cell * 0.16), fill: 'none', stroke: '#ffffff', 'stroke-width': 0.8 });
      }
    }
  }
  // Legend: the seven classes, with the marks of the decisive ones.
  let legend = text(0, -4, 'P(row site ranks ahead of column site)', { class: 'legend' });
  const swatch = 40;
  COMPARE_PALETTE.heat.forEach((colour, k) => {
    const lx = k * (swatch + 4);
    legend += el('rect', { x: lx, y: 2, width: swatch, height: 10, fill: colour, stroke: PALETTE.grid, 'stroke-width': 0.4 });
    if (!opts.numbers && k === 6) legend += el('circle', { cx: lx + swatch / 2, cy: 7, r: 2, fill: '#ffffff' });
    if (!opts.numbers && k === 0) legend += el('circle', { cx: lx + swatch / 2, cy: 7, r: 2, fill: 'none', stroke: '#ffffff', 'stroke-width': 0.8 });
    legend += text(lx + swatch / 2, 22, HEAT_LABELS[k], { class: 'legend small', 'text-anchor': 'middle' });
  });
  const note = opts.numbers ? 'numbers: percent' : 'dot: ahead with ≥ 95%; ring: ≤ 5%';
  legend += text(7 * (swatch + 4) + 6, 10, note, { class: 'legend small' });
  body += el('g', { transform: `translate(${left} ${legendTop})` }, legend);
  return svgRoot(WIDTH, height, opts.title, body);
}

/**
 * How clearly pairs are ordered: histogram of max(P, 1 − P) over all pairs, from 0.5 (a coin
 * toss) to 1 (certain), in bins of 0.05; the last bin (≥ 0.95) is drawn dark.
 */
export function pairOrderHistogram(clearness: readonly number[], opts: { title: string }): string {
  const height = 210;
  const left = 56;
  const right = 20;
  const top = 16;
  const bottom = 164;
  const bins = new Array<number>(10).fill(0);
  for (const v of clearness) bins[Math.min(9, Math.max(0, Math.floor((v - 0.5) / 0.05 + 1e-9)))]++;
  const x = scaleLinear().domain([0.5, 1]).range([left, WIDTH - right]);
  const y = scaleLinear().domain([0, Math.max(1, ...bins)]).nice().range([bottom, top]);
  let body = axisLeft(y, { at: left, grid: [left, WIDTH - right], label: 'Pairs', labelOffset: 42, ticks: 5, format: (v) => (Number.isInteger(v) ? String(v) : '') });
  body += axisBottom(x, { at: bottom, label: 'Probability of the more likely order of the pair', labelOffset: 32, ticks: 10, format: (v) => `${Math.round(v * 100)}%` });
  bins.forEach((count, i) => {
    const x0 = x(0.5 + i * 0.05) + 1;
    const x1 = x(0.5 + (i + 1) * 0.05) - 1;
    body += el('rect', { x: x0, y: y(count), width: x1 - x0, height: bottom - y(count), fill: i === 9 ? COMPARE_PALETTE.histogramClear : COMPARE_PALETTE.histogram });
  });
  return svgRoot(WIDTH, height, opts.title, body);
}
