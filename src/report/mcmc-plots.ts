/**
 * Trace and density plots of the posterior draws for the appendix (coefficients and σ's), as
 * SVG strings drawn with d3-scale and d3-shape.
 */
import { scaleLinear } from 'd3-scale';
import { area, line } from 'd3-shape';
import { PALETTE, axisBottom, axisLeft, el, num, svgRoot, text } from './svg.js';

/** At most this many points per chain are drawn in a trace (every k-th draw). */
export const TRACE_POINTS = 250;

/**
 * Gaussian kernel density estimate on a grid, with Silverman's rule-of-thumb bandwidth
 * h = 0.9·min(sd, IQR/1.34)·n^(−1/5) (Silverman 1986, Density Estimation, eq. 3.31).
 */
export function kernelDensity(values: ArrayLike<number>, grid: number[]): number[] {
  const n = values.length;
  if (n < 2) return grid.map(() => 0);
  const sorted = Float64Array.from(values).sort();
  let mean = 0;
  for (let i = 0; i < n; i++) mean += sorted[i];
  mean /= n;
  let ss = 0;
  for (let i = 0; i < n; i++) ss += (sorted[i] - mean) ** 2;
  const sd = Math.sqrt(ss / (n - 1));
  const q = (p: number) => {
    const h = (n - 1) * p;
    const lo = Math.floor(h);
    return sorted[lo] + (h - lo) * (sorted[Math.min(lo + 1, n - 1)] - sorted[lo]);
  };
  const iqr = q(0.75) - q(0.25);
  const spread = Math.min(sd, iqr > 0 ? iqr / 1.34 : sd);
  const h = 0.9 * (spread > 0 ? spread : Math.abs(mean) * 1e-3 || 1e-3) * Math.pow(n, -0.2);
  const norm = 1 / (n * h * Math.sqrt(2 * Math.PI));
  return grid.map((g) => {
    let sum = 0;
    for (let i = 0; i < n; i++) {
      const z = (g - sorted[i]) / h;
      if (z > -8 && z < 8) sum += Math.exp(-0.5 * z * z);
    }
    return sum * norm;
  });
}

/**
 * One row for one quantity: the trace of every chain (left) and the density of the pooled draws
 * with each chain's density as a thin line (right).
 */
export function traceDensityPlot(title: string, chains: Float32Array[]): string {
  const width = 680;
  const height = 150;
  const traceLeft = 54;
  const traceRight = 420;
  const densityLeft = 452;
  const densityRight = 670;
  const top = 18;
  const bottom = 118;
  const draws = chains[0]?.length ?? 0;
  let lo = Number.POSITIVE_INFINITY;
  let hi = Number.NEGATIVE_INFINITY;
  for (const chain of chains) {
    for (let i = 0; i < chain.length; i++) {
      if (chain[i] < lo) lo = chain[i];
      if (chain[i] > hi) hi = chain[i];
    }
  }
  if (!(hi > lo)) {
    lo -= 1;
    hi += 1;
  }
  const y = scaleLinear().domain([lo, hi]).nice(4).range([bottom, top]);
  const x = scaleLinear().domain([0, Math.max(1, draws - 1)]).range([traceLeft, traceRight]);
  const stride = Math.max(1, Math.ceil(draws / TRACE_POINTS));
  let body = text(traceLeft, 11, title, { class: 'plot-title' });
  // Chain colours, named at the top right of every plot so no plot needs a separate key.
  chains.forEach((_, c) => {
    const x = densityRight - (chains.length - c) * 54;
    body += el('line', { x1: x, x2: x + 12, y1: 7, y2: 7, stroke: PALETTE.chains[c % PALETTE.chains.length], 'stroke-width': 2 });
    body += text(x + 15, 10, `chain ${c + 1}`, { class: 'legend small' });
  });
  body += axisLeft(y, { at: traceLeft, ticks: 4 });
  body += axisBottom(x, { at: bottom, ticks: 5, label: stride > 1 ? `draw after warmup (every ${stride}th shown)` : 'draw after warmup', labelOffset: 28, format: (v) => String(Math.round(v) + 1) });
  const traceLine = line<number>()
    .x((_, i) => x(i * stride))
    .y((v) => y(v))
    .digits(2);
  chains.forEach((chain, c) => {
    const thinned: number[] = [];
    for (let i = 0; i < chain.length; i += stride) thinned.push(chain[i]);
    body += el('path', { d: traceLine(thinned) ?? '', fill: 'none', stroke: PALETTE.chains[c % PALETTE.chains.length], 'stroke-width': 0.6, 'stroke-opacity': 0.85 });
  });
  // Densities over the same value range, on a rotated-free horizontal axis.
  const grid: number[] = [];
  const [g0, g1] = y.domain();
  const points = 96;
  for (let i = 0; i < points; i++) grid.push(g0 + ((g1 - g0) * i) / (points - 1));
  const pooled = new Float64Array(chains.reduce((s, c) => s + c.length, 0));
  let offset = 0;
  for (const chain of chains) {
    pooled.set(chain, offset);
    offset += chain.length;
  }
  const pooledDensity = kernelDensity(pooled, grid);
  const perChain = chains.map((chain) => kernelDensity(chain, grid));
  const dMax = Math.max(...pooledDensity, ...perChain.flat());
  const dx = scaleLinear().domain([g0, g1]).range([densityLeft, densityRight]);
  const dy = scaleLinear().domain([0, dMax > 0 ? dMax : 1]).range([bottom, top]);
  body += axisBottom(dx, { at: bottom, ticks: 4, label: 'value (density of all draws; lines per chain)', labelOffset: 28 });
  const fillArea = area<number>()
    .x((_, i) => dx(grid[i]))
    .y0(bottom)
    .y1((d) => dy(d))
    .digits(2);
  body += el('path', { d: fillArea(pooledDensity) ?? '', fill: '#dfe5ec', stroke: 'none' });
  const densityLine = line<number>()
    .x((_, i) => dx(grid[i]))
    .y((d) => dy(d))
    .digits(2);
  perChain.forEach((density, c) => {
    body += el('path', { d: densityLine(density) ?? '', fill: 'none', stroke: PALETTE.chains[c % PALETTE.chains.length], 'stroke-width': 0.9 });
  });
  body += el('line', { x1: densityLeft, x2: densityRight, y1: bottom, y2: bottom, stroke: PALETTE.axis, 'stroke-width': 0.8 });
  return svgRoot(width, height, `Trace and density of ${title}`, body, 'chart trace');
}
