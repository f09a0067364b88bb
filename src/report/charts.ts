/**
 * The report's site charts as vector SVG strings, built on d3-scale (positions, ticks) and
 * d3-shape (symbols): intervals per site, the shrinkage plot and the CV plot.
 *
 * Charts take plain `ChartSite` rows, so they can be tested without a run folder.
 */
import { scaleLinear, scaleSqrt, scaleQuantize } from 'd3-scale';
import { symbol, symbolTriangle, symbolCross } from 'd3-shape';
import type { Flag } from './read-run.js';
import { HATCH, PALETTE, axisBottom, axisLeft, clip, el, hatchedShape, num, rectPath, svgRoot, text } from './svg.js';

export interface ChartSite {
  id: string;
  label: string;
  n: number;
  direct: number | null;
  /** Survey interval at the report's level: direct ± z·se, or the run's own (counts: Wilson). */
  directLower: number | null;
  directUpper: number | null;
  directCv: number | null;
  estimate: number;
  lower: number;
  upper: number;
  cv: number | null;
  weight: number | null;
  flag: Flag;
}

const WIDTH = 680;

const finite = (values: Array<number | null>): number[] => values.filter((v): v is number => v !== null && Number.isFinite(v));

function extent(values: number[]): [number, number] {
  let lo = Math.min(...values);
  let hi = Math.max(...values);
  if (!Number.isFinite(lo) || !Number.isFinite(hi)) return [0, 1];
  if (lo === hi) {
    lo -= 1;
    hi += 1;
  }
  return [lo, hi];
}

const symbolPath = (type: Parameters<typeof symbol>[0], size: number): string => symbol(type, size)() ?? '';

function legendItem(x: number, y: number, mark: string, label: string): string {
  return el('g', { transform: `translate(${num(x)} ${num(y)})` }, mark + text(14, 4, label, { class: 'legend' }));
}

/** Most sites per intervals panel, so one panel fits on a page. */
export const SITES_PER_PANEL = 45;

/**
 * (a) Survey interval and model interval for every site, sorted by the model estimate; split into
 * panels of at most `SITES_PER_PANEL` sites that share one value axis.
 */
export function intervalsChart(sites: ChartSite[], opts: { unit: string; level: string; prefix?: string; survey?: string }): string[] {
  const sorted = [...sites].sort((a, b) => a.estimate - b.estimate || (a.id < b.id ? -1 : 1));
  const domain = extent(finite(sorted.flatMap((s) => [s.lower, s.upper, s.directLower, s.directUpper])));
  const left = 168;
  const right = 112;
  const x = scaleLinear().domain(domain).nice().range([left, WIDTH - right]);
  const rowHeight = 13;
  const top = 34;
  const panels: string[] = [];
  for (let start = 0; start < sorted.length; start += SITES_PER_PANEL) {
    const chunk = sorted.slice(start, start + SITES_PER_PANEL);
    const plotBottom = top + chunk.length * rowHeight;
    const height = plotBottom + 40;
    const id = `${opts.prefix ?? 'iv'}${start / SITES_PER_PANEL}`;
    let body = axisBottom(x, { at: plotBottom + 4, grid: [top - 4, plotBottom + 4], label: `${opts.level} interval (${opts.unit})`, labelOffset: 32 });
    chunk.forEach((site, i) => {
      const y = top + i * rowHeight + rowHeight / 2;
      if (i % 2 === 1) body += el('rect', { x: 4, y: y - rowHeight / 2, width: WIDTH - 8, height: rowHeight, fill: '#f6f5f1' });
      const suppressed = site.flag === 'suppress';
      body += text(6, y + 3.5, site.id, { class: 'row-id' });
      body += text(40, y + 3.5, clip(site.label, 21), { class: suppressed ? 'row-label muted' : 'row-label' });
      // Survey: a thick pale bar with an open circle.
      if (site.direct !== null && site.directLower !== null && site.directUpper !== null) {
        body += el('line', { x1: x(site.directLower), x2: x(site.directUpper), y1: y - 2.5, y2: y - 2.5, stroke: PALETTE.surveyBar, 'stroke-width': 4 });
        body += el('circle', { cx: x(site.direct), cy: y - 2.5, r: 2.6, fill: '#ffffff', stroke: PALETTE.survey, 'stroke-width': 1.2 });
      }
      // Model: a thin dark line with a filled dot; suppressed sites get a hatched bar, no dot.
      if (suppressed) {
        const x0 = x(site.lower);
        const x1 = Math.max(x0 + 1, x(site.upper));
        body += hatchedShape(`${id}-s${start + i}`, rectPath(x0, y + 0.5, x1 - x0, 4), [x0, y + 0.5, x1, y + 4.5], HATCH.suppressed, { stroke: PALETTE.muted, width: 0.5 });
      } else {
        body += el('line', { x1: x(site.lower), x2: x(site.upper), y1: y + 2.5, y2: y + 2.5, stroke: PALETTE.model, 'stroke-width': 1.4 });
        body += el('circle', { cx: x(site.estimate), cy: y + 2.5, r: 2.4, fill: PALETTE.model });
      }
      const notes = [site.n === 0 ? 'synthetic' : '', suppressed ? 'suppressed' : ''].filter(Boolean).join(', ');
      body += text(WIDTH - right + 6, y + 3.5, site.n === 0 ? 'n 0' : `n ${site.n}`, { class: 'row-n' });
      if (notes) body += text(WIDTH - right + 30, y + 3.5, notes, { class: 'row-note' });
    });
    body += legendItem(12, 12,
      el('line', { x1: -6, x2: 8, y1: 0, y2: 0, stroke: PALETTE.surveyBar, 'stroke-width': 4 }) + el('circle', { cx: 1, cy: 0, r: 2.6, fill: '#fff', stroke: PALETTE.survey, 'stroke-width': 1.2 }),
      `${opts.survey ?? 'Survey mean'} and its interval`);
    body += legendItem(200, 12,
      el('line', { x1: -6, x2: 8, y1: 0, y2: 0, stroke: PALETTE.model, 'stroke-width': 1.4 }) + el('circle', { cx: 1, cy: 0, r: 2.4, fill: PALETTE.model }),
      'Model estimate and its credible interval');
    body += legendItem(430, 12,
      hatchedShape(`${id}-legend`, rectPath(-6, -2, 14, 4), [-6, -2, 8, 2], HATCH.suppressed, { stroke: PALETTE.muted, width: 0.5 }),
      'Suppressed (interval only)');
    panels.push(svgRoot(WIDTH, height, `Survey and model intervals per site, panel ${start / SITES_PER_PANEL + 1}`, body));
  }
  return panels;
}

/**
 * (b) Shrinkage plot: each sampled site's survey mean (top axis) joined to its model estimate
 * (bottom axis); the line's darkness is the weight on the site's own data.
 */
export function shrinkageChart(sites: ChartSite[], opts: { unit: string; prefix?: string; survey?: string }): string {
  const height = 250;
  const left = 20;
  const right = 20;
  const topY = 56;
  const bottomY = 176;
  const domain = extent(finite(sites.flatMap((s) => [s.direct, s.estimate])));
  const x = scaleLinear().domain(domain).nice().range([left + 90, WIDTH - right]);
  const weightClass = scaleQuantize<string>().domain([0, 1]).range([...PALETTE.weightRamp]);
  let body = text(left, topY + 4, opts.survey ?? 'Survey mean', { class: 'axis-label' });
  body += text(left, bottomY + 4, 'Model estimate', { class: 'axis-label' });
  body += el('line', { x1: x.range()[0], x2: x.range()[1], y1: topY, y2: topY, stroke: PALETTE.axis, 'stroke-width': 0.8 });
  body += axisBottom(x, { at: bottomY, label: opts.unit, labelOffset: 30 });
  // Heaviest weight drawn last so the clearest lines stay on top.
  const sampled = sites.filter((s) => s.direct !== null).sort((a, b) => (a.weight ?? 0) - (b.weight ?? 0) || (a.id < b.id ? -1 : 1));
  for (const site of sampled) {
    const colour = weightClass(Math.min(1, Math.max(0, site.weight ?? 0)));
    body += el('line', {
      x1: x(site.direct as number), y1: topY, x2: x(site.estimate), y2: bottomY,
      stroke: colour, 'stroke-width': 1.3, 'stroke-dasharray': site.flag === 'suppress' ? '3 2' : null,
    });
    body += el('circle', { cx: x(site.direct as number), cy: topY, r: 2.4, fill: '#fff', stroke: PALETTE.survey, 'stroke-width': 1 });
    body += el('circle', { cx: x(site.estimate), cy: bottomY, r: 2.2, fill: PALETTE.model });
  }
  for (const site of sites.filter((s) => s.direct === null)) {
    body += el('path', { d: symbolPath(symbolTriangle, 30), transform: `translate(${num(x(site.estimate))} ${num(bottomY - 8)})`, fill: 'none', stroke: PALETTE.model, 'stroke-width': 1 });
  }
  // Legend: weight classes, the dashed style and the triangle.
  let legend = text(0, 0, 'Weight on own data', { class: 'legend' });
  const steps = PALETTE.weightRamp.length;
  PALETTE.weightRamp.forEach((colour, i) => {
    const lx = 112 + i * 44;
    legend += el('rect', { x: lx, y: -8, width: 40, height: 9, fill: colour });
    legend += text(lx + 20, 10, `${(i / steps).toFixed(1)}–${((i + 1) / steps).toFixed(1)}`, { class: 'legend small', 'text-anchor': 'middle' });
  });
  legend += legendItem(356, -3, el('line', { x1: -6, x2: 8, y1: 0, y2: 0, stroke: PALETTE.weightRamp[3], 'stroke-width': 1.3, 'stroke-dasharray': '3 2' }), 'suppressed');
  legend += legendItem(440, -3, el('path', { d: symbolPath(symbolTriangle, 30), fill: 'none', stroke: PALETTE.model, 'stroke-width': 1 }), 'no sample: model only (synthetic)');
  body += el('g', { transform: `translate(${left} 18)` }, legend);
  return svgRoot(WIDTH, height, `Shrinkage from ${(opts.survey ?? 'Survey mean').toLowerCase()} to model estimate`, body);
}

/**
 * (c) Coefficient of variation against sample size: survey CV (open) and model CV (filled) per
 * site, with the caution and suppression thresholds drawn as lines.
 */
export function cvChart(sites: ChartSite[], opts: { cvCaution: number; cvSuppress: number; prefix?: string; survey?: string }): string {
  const height = 280;
  const left = 56;
  const right = 130;
  const top = 30;
  const bottom = 232;
  const allCv = finite(sites.flatMap((s) => [s.directCv, s.cv]));
  const cap = Math.max(opts.cvSuppress * 1.3, Math.min(1, Math.max(...allCv, 0)));
  const y = scaleLinear().domain([0, cap]).nice().range([bottom, top]);
  const yMax = y.domain()[1];
  const maxN = Math.max(1, ...sites.map((s) => s.n));
  const x = scaleSqrt().domain([0, maxN]).nice().range([left + 8, WIDTH - right]);
  let body = '';
  // Zones above the thresholds, lightly tinted; lines at the thresholds.
  const yCaution = y(Math.min(opts.cvCaution, yMax));
  const ySuppress = y(Math.min(opts.cvSuppress, yMax));
  body += el('rect', { x: left, y: ySuppress, width: WIDTH - right - left, height: yCaution - ySuppress, fill: '#fbf1dc' });
  body += el('rect', { x: left, y: top, width: WIDTH - right - left, height: ySuppress - top, fill: '#eceaf1' });
  body += axisLeft(y, { at: left, grid: [left, WIDTH - right], format: (v) => `${Math.round(v * 100)}%`, label: 'Coefficient of variation', labelOffset: 42 });
  body += axisBottom(x, { at: bottom, label: 'Sample size n (square-root scale)', labelOffset: 32, ticks: 6, format: (v) => String(v) });
  body += el('line', { x1: left, x2: WIDTH - right, y1: yCaution, y2: yCaution, stroke: '#9a6a10', 'stroke-width': 1, 'stroke-dasharray': '5 3' });
  body += el('line', { x1: left, x2: WIDTH - right, y1: ySuppress, y2: ySuppress, stroke: PALETTE.flag.suppress, 'stroke-width': 1.2, 'stroke-dasharray': '8 3' });
  body += text(WIDTH - right + 6, yCaution + 3.5, `caution above ${Math.round(opts.cvCaution * 100)}%`, { class: 'legend' });
  body += text(WIDTH - right + 6, ySuppress + 3.5, `suppressed above ${Math.round(opts.cvSuppress * 100)}%`, { class: 'legend' });
  const clampY = (cv: number) => y(Math.min(cv, yMax));
  const ordered = [...sites].sort((a, b) => a.n - b.n || (a.id < b.id ? -1 : 1));
  for (const site of ordered) {
    const cx = x(site.n);
    if (site.directCv !== null && Number.isFinite(site.directCv) && site.cv !== null) {
      body += el('line', { x1: cx, x2: cx, y1: clampY(site.directCv), y2: clampY(site.cv), stroke: PALETTE.axis, 'stroke-width': 0.7 });
    }
    if (site.directCv !== null && Number.isFinite(site.directCv)) {
      if (site.directCv > yMax) {
        body += el('path', { d: symbolPath(symbolTriangle, 34), transform: `translate(${num(cx)} ${num(top + 4)})`, fill: '#fff', stroke: PALETTE.survey, 'stroke-width': 1 });
      } else {
        body += el('circle', { cx, cy: y(site.directCv), r: 2.7, fill: '#fff', stroke: PALETTE.survey, 'stroke-width': 1.1 });
      }
    }
    if (site.cv !== null && Number.isFinite(site.cv)) {
      body += site.flag === 'suppress'
        ? el('path', { d: symbolPath(symbolCross, 30), transform: `translate(${num(cx)} ${num(clampY(site.cv))}) rotate(45)`, fill: PALETTE.model })
        : el('circle', { cx, cy: clampY(site.cv), r: 2.4, fill: PALETTE.model });
    }
  }
  let legend = legendItem(0, 0, el('circle', { cx: 0, cy: 0, r: 2.7, fill: '#fff', stroke: PALETTE.survey, 'stroke-width': 1.1 }), opts.survey ?? 'Survey mean');
  legend += legendItem(96, 0, el('circle', { cx: 0, cy: 0, r: 2.4, fill: PALETTE.model }), 'Model estimate');
  legend += legendItem(206, 0, el('path', { d: symbolPath(symbolCross, 30), transform: 'rotate(45)', fill: PALETTE.model }), 'Model estimate, suppressed');
  legend += legendItem(360, 0, el('path', { d: symbolPath(symbolTriangle, 34), fill: '#fff', stroke: PALETTE.survey, 'stroke-width': 1 }), `${opts.survey ?? 'Survey mean'}, CV above ${Math.round(yMax * 100)}%`);
  body += el('g', { transform: `translate(${left + 10} 12)` }, legend);
  return svgRoot(WIDTH, height, `Coefficient of variation of ${(opts.survey ?? 'Survey mean').toLowerCase()}s and model estimates`, body);
}

