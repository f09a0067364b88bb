/**
 * Reads and checks a run folder (the contract in DEVELOPERS.md): the only input of the report.
 *
 * Every problem is a one-line `UserError('runFolder', …)` naming the file, line and column, so
 * an analyst pointing `report` at the wrong folder learns what is wrong without a stack trace.
 */
import { existsSync, readFileSync, statSync } from 'node:fs';
import { join } from 'node:path';
import { parse } from 'csv-parse/sync';
import { UserError } from '../errors.js';

export type Flag = 'publish' | 'caution' | 'suppress';
export const FLAGS: readonly Flag[] = ['publish', 'caution', 'suppress'];

/** One row of estimates.csv. Blank cells are `null`. */
export interface SiteRow {
  site: string;
  label: string;
  n: number;
  direct: number | null;
  direct_se: number | null;
  direct_cv: number | null;
  /** Interval of the direct estimate (columns added after the first format; null when absent or blank). */
  direct_lower: number | null;
  direct_upper: number | null;
  estimate: number;
  sd: number;
  lower: number;
  upper: number;
  cv: number | null;
  weight_direct: number | null;
  flag: Flag;
  reasons: string[];
}

export interface ParameterRow {
  quantity: string;
  estimate: number;
  sd: number;
  lower: number;
  upper: number;
}

export interface DiagnosticRow {
  quantity: string;
  rhat: number | null;
  ess_bulk: number | null;
  ess_tail: number | null;
  mcse_mean: number | null;
}

export interface GateEntry {
  quantity: string;
  value: number;
}

export interface RunSummary {
  format: 'shrinkwell-run';
  format_version: 1;
  title: string;
  period: string | null;
  measure: { name: string; unit: string; decimals: number };
  model: {
    kind: string;
    coefficients: string[];
    priors: Record<string, unknown>;
    prior_notes: Record<string, string>;
    variance_note: string | null;
    /** The direct-estimate interval, the CV rule and the model's sampler note in words; null in older runs. */
    direct_interval: string | null;
    cv_rule: string | null;
    method_note: string | null;
  };
  interval: number;
  sampling: {
    chains: number;
    warmup: number;
    draws: number;
    seed: number;
    method: string | null;
    threads: number | null;
  };
  reliability: {
    cv_caution: number;
    cv_suppress: number;
    min_sample: number;
    min_weight_direct: number | null;
    rhat_max: number;
    ess_min: number;
  };
  converged: boolean;
  gate: {
    worst_rhat: GateEntry | null;
    lowest_ess_bulk: GateEntry | null;
    lowest_ess_tail: GateEntry | null;
    failing: string[];
  };
  counts: { sites: number; sampled: number; publish: number; caution: number; suppress: number };
}

export interface InputFile {
  role: string;
  path: string;
  rows: number | null;
  sha256: string;
}

/** What the report needs from manifest.json; `raw` keeps the whole file. */
export interface RunManifest {
  toolName: string;
  toolVersion: string;
  node: string | null;
  platform: string | null;
  command: string | null;
  configPath: string | null;
  configSha256: string | null;
  inputs: InputFile[];
  seed: number | null;
  threads: number | null;
  created: string | null;
  /** Resolved settings as recorded by `fit` (snake_case keys, like the config file). */
  settings: Record<string, unknown> | null;
  raw: Record<string, unknown>;
}

/** Posterior draws after warmup, quantity-major then chain then draw. */
export interface RunDraws {
  quantities: string[];
  chains: number;
  drawsPerChain: number;
  values: Float32Array;
}

export interface RunFolder {
  dir: string;
  estimates: SiteRow[];
  parameters: ParameterRow[];
  diagnostics: DiagnosticRow[];
  summary: RunSummary;
  manifest: RunManifest;
  draws: RunDraws;
}

const fail = (message: string): UserError => new UserError('runFolder', message);

/** Draws of one quantity, one Float32Array view per chain. */
export function drawsOf(draws: RunDraws, quantity: string): Float32Array[] | null {
  const q = draws.quantities.indexOf(quantity);
  if (q < 0) return null;
  const chains: Float32Array[] = [];
  for (let c = 0; c < draws.chains; c++) {
    const start = (q * draws.chains + c) * draws.drawsPerChain;
    chains.push(draws.values.subarray(start, start + draws.drawsPerChain));
  }
  return chains;
}

/**
 * Reads the run folder `dir`: estimates, parameters, diagnostics, summary, manifest and draws.
 * Throws `UserError('runFolder', …)` when the folder is missing, incomplete or malformed.
 */
export function readRunFolder(dir: string): RunFolder {
  if (!existsSync(dir)) throw fail(`${dir}: run folder not found`);
  if (!statSync(dir).isDirectory()) throw fail(`${dir}: not a folder (give the run folder that fit wrote)`);
  const summary = readSummary(join(dir, 'summary.json'));
  const manifest = readManifest(join(dir, 'manifest.json'));
  const estimates = readEstimates(join(dir, 'estimates.csv'));
  const parameters = readParameters(join(dir, 'parameters.csv'));
  const diagnostics = readDiagnostics(join(dir, 'diagnostics.csv'));
  const draws = readDraws(join(dir, 'draws.json'), join(dir, 'draws.bin'));
  if (estimates.length !== summary.counts.sites) {
    throw fail(
      `${join(dir, 'estimates.csv')}: ${estimates.length} site rows but summary.json counts ${summary.counts.sites} sites`,
    );
  }
  return { dir, estimates, parameters, diagnostics, summary, manifest, draws };
}

// ---------------------------------------------------------------------------------------------
// CSV files

type Cells = Record<string, string>;

function readText(path: string): string {
  if (!existsSync(path)) throw fail(`${path}: missing from the run folder`);
  return readFileSync(path, 'utf8');
}

/** Shared with the readers of the optional run-folder files (read-audit.ts). */
export function readCsv(path: string, required: string[]): Cells[] {
  const text = readText(path);
  let rows: string[][];
  try {
    rows = parse(text, { skip_empty_lines: true, relax_column_count: false }) as string[][];
  } catch (error) {
    throw fail(`${path}: not a readable CSV file (${(error as Error).message.split('\n')[0]})`);
  }
  if (rows.length === 0) throw fail(`${path}: empty file (expected a header row)`);
  const header = rows[0];
  for (const column of required) {
    if (!header.includes(column)) throw fail(`${path}: line 1: column "${column}" is missing`);
  }
  return rows.slice(1).map((cells) => {
    const record: Cells = {};
    header.forEach((name, i) => (record[name] = cells[i] ?? ''));
    return record;
  });
}

/** A number cell: blank → null; NaN / Inf spelled out are kept as non-finite numbers. Shared with read-audit.ts. */
export function numberCell(path: string, line: number, column: string, value: string): number | null {
  const text = value.trim();
  if (text === '') return null;
  const lower = text.toLowerCase();
  if (lower === 'nan') return Number.NaN;
  if (lower === 'inf' || lower === 'infinity' || lower === '+inf') return Number.POSITIVE_INFINITY;
  if (lower === '-inf' || lower === '-infinity') return Number.NEGATIVE_INFINITY;
  const parsed = Number(text);
  if (!Number.isFinite(parsed) || !/^[-+]?(\d+\.?\d*|\.\d+)([eE][-+]?\d+)?$/.test(text)) {
    throw fail(`${path}: line ${line}, column ${column}: "${text}" is not a number`);
  }
  return parsed;
}

function requiredNumber(path: string, line: number, column: string, value: string): number {
  const parsed = numberCell(path, line, column, value);
  if (parsed === null) throw fail(`${path}: line ${line}, column ${column}: value is blank`);
  return parsed;
}

const ESTIMATE_COLUMNS = [
  'site', 'label', 'n', 'direct', 'direct_se', 'direct_cv', 'estimate', 'sd', 'lower', 'upper', 'cv',
  'weight_direct', 'flag', 'reasons',
];

function readEstimates(path: string): SiteRow[] {
  const rows = readCsv(path, ESTIMATE_COLUMNS);
  if (rows.length === 0) throw fail(`${path}: no site rows`);
  const seen = new Set<string>();
  return rows.map((cells, i) => {
    const line = i + 2;
    const site = cells.site.trim();
    if (site === '') throw fail(`${path}: line ${line}, column site: site id is blank`);
    if (seen.has(site)) throw fail(`${path}: line ${line}, column site: site "${site}" appears twice`);
    seen.add(site);
    const flag = cells.flag.trim() as Flag;
    if (!FLAGS.includes(flag)) {
      throw fail(`${path}: line ${line}, column flag: "${cells.flag}" is not one of publish, caution, suppress`);
    }
    const num = (column: string) => numberCell(path, line, column, cells[column]);
    const req = (column: string) => requiredNumber(path, line, column, cells[column]);
    const optionalColumn = (column: string) => (column in cells ? num(column) : null);
    const n = req('n');
    if (!(n >= 0) || !Number.isInteger(n)) throw fail(`${path}: line ${line}, column n: "${cells.n}" is not a whole number ≥ 0`);
    return {
      site,
      label: cells.label,
      n,
      direct: num('direct'),
      direct_se: num('direct_se'),
      direct_cv: num('direct_cv'),
      direct_lower: optionalColumn('direct_lower'),
      direct_upper: optionalColumn('direct_upper'),
      estimate: req('estimate'),
      sd: req('sd'),
      lower: req('lower'),
      upper: req('upper'),
      cv: num('cv'),
      weight_direct: num('weight_direct'),
      flag,
      reasons: cells.reasons
        .split(';')
        .map((reason) => reason.trim())
        .filter((reason) => reason !== ''),
    };
  });
}

function readParameters(path: string): ParameterRow[] {
  const rows = readCsv(path, ['quantity', 'estimate', 'sd', 'lower', 'upper']);
  if (rows.length === 0) throw fail(`${path}: no parameter rows`);
  return rows.map((cells, i) => {
    const line = i + 2;
    const req = (column: string) => requiredNumber(path, line, column, cells[column]);
    return { quantity: cells.quantity, estimate: req('estimate'), sd: req('sd'), lower: req('lower'), upper: req('upper') };
  });
}

function readDiagnostics(path: string): DiagnosticRow[] {
  const rows = readCsv(path, ['quantity', 'rhat', 'ess_bulk', 'ess_tail', 'mcse_mean']);
  if (rows.length === 0) throw fail(`${path}: no rows`);
  return rows.map((cells, i) => {
    const line = i + 2;
    const num = (column: string) => numberCell(path, line, column, cells[column]);
    return {
      quantity: cells.quantity,
      rhat: num('rhat'),
      ess_bulk: num('ess_bulk'),
      ess_tail: num('ess_tail'),
      mcse_mean: num('mcse_mean'),
    };
  });
}

// ---------------------------------------------------------------------------------------------
// JSON files

/** Shared with the readers of the optional run-folder files (read-audit.ts). */
export function readJson(path: string): Record<string, unknown> {
  const text = readText(path);
  let value: unknown;
  try {
    value = JSON.parse(text);
  } catch (error) {
    throw fail(`${path}: not valid JSON (${(error as Error).message})`);
  }
  if (typeof value !== 'object' || value === null || Array.isArray(value)) throw fail(`${path}: expected a JSON object`);
  return value as Record<string, unknown>;
}

type Json = Record<string, unknown>;

/** Small typed getters over parsed JSON that name the file and key when something is off. */
function getters(path: string) {
  const at = (obj: Json, key: string, where: string): unknown => obj[key];
  const name = (where: string, key: string) => (where ? `${where}.${key}` : key);
  return {
    object(obj: Json, key: string, where = ''): Json {
      const v = at(obj, key, where);
      if (typeof v !== 'object' || v === null || Array.isArray(v)) throw fail(`${path}: "${name(where, key)}" is missing or not an object`);
      return v as Json;
    },
    optionalObject(obj: Json, key: string): Json | null {
      const v = obj[key];
      return typeof v === 'object' && v !== null && !Array.isArray(v) ? (v as Json) : null;
    },
    string(obj: Json, key: string, where = ''): string {
      const v = at(obj, key, where);
      if (typeof v !== 'string') throw fail(`${path}: "${name(where, key)}" is missing or not a string`);
      return v;
    },
    optionalString(obj: Json, key: string): string | null {
      const v = obj[key];
      return typeof v === 'string' ? v : null;
    },
    number(obj: Json, key: string, where = ''): number {
      const v = at(obj, key, where);
      if (typeof v !== 'number' || !Number.isFinite(v)) throw fail(`${path}: "${name(where, key)}" is missing or not a number`);
      return v;
    },
    optionalNumber(obj: Json, key: string): number | null {
      const v = obj[key];
      return typeof v === 'number' && Number.isFinite(v) ? v : null;
    },
  };
}

function readSummary(path: string): RunSummary {
  const json = readJson(path);
  const g = getters(path);
  if (json.format !== 'shrinkwell-run') throw fail(`${path}: not a shrinkwell run summary ("format" is ${JSON.stringify(json.format)})`);
  if (json.format_version !== 1) {
    throw fail(`${path}: format_version ${JSON.stringify(json.format_version)} is not supported (this version reads 1)`);
  }
  const measure = g.object(json, 'measure');
  const model = g.object(json, 'model');
  const sampling = g.object(json, 'sampling');
  const reliability = g.object(json, 'reliability');
  const gate = g.object(json, 'gate');
  const counts = g.object(json, 'counts');
  if (typeof json.converged !== 'boolean') throw fail(`${path}: "converged" is missing or not true/false`);
  const coefficients = model.coefficients;
  if (!Array.isArray(coefficients) || !coefficients.every((c) => typeof c === 'string')) {
    throw fail(`${path}: "model.coefficients" is missing or not a list of names`);
  }
  const notes: Record<string, string> = {};
  for (const [key, value] of Object.entries(g.optionalObject(model, 'prior_notes') ?? {})) {
    if (typeof value === 'string') notes[key] = value;
  }
  const gateEntry = (key: string): GateEntry | null => {
    const entry = g.optionalObject(gate, key);
    if (!entry) return null;
    // A non-finite statistic is written as null in JSON: keep it as NaN (shown as "—").
    return { quantity: g.string(entry, 'quantity', `gate.${key}`), value: g.optionalNumber(entry, 'value') ?? Number.NaN };
  };
  const failing = Array.isArray(gate.failing) ? gate.failing.map((f) => (typeof f === 'string' ? f : JSON.stringify(f))) : [];
  return {
    format: 'shrinkwell-run',
    format_version: 1,
    title: g.string(json, 'title'),
    period: g.optionalString(json, 'period'),
    measure: {
      name: g.string(measure, 'name', 'measure'),
      unit: g.optionalString(measure, 'unit') ?? '',
      decimals: g.optionalNumber(measure, 'decimals') ?? 2,
    },
    model: {
      kind: g.string(model, 'kind', 'model'),
      coefficients: coefficients as string[],
      priors: g.optionalObject(model, 'priors') ?? {},
      prior_notes: notes,
      variance_note: g.optionalString(model, 'variance_note'),
      direct_interval: g.optionalString(model, 'direct_interval'),
      cv_rule: g.optionalString(model, 'cv_rule'),
      method_note: g.optionalString(model, 'method_note'),
    },
    interval: g.number(json, 'interval'),
    sampling: {
      chains: g.number(sampling, 'chains', 'sampling'),
      warmup: g.number(sampling, 'warmup', 'sampling'),
      draws: g.number(sampling, 'draws', 'sampling'),
      seed: g.number(sampling, 'seed', 'sampling'),
      method: g.optionalString(sampling, 'method'),
      threads: g.optionalNumber(sampling, 'threads'),
    },
    reliability: {
      cv_caution: g.number(reliability, 'cv_caution', 'reliability'),
      cv_suppress: g.number(reliability, 'cv_suppress', 'reliability'),
      min_sample: g.number(reliability, 'min_sample', 'reliability'),
      min_weight_direct: g.optionalNumber(reliability, 'min_weight_direct'),
      rhat_max: g.optionalNumber(reliability, 'rhat_max') ?? 1.01,
      ess_min: g.optionalNumber(reliability, 'ess_min') ?? 400,
    },
    converged: json.converged,
    gate: {
      worst_rhat: gateEntry('worst_rhat'),
      lowest_ess_bulk: gateEntry('lowest_ess_bulk'),
      lowest_ess_tail: gateEntry('lowest_ess_tail'),
      failing,
    },
    counts: {
      sites: g.number(counts, 'sites', 'counts'),
      sampled: g.number(counts, 'sampled', 'counts'),
      publish: g.number(counts, 'publish', 'counts'),
      caution: g.number(counts, 'caution', 'counts'),
      suppress: g.number(counts, 'suppress', 'counts'),
    },
  };
}

/**
 * manifest.json: the contract lists its content but not every key name, so the common
 * spellings are accepted (`tool: {name, version}` or `tool` + `version`; `command` as a string
 * or an argv list; `inputs` or `input_files`; `settings` or `resolved_config`).
 */
function readManifest(path: string): RunManifest {
  const json = readJson(path);
  const g = getters(path);
  const toolObject = g.optionalObject(json, 'tool');
  const toolName = toolObject ? g.optionalString(toolObject, 'name') : g.optionalString(json, 'tool');
  const toolVersion = toolObject ? g.optionalString(toolObject, 'version') : g.optionalString(json, 'version');
  if (!toolName || !toolVersion) throw fail(`${path}: tool name and version are missing`);
  const commandValue = json.command ?? json.command_line ?? json.argv;
  const command = Array.isArray(commandValue)
    ? commandValue.map((part) => quoteArg(String(part))).join(' ')
    : typeof commandValue === 'string'
      ? commandValue
      : null;
  const configObject = g.optionalObject(json, 'config');
  const inputsValue = json.inputs ?? json.input_files ?? json.files;
  if (!Array.isArray(inputsValue)) throw fail(`${path}: "inputs" (the input file fingerprints) is missing or not a list`);
  const inputs: InputFile[] = inputsValue.map((entry, i) => {
    if (typeof entry !== 'object' || entry === null) throw fail(`${path}: inputs[${i}] is not an object`);
    const e = entry as Json;
    return {
      role: g.optionalString(e, 'role') ?? 'input',
      path: g.string(e, 'path', `inputs[${i}]`),
      rows: g.optionalNumber(e, 'rows'),
      sha256: g.string(e, 'sha256', `inputs[${i}]`),
    };
  });
  const nodeValue = json.node ?? json.node_version;
  const platformValue = json.platform;
  const settings =
    g.optionalObject(json, 'settings') ?? g.optionalObject(json, 'resolved_config') ?? g.optionalObject(json, 'resolved_settings');
  return {
    toolName,
    toolVersion,
    node: typeof nodeValue === 'string' ? nodeValue : null,
    platform:
      typeof platformValue === 'string'
        ? platformValue
        : platformValue && typeof platformValue === 'object'
          ? Object.values(platformValue as Json).map(String).join(' ')
          : null,
    command,
    configPath: (configObject && g.optionalString(configObject, 'path')) ?? g.optionalString(json, 'config_path'),
    configSha256: (configObject && g.optionalString(configObject, 'sha256')) ?? g.optionalString(json, 'config_sha256'),
    inputs,
    seed: g.optionalNumber(json, 'seed'),
    threads: g.optionalNumber(json, 'threads') ?? g.optionalNumber(json, 'thread_count'),
    created: g.optionalString(json, 'created') ?? g.optionalString(json, 'created_at') ?? g.optionalString(json, 'creation_time'),
    settings,
    raw: json,
  };
}

/** Shell-quotes one argument so the printed command can be pasted back. */
function quoteArg(arg: string): string {
  return /^[A-Za-z0-9_\-./=:,@+]+$/.test(arg) ? arg : `'${arg.replace(/'/g, `'\\''`)}'`;
}

function readDraws(jsonPath: string, binPath: string): RunDraws {
  const json = readJson(jsonPath);
  const g = getters(jsonPath);
  if (json.dtype !== 'float32') throw fail(`${jsonPath}: dtype ${JSON.stringify(json.dtype)} is not supported (expects "float32")`);
  if (json.byte_order !== 'little') throw fail(`${jsonPath}: byte_order ${JSON.stringify(json.byte_order)} is not supported (expects "little")`);
  const quantities = json.quantities;
  if (!Array.isArray(quantities) || !quantities.every((q) => typeof q === 'string')) {
    throw fail(`${jsonPath}: "quantities" is missing or not a list of names`);
  }
  const chains = g.number(json, 'chains');
  const drawsPerChain = g.number(json, 'draws_per_chain');
  if (!existsSync(binPath)) throw fail(`${binPath}: missing from the run folder`);
  const bytes = readFileSync(binPath);
  const expected = 4 * quantities.length * chains * drawsPerChain;
  if (bytes.length !== expected) {
    throw fail(`${binPath}: ${bytes.length} bytes, but draws.json describes ${expected} (${quantities.length} quantities × ${chains} chains × ${drawsPerChain} draws × 4)`);
  }
  const values = new Float32Array(quantities.length * chains * drawsPerChain);
  for (let i = 0; i < values.length; i++) values[i] = bytes.readFloatLE(4 * i);
  return { quantities: quantities as string[], chains, drawsPerChain, values };
}
