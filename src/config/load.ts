/**
 * Reading and validating a config file: YAML → schema → cross-field rules → `Settings`.
 *
 * Every failure is a `UserError` of kind 'config' with one line:
 * `<config file name>: <key path>: <what is wrong>`, reporting the first problem in a stable
 * order (schema order, then the cross-field rules) and how many more there are.
 */
import { readFile } from 'node:fs/promises';
import { basename } from 'node:path';
import { parseDocument } from 'yaml';
import { configError } from '../errors.js';
import type { Settings } from './types.js';
import { configSchema } from './schema.js';
import { configErrorMap, problemsFromIssues, summarizeProblems } from './issues.js';
import { configWarnings, crossFieldProblems, resolveSettings } from './resolve.js';

/** Settings plus the warnings to print before running. */
export interface LoadedConfig {
  settings: Settings;
  warnings: string[];
}

/**
 * Validates a parsed config (the YAML as a plain object) and resolves it. Pure: no file
 * access; `configPath` only names the file in messages and anchors relative paths.
 * @throws UserError (kind 'config') naming the file, the key path and the first problem.
 */
export function validateConfig(raw: unknown, configPath: string): LoadedConfig {
  const fileName = basename(configPath);
  if (raw === null || raw === undefined) {
    throw configError(`${fileName}: the file is empty; it needs at least title, measure, sites and model`);
  }
  const parsed = configSchema.safeParse(raw, { error: configErrorMap });
  if (!parsed.success) {
    throw configError(summarizeProblems(fileName, problemsFromIssues(parsed.error.issues)));
  }
  const problems = crossFieldProblems(parsed.data);
  if (problems.length > 0) throw configError(summarizeProblems(fileName, problems));
  return {
    settings: resolveSettings(parsed.data, configPath),
    warnings: configWarnings(parsed.data, raw),
  };
}

/**
 * Parses YAML text into a plain value. A syntax error becomes one line with its position:
 * `demo.yaml: line 3, column 7: <what the YAML reader says>`.
 */
export function parseConfigText(text: string, configPath: string): { raw: unknown; warnings: string[] } {
  const fileName = basename(configPath);
  const document = parseDocument(text, { prettyErrors: true, uniqueKeys: true });
  const error = document.errors[0];
  if (error !== undefined) {
    const where = error.linePos?.[0];
    const position = where === undefined ? '' : ` line ${where.line}, column ${where.col}:`;
    // With prettyErrors the message ends " at line L, column C:" plus a code excerpt.
    const message = error.message.split('\n')[0].replace(/ at line \d+, column \d+:?\s*$/, '');
    throw configError(`${fileName}:${position} YAML syntax error: ${message}`);
  }
  const warnings = document.warnings.map((w) => `${fileName}: ${w.message.split('\n')[0]}`);
  return { raw: document.toJS({ maxAliasCount: 100 }), warnings };
}

/**
 * Reads, parses and validates a config file.
 * @throws UserError (kind 'config') when the file is missing or unreadable, is not valid YAML
 * or breaks the schema.
 */
export async function loadConfig(path: string): Promise<LoadedConfig> {
  let text: string;
  try {
    text = await readFile(path, 'utf8');
  } catch (cause) {
    const code = (cause as NodeJS.ErrnoException).code;
    if (code === 'ENOENT') throw configError(`config file not found: ${path}`);
    if (code === 'EISDIR') throw configError(`${path} is a folder, not a config file`);
    throw configError(`cannot read config file ${path}: ${(cause as Error).message}`);
  }
  const { raw, warnings: yamlWarnings } = parseConfigText(text.replace(/^\uFEFF/, ''), path);
  const { settings, warnings } = validateConfig(raw, path);
  return { settings, warnings: [...yamlWarnings, ...warnings] };
}
