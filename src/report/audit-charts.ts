/**
 * Charts of the auditor's checks as vector SVG (d3-scale for positions and ticks, d3-shape for
 * symbols): the frequentist cross-check (two scatter panels against the identity line), the
 * sampler certificate (a dot histogram of z values between the ±bound lines) and a normal
 * quantile plot of the standardized residuals.
 *
 * Charts take plain rows, so they can be tested without a run folder. Suppressed sites never
 * show their model estimate: they are left out of the point-estimate panel (the caller says so
 * in the caption) and drawn as a grey cross where only uncertainty or survey figures are plotted,
 * as in the report's other charts.
 */
import { scaleLinear, type ScaleLinear } from 'd3-scale';
import { symbol, symbolCross, symbolDiamond, symbolTriangle } from 'd3-shape';
import { normalQuantile } from './format.js';
import { PALETTE, axisBottom, axisLeft, el, num, svgRoot, text } from './svg.js';

const WIDTH = 680;
const ALARM = '#9e1b2c';
const OUTSIDE_TINT = '#eceaf1';

const symbolPath = (type: Parameters<typeof symbol>[0], size: number): string => symbol(type, size)() ?? '';
const finite = (v: number | null | undefined): v is number => v !== null && v !== undefined && Number.isFinite(v);

function legendItem(x: number, y: number, mark: string, label: string): string {
  return el('g', { transform: `translate(${num(x)} ${num(y)})` }, mark + text(10, 3.5, label, { class: 'legend' }));
}

/** A row of legend items [mark, label, width of the item]. */
function legendRow(x: number, y: number, items: Array<[string, string, number]>): string {
  let out = '';
  let at = 0;
  for (const [mark, label, width] of items) {
    out += legendItem(at, 0, mark, label);
    at += width;
  }
  return el('g', { transform: `translate(${num(x)} ${num(y)})` }, out);
}

const dot = (cx: number, cy: number, r = 2.6): string => el('circle', { cx, cy, r, fill: PALETTE.model, 'fill-opacity': 0.85 });
const openTriangle = (cx: number, cy: number): string =>
  el('path', { d: symbolPath(symbolTriangle, 30), transform: `translate(${num(cx)} ${num(cy)})`, fill: '#ffffff', stroke: PALETTE.model, 'stroke-width': 1 });
const greyCross = (cx: number, cy: number): string =>
  el('path', { d: symbolPath(symbolCross, 30), transform: `translate(${num(cx)} ${num(cy)}) rotate(45)`, fill: PALETTE.muted });
const diamond = (cx: number, cy: number): string =>
  el('path', { d: symbolPath(symbolDiamond, 40), transform: `translate(${num(cx)} ${num(cy)})`, fill: PALETTE.survey, stroke: '#ffffff', 'stroke-width': 0.5 });

/** Lower and upper end of the values, widened when they coincide. */
function span(values: number[], floorAtZero = false): [number, number] {
  let lo = values.length ? Math.min(...values) : 0;
  let hi = values.length ? Math.max(...values) : 1;
  if (floorAtZero) lo = 0;
  if (lo === hi) {
    lo = floorAtZero ? 0 : lo - 1;
    hi += 1;
  }
  return [lo, hi];
}

interface SquarePanel {
  x: ScaleLinear<number, number>;
  y: ScaleLinear<number, number>;
  svg: string;
}

/** A square scatter frame with equal scales on both axes and the identity line y = x. */
function squarePanel(left: number, top: number, size: number, domain: [number, number], labels: { x: string; y: string; title: string }): SquarePanel {
  const x = scaleLinear().domain(domain).nice(5).range([left, left + size]);
  const y = scaleLinear().domain(x.domain()).range([top + size, top]);
  let svg = labels.title ? text(left, top - 8, labels.title, { class: 'plot-title' }) : '';
  svg += axisLeft(y, { at: left, grid: [left, left + size], label: labels.y, labelOffset: 40, ticks: 5 });
  svg += axisBottom(x, { at: top + size, grid: [top, top + size], label: labels.x, labelOffset: 30, ticks: 5 });
  const [d0, d1] = x.domain();
  svg += el('line', { x1: x(d0), y1: y(d0), x2: x(d1), y2: y(d1), stroke: PALETTE.axis, 'stroke-width': 1, 'stroke-dasharray': '5 3' });
  return { x, y, svg };
}

export interface CrossCheckPoint {
  id: string;
  /** Frequentist estimate (EBLUP) and its root mean squared error. */
  eblup: number | null;
  rmse: number | null;
  /** Posterior mean and sd. */
  estimate: number;
  sd: number;
  /** The site has a direct estimate (otherwise both estimates are regression-synthetic). */
  sampled: boolean;
  suppressed: boolean;
}

/**
 * The frequentist cross-check as two square panels with the identity line: EBLUP against the
 * posterior mean (suppressed sites left out), and the EBLUP's root MSE against the posterior sd.
 * Points on the dashed line agree exactly; the panels stay readable for hundreds of sites.
 */
export function crossCheckChart(points: CrossCheckPoint[], opts: { unit: string }): string {
  const size = 232;
  const top = 44;
  const shown = points.filter((p) => finite(p.eblup) && finite(p.estimate));
  const estimates = shown.filter((p) => !p.suppressed);
  const uncertain = points.filter((p) => finite(p.rmse) && finite(p.sd));
  const unit = opts.unit ? ` (${opts.unit})` : '';

  const left = squarePanel(58, top, size, span(estimates.flatMap((p) => [p.eblup as number, p.estimate])), {
    x: `Posterior mean${unit}`, y: `Frequentist estimate (EBLUP)${unit}`, title: 'Point estimates',
  });
  const right = squarePanel(58 + size + 106, top, size, span(uncertain.flatMap((p) => [p.rmse as number, p.sd]), true), {
    x: `Posterior sd${unit}`, y: `Root MSE of the EBLUP${unit}`, title: 'Uncertainty',
  });
  let body = left.svg + right.svg;
  // Synthetic sites first, sampled on top; ties broken by id so the SVG is the same every time.
  const order = (a: CrossCheckPoint, b: CrossCheckPoint) => Number(a.sampled) - Number(b.sampled) || (a.id < b.id ? -1 : 1);
  for (const p of [...estimates].sort(order)) {
    const cx = left.x(p.estimate);
    const cy = left.y(p.eblup as number);
    body += p.sampled ? dot(cx, cy) : openTriangle(cx, cy);
  }
  for (const p of [...uncertain].sort(order)) {
    const cx = right.x(p.sd);
    const cy = right.y(p.rmse as number);
    body += p.suppressed ? greyCross(cx, cy) : p.sampled ? dot(cx, cy) : openTriangle(cx, cy);
  }
  // Legend: only the marks that occur, then the identity line.
  const items: Array<[string, string, number]> = [];
  if (uncertain.some((p) => p.sampled && !p.suppressed)) items.push([dot(0, 0), 'site with a sample', 120]);
  if (uncertain.some((p) => !p.sampled && !p.suppressed)) items.push([openTriangle(0, 0), 'no sample (both estimates synthetic)', 200]);
  if (uncertain.some((p) => p.suppressed)) items.push([greyCross(0, 0), 'suppressed (uncertainty only)', 170]);
  items.push([el('line', { x1: -7, x2: 6, y1: 0, y2: 0, stroke: PALETTE.axis, 'stroke-width': 1, 'stroke-dasharray': '5 3' }), 'identity line: the two fits agree', 0]);
  body += legendRow(14, 12, items);
  return svgRoot(WIDTH, top + size + 44, 'Frequentist estimates against the posterior, site by site', body);
}

export interface CertificatePoint {
  quantity: string;
  z: number;
  /** A model parameter (coefficient, spread) rather than a site value: drawn filled. */
  parameter: boolean;
}

/** Width of one bin of the dot histogram, in Monte Carlo standard errors. */
export const CERTIFICATE_BIN = 0.25;

const normalDensity = (z: number): number => Math.exp(-0.5 * z * z) / Math.sqrt(2 * Math.PI);

/**
 * The sampler certificate: one dot per quantity at its z = (Gibbs − exact) / MCSE, stacked in
 * bins of `CERTIFICATE_BIN`, with the ±bound lines and, for reference, the count expected in each
 * bin if the sampler is exact (m·width·φ(z), the z values then being close to standard normal).
 */
export function certificateChart(points: CertificatePoint[], opts: { bound: number | null }): string {
  const left = 40;
  const right = WIDTH - 20;
  const top = 30;
  const plotHeight = 110;
  const base = top + plotHeight;
  const zs = points.map((p) => p.z).filter(finite);
  const largest = zs.length ? Math.max(...zs.map(Math.abs)) : 0;
  const reach = Math.max(4, (opts.bound ?? 0) * 1.15, Math.min(largest * 1.05, 10));
  const x = scaleLinear().domain([-reach, reach]).nice().range([left, right]);
  const [lo, hi] = x.domain();
  const binIndex = (z: number) => Math.round(Math.min(hi, Math.max(lo, z)) / CERTIFICATE_BIN);
  const bins = new Map<number, CertificatePoint[]>();
  const ordered = points.filter((p) => finite(p.z)).sort((a, b) => Number(a.parameter) - Number(b.parameter) || (a.quantity < b.quantity ? -1 : 1));
  for (const p of ordered) {
    const k = binIndex(p.z);
    bins.set(k, [...(bins.get(k) ?? []), p]);
  }
  const tallest = Math.max(1, ...[...bins.values()].map((b) => b.length));
  const binPixels = x(CERTIFICATE_BIN) - x(0);
  const expectedPeak = zs.length * CERTIFICATE_BIN * normalDensity(0);
  const diameter = Math.min(binPixels * 0.92, plotHeight / Math.max(tallest, expectedPeak));

  let body = '';
  if (opts.bound !== null) {
    const b = opts.bound;
    body += el('rect', { x: left, y: top, width: Math.max(0, x(-b) - left), height: plotHeight, fill: OUTSIDE_TINT });
    body += el('rect', { x: x(b), y: top, width: Math.max(0, right - x(b)), height: plotHeight, fill: OUTSIDE_TINT });
  }
  body += axisBottom(x, { at: base, label: 'z = (Gibbs mean − exact mean) / Monte Carlo standard error', labelOffset: 30, ticks: 10 });
  if (opts.bound !== null) {
    for (const b of [-opts.bound, opts.bound]) {
      body += el('line', { x1: x(b), x2: x(b), y1: top - 4, y2: base, stroke: PALETTE.flag.suppress, 'stroke-width': 1.2, 'stroke-dasharray': '8 3' });
      body += text(x(b) + (b < 0 ? -4 : 4), top + 8, `${b < 0 ? '−' : '+'}${opts.bound.toFixed(2)}`, { class: 'legend', 'text-anchor': b < 0 ? 'end' : 'start' });
    }
  }
  // Expected count per bin under exact agreement, in dot heights.
  const steps = 160;
  let curve = '';
  for (let i = 0; i <= steps; i++) {
    const z = lo + ((hi - lo) * i) / steps;
    curve += `${i === 0 ? 'M' : 'L'}${num(x(z))},${num(base - zs.length * CERTIFICATE_BIN * normalDensity(z) * diameter)}`;
  }
  body += el('path', { d: curve, fill: 'none', stroke: PALETTE.muted, 'stroke-width': 1 });
  for (const [k, stack] of [...bins.entries()].sort((a, b) => a[0] - b[0])) {
    const cx = x(k * CERTIFICATE_BIN);
    stack.forEach((p, j) => {
      const cy = base - diameter * (j + 0.5);
      const outside = opts.bound !== null && Math.abs(p.z) > opts.bound;
      const colour = outside ? ALARM : PALETTE.model;
      body += p.parameter
        ? el('circle', { cx, cy, r: diameter * 0.42, fill: colour })
        : el('circle', { cx, cy, r: diameter * 0.38, fill: '#ffffff', stroke: colour, 'stroke-width': Math.min(1, diameter * 0.15) });
      if (outside) body += text(cx, cy - diameter * 0.6 - 2, p.quantity, { class: 'legend small', 'text-anchor': 'middle' });
    });
  }
  const r = Math.min(3, diameter * 0.42);
  let legend = legendItem(0, 0, el('circle', { cx: 0, cy: 0, r, fill: PALETTE.model }), 'model parameter');
  legend += legendItem(110, 0, el('circle', { cx: 0, cy: 0, r, fill: '#ffffff', stroke: PALETTE.model, 'stroke-width': 1 }), 'site value');
  legend += legendItem(190, 0, el('line', { x1: -7, x2: 6, y1: 0, y2: 0, stroke: PALETTE.muted, 'stroke-width': 1 }), 'expected if the sampler is exact');
  if (opts.bound !== null) {
    legend += legendItem(360, 0, el('line', { x1: -7, x2: 6, y1: 0, y2: 0, stroke: PALETTE.flag.suppress, 'stroke-width': 1.2, 'stroke-dasharray': '8 3' }), 'bound for all quantities together');
  }
  body += el('g', { transform: `translate(${left + 8} 10)` }, legend);
  return svgRoot(WIDTH, base + 40, 'Sampler certificate: z values of every quantity against the bound', body);
}

export interface ResidualPoint {
  id: string;
  residual: number;
  /** The direct estimate lies in the outer tail of its posterior predictive distribution. */
  extreme: boolean;
  suppressed: boolean;
}

/**
 * Plotting positions of a normal quantile plot, Φ⁻¹((i − 3/8)/(n + 1/4)) for i = 1…n
 * (Blom 1958, Statistical Estimates and Transformed Beta-Variables, ch. 12).
 */
export function normalScores(n: number): number[] {
  return Array.from({ length: n }, (_, i) => normalQuantile((i + 1 - 0.375) / (n + 0.25)));
}

/**
 * Normal quantile plot of the standardized residuals: sorted residuals against normal scores,
 * with the identity line (under the model the residuals are roughly standard normal). Sites whose
 * direct estimate is extreme under the model, and any residual beyond ±2, carry their site id.
 */
export function residualQqPlot(points: ResidualPoint[]): string {
  const size = 236;
  const left = 52;
  const top = 40;
  const width = 440;
  const sorted = points.filter((p) => finite(p.residual)).sort((a, b) => a.residual - b.residual || (a.id < b.id ? -1 : 1));
  const scores = normalScores(sorted.length);
  const reach = Math.max(2.5, ...sorted.map((p) => Math.abs(p.residual) * 1.05), ...scores.map((s) => Math.abs(s) * 1.05));
  const panel = squarePanel(left, top, size, [-reach, reach], { x: 'Normal score', y: 'Standardized residual', title: '' });
  let body = panel.svg;
  sorted.forEach((p, i) => {
    const cx = panel.x(scores[i]);
    const cy = panel.y(p.residual);
    body += p.suppressed ? greyCross(cx, cy) : p.extreme ? diamond(cx, cy) : dot(cx, cy, 2.4);
    if (p.extreme || Math.abs(p.residual) > 2) {
      const onLeft = p.residual > 0;
      body += text(cx + (onLeft ? -6 : 6), cy + 3, p.id, { class: 'legend small', 'text-anchor': onLeft ? 'end' : 'start' });
    }
  });
  const items: Array<[string, string, number]> = [[dot(0, 0, 2.4), 'site', 50]];
  if (sorted.some((p) => p.extreme && !p.suppressed)) items.push([diamond(0, 0), 'direct estimate extreme under the model', 206]);
  if (sorted.some((p) => p.suppressed)) items.push([greyCross(0, 0), 'suppressed site', 90]);
  items.push([el('line', { x1: -7, x2: 6, y1: 0, y2: 0, stroke: PALETTE.axis, 'stroke-width': 1, 'stroke-dasharray': '5 3' }), 'identity line', 0]);
  body += legendRow(left - 40, 12, items);
  return svgRoot(width, top + size + 42, 'Normal quantile plot of the standardized residuals', body, 'chart half');
}
