/**
 * The publication report: run folder → HTML (Handlebars templates) → PDF (headless Chromium).
 *
 * Reads only the run folder (and the optional boundary file and template folder it names);
 * never imports the models, sampler, data or CLI code.
 */
import { mkdirSync, renameSync, writeFileSync } from 'node:fs';
import { dirname, isAbsolute, join, resolve } from 'node:path';
import { UserError } from '../errors.js';
import { INSTALL_HINT, countPdfPages, findBrowser, printPdf } from './browser.js';
import { buildContext } from './context.js';
import { estimatesGeojson, readSiteMap, unmatched, type SiteMap } from './map.js';
import { katexCss } from './maths.js';
import { readRunFolder, type RunFolder } from './read-run.js';
import { loadTemplateSet, renderTemplates } from './templates.js';

export { readRunFolder } from './read-run.js';
export { findBrowser } from './browser.js';

export interface ReportOptions {
  /** Where report.html, report.pdf and estimates.geojson go; default: the run folder. */
  outDir?: string;
  /** An office's own template folder; default: the run's `report.template`, else the built-in set. */
  templateDir?: string;
  paper?: 'A4' | 'Letter';
  /** GeoJSON of site boundaries; default: the run's `report.map.file`. */
  mapFile?: string;
  /** Feature property holding the site id; default: `report.map.id_property`, else `sites.id`. */
  mapIdProperty?: string;
  /** Browser executable; default: found by `findBrowser`. */
  browserPath?: string;
  /** Set false to write only report.html (no browser needed). */
  pdf?: boolean;
}

export interface ReportResult {
  /** Path of report.html. */
  html: string;
  /** Path of report.pdf, when a browser was available. */
  pdf?: string;
  pages?: number;
  /** Path of estimates.geojson, when the run has a boundary file. */
  geojson?: string;
  /** Something the analyst should know (no browser, map file missing, sites without a shape). */
  warning?: string;
  /** Requests the page attempted while printing; every one was blocked. */
  blocked?: string[];
}

/** The `report:` settings recorded in the run's manifest (resolved settings), if any. */
interface RunReportSettings {
  template?: string;
  paper?: string;
  map?: { file?: string; id_property?: string };
}

function runReportSettings(run: RunFolder): { report: RunReportSettings; sitesId: string | null } {
  const settings = run.manifest.settings ?? {};
  const report = (settings.report ?? {}) as RunReportSettings;
  const sites = settings.sites as { id?: unknown } | undefined;
  return { report: typeof report === 'object' && report !== null ? report : {}, sitesId: typeof sites?.id === 'string' ? sites.id : null };
}

/** Paths in the recorded settings are absolute; a relative one is taken from the config's folder, else the run folder. */
function resolveRunPath(run: RunFolder, path: string): string {
  if (isAbsolute(path)) return path;
  const configPath = run.manifest.configPath;
  const base = configPath && isAbsolute(configPath) ? dirname(configPath) : run.dir;
  return resolve(base, path);
}

function writeAtomic(path: string, content: string | Buffer): void {
  const temporary = `${path}.tmp-${process.pid}`;
  writeFileSync(temporary, content);
  renameSync(temporary, path);
}

/**
 * Renders the report of the run folder `runDir`: writes report.html, then report.pdf when a
 * Chromium/Chrome is available (otherwise returns a warning naming what to install), and
 * estimates.geojson when the run has site boundaries.
 */
export async function renderReport(runDir: string, opts: ReportOptions = {}): Promise<ReportResult> {
  const run = readRunFolder(runDir);
  const { report, sitesId } = runReportSettings(run);
  const warnings: string[] = [];

  const paper = opts.paper ?? report.paper ?? 'A4';
  if (paper !== 'A4' && paper !== 'Letter') throw new UserError('config', `report.paper: "${paper}" is not A4 or Letter`);

  const templateDir = opts.templateDir ?? (report.template ? resolveRunPath(run, report.template) : undefined);
  const templates = loadTemplateSet(templateDir);

  let map: SiteMap | null = null;
  const mapNotes: string[] = [];
  const mapFile = opts.mapFile ?? (report.map?.file ? resolveRunPath(run, report.map.file) : undefined);
  if (mapFile) {
    const idProperty = opts.mapIdProperty ?? report.map?.id_property ?? sitesId ?? 'site';
    map = readSiteMap(mapFile, idProperty);
    if (!map) {
      warnings.push(`${mapFile}: map file not found; the report has no maps`);
    } else {
      const { sitesWithoutShape, shapesWithoutSite } = unmatched(map, run.estimates.map((s) => s.site));
      if (sitesWithoutShape.length) {
        const note = `Sites without a boundary in the map file (not drawn): ${sitesWithoutShape.join(', ')}.`;
        mapNotes.push(note);
        warnings.push(`${mapFile}: ${sitesWithoutShape.length} site(s) have no feature with ${idProperty} = their id (${sitesWithoutShape.slice(0, 5).join(', ')}${sitesWithoutShape.length > 5 ? ', …' : ''})`);
      }
      if (shapesWithoutSite.length) mapNotes.push(`Boundaries with no site in this run (drawn blank): ${shapesWithoutSite.join(', ')}.`);
    }
  }

  const context = buildContext(run, { paper, map, mapNotes });
  const maths = [...context.appendix.equations, ...context.appendix.summaryEquations].map((e) => e.lead.toString() + e.html.toString())
    .concat(context.appendix.priors.flatMap((p) => [p.symbol.toString(), p.prior.toString()]))
    .join('');
  const html = renderTemplates(templates, context, { css: katexCss(maths) });

  const outDir = resolve(opts.outDir ?? runDir);
  try {
    mkdirSync(outDir, { recursive: true });
  } catch (error) {
    throw new UserError('output', `${outDir}: cannot create the output folder (${(error as Error).message})`);
  }
  const htmlPath = join(outDir, 'report.html');
  writeAtomic(htmlPath, html);
  const result: ReportResult = { html: htmlPath };
  if (map) {
    result.geojson = join(outDir, 'estimates.geojson');
    writeAtomic(result.geojson, estimatesGeojson(map, run.estimates));
  }

  if (opts.pdf === false) {
    if (warnings.length) result.warning = warnings.join('; ');
    return result;
  }
  const browser = opts.browserPath ?? findBrowser();
  if (!browser) {
    warnings.push(`no Chromium or Chrome found, so report.pdf was not written (report.html was): ${INSTALL_HINT}`);
  } else {
    let printed;
    try {
      printed = await printPdf(html, { executablePath: browser, paper });
    } catch (error) {
      const message = (error as Error).message.split('\n')[0];
      throw new UserError('report', `could not print report.pdf with ${browser}: ${message} (report.html was written)`);
    }
    const pdfPath = join(outDir, 'report.pdf');
    writeAtomic(pdfPath, printed.pdf);
    result.pdf = pdfPath;
    result.pages = countPdfPages(printed.pdf);
    result.blocked = printed.blocked;
  }
  if (warnings.length) result.warning = warnings.join('; ');
  return result;
}
