/**
 * The report's Handlebars environment: the default template set in `templates/`, optionally
 * overridden file by file from an office's own folder (`report.template` in the config).
 *
 * A template folder holds `report.hbs` (the page), `report.css` (inlined into the page) and
 * `partials/*.hbs` (registered under their file names). Values are always escaped: templates
 * print data with `{{…}}`; only markup built by the report code arrives as SafeString.
 */
import { existsSync, readdirSync, readFileSync, statSync } from 'node:fs';
import { basename, dirname, join, resolve } from 'node:path';
import { fileURLToPath } from 'node:url';
import Handlebars from 'handlebars';
import { UserError } from '../errors.js';

/** The package's own `templates/` folder, found by walking up from this module. */
export function defaultTemplateDir(): string {
  let dir = dirname(fileURLToPath(import.meta.url));
  for (let i = 0; i < 6; i++) {
    const candidate = join(dir, 'templates');
    if (existsSync(join(candidate, 'report.hbs'))) return candidate;
    dir = dirname(dir);
  }
  throw new Error('templates/report.hbs not found next to the shrinkwell package');
}

export interface TemplateSet {
  page: string;
  css: string;
  partials: Record<string, string>;
  /** Which folder each file came from, for error messages. */
  origin: Record<string, string>;
}

function listPartials(dir: string): Record<string, string> {
  const folder = join(dir, 'partials');
  if (!existsSync(folder)) return {};
  const out: Record<string, string> = {};
  for (const file of readdirSync(folder).sort()) {
    if (file.endsWith('.hbs')) out[basename(file, '.hbs')] = join(folder, file);
  }
  return out;
}

/** Reads the default set and lays the office's files over it. */
export function loadTemplateSet(officeDir?: string): TemplateSet {
  const base = defaultTemplateDir();
  const files: Record<string, string> = { page: join(base, 'report.hbs'), css: join(base, 'report.css') };
  const partialFiles = listPartials(base);
  if (officeDir !== undefined) {
    const dir = resolve(officeDir);
    if (!existsSync(dir) || !statSync(dir).isDirectory()) throw new UserError('config', `${dir}: report template folder not found`);
    if (existsSync(join(dir, 'report.hbs'))) files.page = join(dir, 'report.hbs');
    if (existsSync(join(dir, 'report.css'))) files.css = join(dir, 'report.css');
    Object.assign(partialFiles, listPartials(dir));
  }
  const origin: Record<string, string> = { page: files.page, css: files.css };
  const partials: Record<string, string> = {};
  for (const [name, path] of Object.entries(partialFiles)) {
    partials[name] = readFileSync(path, 'utf8');
    origin[`partial:${name}`] = path;
  }
  return { page: readFileSync(files.page, 'utf8'), css: readFileSync(files.css, 'utf8'), partials, origin };
}

/** A CSS string literal for `content:` in @page boxes; safe inside <style>. */
export function cssString(value: unknown): string {
  const text = String(value ?? '');
  const escaped = text.replace(/[\\"<>\n\r]/g, (ch) => `\\${ch.charCodeAt(0).toString(16)} `);
  return `"${escaped}"`;
}

/** Compiles and renders the page; template mistakes become one-line errors naming the file. */
export function renderTemplates(set: TemplateSet, context: object, extra: { css: string }): string {
  const hb = Handlebars.create();
  hb.registerHelper('css-string', (value: unknown) => new hb.SafeString(cssString(value)));
  hb.registerHelper('eq', (a: unknown, b: unknown) => a === b);
  hb.registerHelper('join', (list: unknown, separator: unknown) =>
    Array.isArray(list) ? list.map(String).join(typeof separator === 'string' ? separator : ', ') : '');
  // Handlebars compiles lazily: parse every file now so a syntax error names its own file.
  for (const [name, source] of Object.entries(set.partials)) {
    try {
      hb.parse(source);
      hb.registerPartial(name, hb.compile(source, { strict: true }));
    } catch (error) {
      throw templateError(set.origin[`partial:${name}`], error);
    }
  }
  let page: Handlebars.TemplateDelegate;
  try {
    hb.parse(set.page);
    page = hb.compile(set.page, { strict: true });
  } catch (error) {
    throw templateError(set.origin.page, error);
  }
  try {
    return page({ ...context, css: new hb.SafeString(set.css), katexCss: new hb.SafeString(extra.css) });
  } catch (error) {
    throw templateError(set.origin.page, error);
  }
}

function templateError(path: string, error: unknown): UserError {
  const message = (error as Error).message.split('\n').filter((line) => line.trim() !== '').join(' ');
  return new UserError('config', `${path}: template error: ${message}`);
}
