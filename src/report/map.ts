/**
 * Site boundaries: reading the office's GeoJSON, the two choropleths (estimates and flags) drawn
 * with d3-geo, and `estimates.geojson` (the boundaries carrying each site's figures) for GIS use.
 */
import { existsSync, readFileSync } from 'node:fs';
import { geoArea, geoBounds, geoConicEqualArea, geoPath } from 'd3-geo';
import type { GeoPermissibleObjects } from 'd3-geo';
import { scaleQuantize } from 'd3-scale';
import { UserError } from '../errors.js';
import type { Flag, SiteRow } from './read-run.js';
import { HATCH, PALETTE, el, hatchedShape, rectPath, svgRoot, text, type HatchStyle } from './svg.js';

type Position = number[];
type Ring = Position[];
interface PolygonGeometry { type: 'Polygon'; coordinates: Ring[] }
interface MultiPolygonGeometry { type: 'MultiPolygon'; coordinates: Ring[][] }
type AreaGeometry = PolygonGeometry | MultiPolygonGeometry;

export interface MapFeature {
  id: string;
  properties: Record<string, unknown>;
  /** As read from the file (kept for estimates.geojson). */
  geometry: AreaGeometry;
  /** Rings wound the way d3-geo expects (exterior clockwise on the sphere). */
  drawable: AreaGeometry;
}

export interface SiteMap {
  path: string;
  idProperty: string;
  features: MapFeature[];
}

const dataError = (message: string) => new UserError('data', message);

/**
 * Reads a GeoJSON FeatureCollection of Polygon/MultiPolygon features keyed by `idProperty`.
 * Returns null when the file does not exist (the report then leaves the maps out, with a
 * warning); throws a one-line data error when the file is malformed.
 */
export function readSiteMap(path: string, idProperty: string): SiteMap | null {
  if (!existsSync(path)) return null;
  let json: unknown;
  try {
    json = JSON.parse(readFileSync(path, 'utf8'));
  } catch (error) {
    throw dataError(`${path}: not valid JSON (${(error as Error).message})`);
  }
  const collection = json as { type?: unknown; features?: unknown };
  if (collection?.type !== 'FeatureCollection' || !Array.isArray(collection.features)) {
    throw dataError(`${path}: expected a GeoJSON FeatureCollection`);
  }
  const seen = new Set<string>();
  const features = collection.features.map((raw, i): MapFeature => {
    const feature = raw as { properties?: Record<string, unknown> | null; geometry?: { type?: string; coordinates?: unknown } | null };
    const where = `${path}: feature ${i + 1}`;
    const properties = feature?.properties ?? {};
    const idValue = properties[idProperty];
    if (idValue === undefined || idValue === null || idValue === '') throw dataError(`${where}: property "${idProperty}" is missing`);
    const id = String(idValue);
    if (seen.has(id)) throw dataError(`${where}: ${idProperty} "${id}" appears twice`);
    seen.add(id);
    const geometry = feature?.geometry;
    if (!geometry || (geometry.type !== 'Polygon' && geometry.type !== 'MultiPolygon') || !Array.isArray(geometry.coordinates)) {
      throw dataError(`${where}: geometry must be a Polygon or MultiPolygon`);
    }
    const area = geometry as AreaGeometry;
    return { id, properties, geometry: area, drawable: rewindForD3(area) };
  });
  if (features.length === 0) throw dataError(`${path}: no features`);
  return { path, idProperty, features };
}

/**
 * d3-geo treats polygons on the sphere, so an exterior ring must run clockwise; files following
 * RFC 7946 run counter-clockwise and would otherwise fill the whole globe. Each ring is turned
 * so an exterior ring encloses less than a hemisphere and a hole more.
 */
export function rewindForD3(geometry: AreaGeometry): AreaGeometry {
  const fixPolygon = (rings: Ring[]): Ring[] =>
    rings.map((ring, k) => {
      const small = geoArea({ type: 'Polygon', coordinates: [ring] } as GeoPermissibleObjects) <= 2 * Math.PI;
      const wantSmall = k === 0;
      return small === wantSmall ? ring : [...ring].reverse();
    });
  return geometry.type === 'Polygon'
    ? { type: 'Polygon', coordinates: fixPolygon(geometry.coordinates) }
    : { type: 'MultiPolygon', coordinates: geometry.coordinates.map(fixPolygon) };
}

/** What the choropleths need per site. */
export interface MapSite {
  id: string;
  label: string;
  n: number;
  estimate: number;
  flag: Flag;
}

interface Projected {
  width: number;
  height: number;
  paths: Array<{ feature: MapFeature; d: string; centroid: [number, number]; box: [number, number, number, number] }>;
}

/** Projects all features with an equal-area conic fitted to the map's extent. */
function project(map: SiteMap, width: number, maxHeight: number): Projected {
  const collection = {
    type: 'FeatureCollection',
    features: map.features.map((f) => ({ type: 'Feature', properties: {}, geometry: f.drawable })),
  } as GeoPermissibleObjects;
  const [[west, south], [east, north]] = geoBounds(collection);
  const centreLon = east >= west ? (west + east) / 2 : (west + east + 360) / 2;
  const projection = geoConicEqualArea()
    .parallels([south + (north - south) / 6, north - (north - south) / 6])
    .rotate([-centreLon, 0])
    .center([0, (south + north) / 2]);
  projection.fitWidth(width, collection);
  let path = geoPath(projection).digits(2);
  let [[, y0], [, y1]] = path.bounds(collection);
  if (y1 - y0 > maxHeight) {
    projection.fitSize([width, maxHeight], collection);
    path = geoPath(projection).digits(2);
    [[, y0], [, y1]] = path.bounds(collection);
  }
  return {
    width,
    height: Math.ceil(y1),
    paths: map.features.map((feature) => {
      const object = { type: 'Feature', properties: {}, geometry: feature.drawable } as GeoPermissibleObjects;
      const [[bx0, by0], [bx1, by1]] = path.bounds(object);
      return { feature, d: path(object) ?? '', centroid: path.centroid(object) as [number, number], box: [bx0, by0, bx1, by1] };
    }),
  };
}

const MAP_WIDTH = 480;
const MAP_MAX_HEIGHT = 380;
const PAD = 8;

function label(centroid: [number, number], id: string, dark: boolean, synthetic: boolean): string {
  const [cx, cy] = centroid;
  if (!Number.isFinite(cx) || !Number.isFinite(cy)) return '';
  let out = text(cx, cy + 2.5, id, { class: dark ? 'map-id on-dark' : 'map-id', 'text-anchor': 'middle' });
  if (synthetic) out += el('circle', { cx, cy: cy + 8, r: 2, fill: 'none', stroke: dark ? '#ffffff' : PALETTE.ink, 'stroke-width': 0.8 });
  return out;
}

/** One legend row: a swatch filled with a colour or a hatch, and its caption. */
function legendRow(y: number, fill: string | { id: string; style: HatchStyle }, caption: string): string {
  const swatch = typeof fill === 'string'
    ? el('rect', { x: 0, y, width: 16, height: 11, fill, stroke: PALETTE.axis, 'stroke-width': 0.6 })
    : hatchedShape(fill.id, rectPath(0, y, 16, 11), [0, y, 16, y + 11], fill.style, { stroke: PALETTE.axis, width: 0.6 });
  return swatch + text(22, y + 9, caption, { class: 'legend' });
}

/** A map area filled with a colour or a hatch. */
function area(d: string, box: [number, number, number, number], fill: string | { id: string; style: HatchStyle }): string {
  return typeof fill === 'string'
    ? el('path', { d, fill, stroke: '#ffffff', 'stroke-width': 0.8 })
    : hatchedShape(fill.id, d, box, fill.style);
}

/**
 * Choropleth of the model estimates in five equal-width classes of a single-hue ramp.
 * Suppressed sites are hatched and left out of the class range, so no value can be read off.
 */
export function estimatesMap(map: SiteMap, sites: MapSite[], opts: { unit: string; decimals: number; title: string; prefix?: string }): string {
  const id = opts.prefix ?? 'me';
  const byId = new Map(sites.map((s) => [s.id, s]));
  const shown = sites.filter((s) => s.flag !== 'suppress').map((s) => s.estimate);
  const lo = shown.length ? Math.min(...shown) : 0;
  const hi = shown.length ? Math.max(...shown) : 1;
  const classes = scaleQuantize<string>().domain(hi > lo ? [lo, hi] : [lo - 1, hi + 1]).range([...PALETTE.ramp]);
  const projected = project(map, MAP_WIDTH, MAP_MAX_HEIGHT);
  let shapes = '';
  let labels = '';
  projected.paths.forEach(({ feature, d, centroid, box }, k) => {
    const site = byId.get(feature.id);
    const fill = !site ? '#ffffff' : site.flag === 'suppress' ? { id: `${id}-${k}`, style: HATCH.suppressed } : classes(site.estimate);
    shapes += area(d, box, fill);
    const dark = !!site && site.flag !== 'suppress' && PALETTE.ramp.indexOf(classes(site.estimate) as (typeof PALETTE.ramp)[number]) >= 3;
    labels += label(centroid, feature.id, dark, !!site && site.n === 0);
  });
  // Outline on top so neighbouring hatch and colour stay separated.
  for (const { d } of projected.paths) shapes += el('path', { d, fill: 'none', stroke: PALETTE.axis, 'stroke-width': 0.4 });
  const format = (v: number) => v.toFixed(opts.decimals);
  let legend = text(0, 0, `${opts.title} (${opts.unit})`, { class: 'legend strong' });
  const thresholds = [lo, ...classes.thresholds(), hi];
  PALETTE.ramp.forEach((colour, i) => {
    legend += legendRow(10 + i * 16, colour, `${format(thresholds[i])} – ${format(thresholds[i + 1])}`);
  });
  let y = 10 + PALETTE.ramp.length * 16 + 6;
  legend += legendRow(y, { id: `${id}-legend`, style: HATCH.suppressed }, 'suppressed (not shown)');
  y += 16;
  legend += el('circle', { cx: 8, cy: y + 5.5, r: 2.5, fill: 'none', stroke: PALETTE.ink, 'stroke-width': 0.8 }) + text(22, y + 9, 'no sample: synthetic', { class: 'legend' });
  if (map.features.some((f) => !byId.has(f.id))) {
    y += 16;
    legend += legendRow(y, '#ffffff', 'not in this run');
  }
  const height = Math.max(projected.height + 2 * PAD, y + 40);
  const body = el('g', { transform: `translate(${PAD} ${PAD})` }, shapes + labels) + el('g', { transform: `translate(${MAP_WIDTH + 3 * PAD} ${PAD + 10})` }, legend);
  return svgRoot(680, height, `Map of ${opts.title}`, body, 'chart map');
}

/** Choropleth of the flags: light / mid with diagonal hatch / dark with cross hatch. */
export function flagsMap(map: SiteMap, sites: MapSite[], opts: { prefix?: string }): string {
  const id = opts.prefix ?? 'mf';
  const byId = new Map(sites.map((s) => [s.id, s]));
  const fills = (flag: Flag, key: string): string | { id: string; style: HatchStyle } =>
    flag === 'publish' ? PALETTE.flag.publish : { id: `${id}-${key}`, style: flag === 'caution' ? HATCH.caution : HATCH.suppress };
  const projected = project(map, MAP_WIDTH, MAP_MAX_HEIGHT);
  let shapes = '';
  let labels = '';
  projected.paths.forEach(({ feature, d, centroid, box }, k) => {
    const site = byId.get(feature.id);
    shapes += area(d, box, site ? fills(site.flag, String(k)) : '#ffffff');
    labels += label(centroid, feature.id, site?.flag === 'suppress', !!site && site.n === 0);
  });
  for (const { d } of projected.paths) shapes += el('path', { d, fill: 'none', stroke: PALETTE.axis, 'stroke-width': 0.4 });
  const count = (flag: Flag) => sites.filter((s) => s.flag === flag).length;
  let legend = text(0, 0, 'Reliability flag', { class: 'legend strong' });
  legend += legendRow(10, fills('publish', 'l1'), `publish (${count('publish')})`);
  legend += legendRow(26, fills('caution', 'l2'), `caution (${count('caution')})`);
  legend += legendRow(42, fills('suppress', 'l3'), `suppressed (${count('suppress')})`);
  legend += el('circle', { cx: 8, cy: 63.5, r: 2.5, fill: 'none', stroke: PALETTE.ink, 'stroke-width': 0.8 }) + text(22, 67, 'no sample: synthetic', { class: 'legend' });
  const height = Math.max(projected.height + 2 * PAD, 120);
  const body = el('g', { transform: `translate(${PAD} ${PAD})` }, shapes + labels) + el('g', { transform: `translate(${MAP_WIDTH + 3 * PAD} ${PAD + 10})` }, legend);
  return svgRoot(680, height, 'Map of reliability flags', body, 'chart map');
}

/** Site ids of the run that have no boundary, and boundaries with no site in the run. */
export function unmatched(map: SiteMap, siteIds: string[]): { sitesWithoutShape: string[]; shapesWithoutSite: string[] } {
  const shapeIds = new Set(map.features.map((f) => f.id));
  const ids = new Set(siteIds);
  return {
    sitesWithoutShape: siteIds.filter((s) => !shapeIds.has(s)),
    shapesWithoutSite: map.features.map((f) => f.id).filter((s) => !ids.has(s)),
  };
}

/**
 * `estimates.geojson`: the office's boundaries (geometry as in its file) with each site's figures
 * added to the properties. Features without a site in the run keep their properties only.
 */
export function estimatesGeojson(map: SiteMap, sites: SiteRow[]): string {
  const byId = new Map(sites.map((s) => [s.site, s]));
  const features = map.features.map((feature) => {
    const site = byId.get(feature.id);
    const figures = site
      ? {
          label: site.label,
          n: site.n,
          direct: site.direct,
          direct_se: site.direct_se,
          estimate: site.estimate,
          sd: site.sd,
          lower: site.lower,
          upper: site.upper,
          cv: site.cv,
          weight_direct: site.weight_direct,
          flag: site.flag,
          reasons: site.reasons.join('; '),
        }
      : { flag: null };
    return { type: 'Feature', properties: { ...feature.properties, [map.idProperty]: feature.id, ...figures }, geometry: feature.geometry };
  });
  return `{"type":"FeatureCollection","features":[\n${features.map((f) => JSON.stringify(f)).join(',\n')}\n]}\n`;
}

