/**
 * Small SVG writing helpers shared by the charts: escaping, element strings, axes drawn from a
 * d3-scale's own ticks and tick format, the palette and the fill patterns.
 *
 * Every text or attribute value passes through `esc`, so site names with markup stay text.
 */
import type { ScaleContinuousNumeric } from 'd3-scale';

/** Escapes text for use in SVG/HTML text and double-quoted attributes. */
export function esc(text: string): string {
  return text
    .replace(/&/g, '&amp;')
    .replace(/</g, '&lt;')
    .replace(/>/g, '&gt;')
    .replace(/"/g, '&quot;')
    .replace(/'/g, '&#39;');
}

/** A coordinate rounded to 0.01 so the SVG is compact and deterministic (no "-0"). */
export function num(value: number): string {
  const rounded = Math.round(value * 100) / 100;
  return Object.is(rounded, -0) ? '0' : String(rounded);
}

type AttrValue = string | number | null | undefined;

/** One SVG element as a string; attributes with null/undefined values are left out. */
export function el(tag: string, attrs: Record<string, AttrValue>, children?: string): string {
  const parts = Object.entries(attrs)
    .filter(([, v]) => v !== null && v !== undefined)
    .map(([k, v]) => ` ${k}="${typeof v === 'number' ? num(v) : esc(v as string)}"`)
    .join('');
  return children === undefined ? `<${tag}${parts}/>` : `<${tag}${parts}>${children}</${tag}>`;
}

/** A text element; `content` is escaped here. */
export function text(x: number, y: number, content: string, attrs: Record<string, AttrValue> = {}): string {
  return el('text', { x, y, ...attrs }, esc(content));
}

/** The outer <svg> with a viewBox, scaled to the column width by CSS, with a title for readers. */
export function svgRoot(width: number, height: number, title: string, body: string, className = 'chart'): string {
  return (
    `<svg xmlns="http://www.w3.org/2000/svg" class="${esc(className)}" viewBox="0 0 ${num(width)} ${num(height)}" ` +
    `width="${num(width)}" height="${num(height)}" role="img" aria-label="${esc(title)}">` +
    el('title', {}, esc(title)) +
    body +
    '</svg>'
  );
}

/** The report's own palette: one hue family per role, with lightness carrying the meaning. */
export const PALETTE = {
  ink: '#1f2328',
  muted: '#6b6f76',
  grid: '#e3e1dc',
  axis: '#8a8d92',
  /** Model estimates: dark slate, filled marks. */
  model: '#23374d',
  /** Survey means: warm mid-tone, open marks and thick pale bars. */
  survey: '#b0622a',
  surveyBar: '#ecc9a8',
  /** Suppressed figures: light neutral grey with a hatch. */
  suppressed: '#b9b9b9',
  /** Sequential single-hue ramp for estimate classes, light → dark (reads the same in grey). */
  ramp: ['#f0f3e4', '#cfdcae', '#a2bb78', '#6e8f49', '#3e5a28'],
  /** Weight on own data, light (synthetic) → dark (own data). */
  weightRamp: ['#d9d4ea', '#aea4cf', '#8173b0', '#574a8d', '#30265f'],
  /** Flags: light / mid + diagonal hatch / dark + cross hatch. */
  flag: { publish: '#f6f2e4', caution: '#e2ad4e', suppress: '#3f3a4b' },
  /** Chains in trace plots: distinct in lightness as well as hue. */
  chains: ['#1d3b5a', '#d08a3c', '#7fa9c9', '#8c3b5e', '#4f7a3a', '#c9b458'],
} as const;

/** Hatch styles: diagonal for caution, cross for suppressed flags, light diagonal for suppressed figures. */
export const HATCH = {
  caution: { background: PALETTE.flag.caution, stroke: '#7a5512', cross: false, spacing: 4.5, width: 1.1 },
  suppress: { background: PALETTE.flag.suppress, stroke: '#cfcadb', cross: true, spacing: 4.5, width: 0.9 },
  suppressed: { background: '#ffffff', stroke: PALETTE.suppressed, cross: false, spacing: 3.5, width: 1 },
} as const;

export type HatchStyle = (typeof HATCH)[keyof typeof HATCH];

/**
 * A shape filled with a hatch, drawn as real line geometry clipped to the shape. (SVG <pattern>
 * fills are rasterised by Chromium's PDF backend; clipped lines stay vector.)
 * `shape` is the SVG path data of the area; `box` its bounding box [x0, y0, x1, y1].
 */
export function hatchedShape(clipId: string, shape: string, box: [number, number, number, number], style: HatchStyle, outline?: { stroke: string; width: number }): string {
  const [x0, y0, x1, y1] = box;
  const h = y1 - y0;
  let lines = '';
  for (let k = x0 - h; k <= x1; k += style.spacing) {
    lines += `M${num(k)},${num(y1)}L${num(k + h)},${num(y0)}`;
    if (style.cross) lines += `M${num(k)},${num(y0)}L${num(k + h)},${num(y1)}`;
  }
  return (
    el('clipPath', { id: clipId }, el('path', { d: shape })) +
    el('path', { d: shape, fill: style.background, stroke: 'none' }) +
    el('path', { d: lines, stroke: style.stroke, 'stroke-width': style.width, fill: 'none', 'clip-path': `url(#${clipId})` }) +
    (outline ? el('path', { d: shape, fill: 'none', stroke: outline.stroke, 'stroke-width': outline.width }) : '')
  );
}

/** Path data of a rectangle, for `hatchedShape`. */
export function rectPath(x: number, y: number, width: number, height: number): string {
  return `M${num(x)},${num(y)}H${num(x + width)}V${num(y + height)}H${num(x)}Z`;
}

interface AxisOptions {
  /** Pixel position of the axis line (y for a bottom axis, x for a left axis). */
  at: number;
  /** Extent of the grid lines across the plot (from, to). */
  grid?: [number, number];
  ticks?: number;
  format?: (value: number) => string;
  label?: string;
  labelOffset?: number;
}

/** A horizontal axis from the scale's ticks; optional vertical grid lines. */
export function axisBottom(scale: ScaleContinuousNumeric<number, number>, options: AxisOptions): string {
  const count = options.ticks ?? 6;
  const format = options.format ?? scale.tickFormat(count);
  const [r0, r1] = scale.range();
  let out = el('line', { x1: r0, x2: r1, y1: options.at, y2: options.at, stroke: PALETTE.axis, 'stroke-width': 0.8 });
  for (const tick of scale.ticks(count)) {
    const x = scale(tick);
    if (options.grid) out += el('line', { x1: x, x2: x, y1: options.grid[0], y2: options.grid[1], stroke: PALETTE.grid, 'stroke-width': 0.6 });
    out += el('line', { x1: x, x2: x, y1: options.at, y2: options.at + 4, stroke: PALETTE.axis, 'stroke-width': 0.8 });
    out += text(x, options.at + 14, format(tick), { 'text-anchor': 'middle', class: 'tick' });
  }
  if (options.label) {
    out += text((r0 + r1) / 2, options.at + (options.labelOffset ?? 30), options.label, { 'text-anchor': 'middle', class: 'axis-label' });
  }
  return out;
}

/** A vertical axis from the scale's ticks; optional horizontal grid lines. */
export function axisLeft(scale: ScaleContinuousNumeric<number, number>, options: AxisOptions): string {
  const count = options.ticks ?? 5;
  const format = options.format ?? scale.tickFormat(count);
  const [r0, r1] = scale.range();
  let out = el('line', { x1: options.at, x2: options.at, y1: r0, y2: r1, stroke: PALETTE.axis, 'stroke-width': 0.8 });
  for (const tick of scale.ticks(count)) {
    const y = scale(tick);
    if (options.grid) out += el('line', { x1: options.grid[0], x2: options.grid[1], y1: y, y2: y, stroke: PALETTE.grid, 'stroke-width': 0.6 });
    out += el('line', { x1: options.at - 4, x2: options.at, y1: y, y2: y, stroke: PALETTE.axis, 'stroke-width': 0.8 });
    out += text(options.at - 6, y + 3.5, format(tick), { 'text-anchor': 'end', class: 'tick' });
  }
  if (options.label) {
    const x = options.at - (options.labelOffset ?? 36);
    const y = (r0 + r1) / 2;
    out += text(x, y, options.label, { 'text-anchor': 'middle', class: 'axis-label', transform: `rotate(-90 ${num(x)} ${num(y)})` });
  }
  return out;
}

/** Shortens a label to `max` characters with an ellipsis (SVG has no text wrapping). */
export function clip(label: string, max: number): string {
  const chars = Array.from(label);
  return chars.length <= max ? label : `${chars.slice(0, max - 1).join('')}…`;
}
