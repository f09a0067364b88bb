/**
 * Small CSV tables (one row per site) read whole into text columns, with line numbers kept so
 * that every complaint can name the line an analyst sees in an editor (the header is line 1).
 */
import { createHash } from 'node:crypto';
import { readFile } from 'node:fs/promises';
import { basename } from 'node:path';
import { parse } from 'csv-parse/sync';
import { dataError } from '../errors.js';
import { closestMatch } from '../config/suggest.js';

/** A CSV file read into text columns. */
export interface CsvTable {
  /** Path as given (absolute when it comes from resolved settings). */
  path: string;
  /** What the file is for, e.g. "sites"; used in messages and the manifest. */
  role: string;
  /** Column names in file order, trimmed. */
  header: string[];
  /** Number of data rows (header and blank lines excluded). */
  rows: number;
  /** Cell text by column name, trimmed; one entry per data row. */
  columns: Map<string, string[]>;
  /** Line number (header = line 1) on which each data row starts. */
  lines: number[];
  /** SHA-256 of the file's raw bytes, lowercase hex. */
  sha256: string;
}

/** File name shown in messages: the base name, as an analyst knows the file. */
export function tableName(table: Pick<CsvTable, 'path'>): string {
  return basename(table.path);
}

/** `districts.csv line 7, column "rain"`. */
export function cellPlace(table: CsvTable, row: number, column: string): string {
  return `${tableName(table)} line ${table.lines[row]}, column "${column}"`;
}

interface ParsedRecord {
  record: string[];
  info: { bytes: number };
}

/** Line (1-based) of the first non-blank character at or after `offset`. */
function lineAt(bytes: Uint8Array, offset: number, startLine: number, startOffset: number): { line: number; offset: number } {
  let line = startLine;
  let i = startOffset;
  for (; i < offset; i++) if (bytes[i] === 0x0a) line++;
  // Skip blank lines (and stray spaces) before the record: csv-parse skips them too.
  for (; i < bytes.length; i++) {
    const c = bytes[i];
    if (c === 0x0a) line++;
    else if (c !== 0x0d && c !== 0x20 && c !== 0x09) break;
  }
  return { line, offset: i };
}

/** First line of a csv-parse error, as one line of text. */
function csvErrorText(cause: unknown): string {
  return String((cause as Error).message ?? cause).split('\n')[0];
}

/**
 * Parses CSV bytes into a table: UTF-8 with or without BOM, LF or CRLF line ends, quoted fields.
 * Blank lines are skipped. Pure apart from hashing.
 * @throws UserError (kind 'data') for an empty file, unnamed or repeated columns, or a row whose
 * number of values differs from the header's.
 */
export function parseCsvTable(bytes: Uint8Array, path: string, role: string): CsvTable {
  const name = basename(path);
  const sha256 = createHash('sha256').update(bytes).digest('hex');
  let records: ParsedRecord[];
  try {
    records = parse(Buffer.from(bytes.buffer, bytes.byteOffset, bytes.byteLength), {
      bom: true,
      info: true,
      relax_column_count: true,
      skip_empty_lines: true,
      trim: true,
    }) as unknown as ParsedRecord[];
  } catch (cause) {
    throw dataError(`${name}: not readable as CSV: ${csvErrorText(cause)}`);
  }
  if (records.length === 0) throw dataError(`${name}: the file is empty (expected a header line with column names)`);

  // Line numbers from byte offsets: csv-parse's own line count drifts on CRLF inside quotes.
  const lines: number[] = [];
  let cursor = { line: 1, offset: 0 };
  let previousEnd = 0;
  for (const { info } of records) {
    cursor = lineAt(bytes, previousEnd, cursor.line, cursor.offset);
    lines.push(cursor.line);
    previousEnd = info.bytes;
  }

  const header = records[0].record;
  const headerLine = lines[0];
  const seen = new Map<string, number>();
  header.forEach((column, index) => {
    if (column === '') throw dataError(`${name} line ${headerLine}: column ${index + 1} has no name`);
    const earlier = seen.get(column);
    if (earlier !== undefined) {
      throw dataError(`${name} line ${headerLine}: column "${column}" appears twice (columns ${earlier + 1} and ${index + 1})`);
    }
    seen.set(column, index);
  });

  const cells = header.map(() => [] as string[]);
  for (let r = 1; r < records.length; r++) {
    const { record } = records[r];
    if (record.length !== header.length) {
      throw dataError(
        `${name} line ${lines[r]}: ${record.length} value${record.length === 1 ? '' : 's'}, but the header has ${header.length} columns`,
      );
    }
    for (let c = 0; c < header.length; c++) cells[c].push(record[c]);
  }
  return {
    path,
    role,
    header,
    rows: records.length - 1,
    columns: new Map(header.map((column, c) => [column, cells[c]])),
    lines: lines.slice(1),
    sha256,
  };
}

/**
 * Reads a CSV file whole (fine for one row per site) into text columns.
 * @throws UserError (kind 'data'): `<role> file not found: <path>`, or any `parseCsvTable` error.
 */
export async function readCsvTable(path: string, role: string): Promise<CsvTable> {
  let bytes: Buffer;
  try {
    bytes = await readFile(path);
  } catch (cause) {
    const code = (cause as NodeJS.ErrnoException).code;
    if (code === 'ENOENT') throw dataError(`${role} file not found: ${path}`);
    if (code === 'EISDIR') throw dataError(`${role} file ${path} is a folder, not a CSV file`);
    throw dataError(`cannot read ${role} file ${path}: ${(cause as Error).message}`);
  }
  return parseCsvTable(bytes, path, role);
}

/** The list of columns for a message, shortened when long. */
function columnList(header: readonly string[]): string {
  const shown = header.slice(0, 12).join(', ');
  return header.length > 12 ? `${shown}, … ${header.length - 12} more` : shown;
}

/**
 * The text cells of a column.
 * @param what - the column's role, e.g. `covariate (model.covariates)`, for the message.
 * @throws UserError (kind 'data'): `districts.csv: no column "rain" for the covariate …;
 * did you mean "Rain"? (columns are: …)`.
 */
export function textColumn(table: CsvTable, name: string, what: string): string[] {
  const cells = table.columns.get(name);
  if (cells !== undefined) return cells;
  const match = closestMatch(name, table.header);
  const hint = match === undefined ? '' : `; did you mean "${match}"?`;
  const single = table.header.length === 1 ? table.header[0] : '';
  const separator = single.includes(';') ? ';' : single.includes('\t') ? 'tab' : '';
  const note = separator === '' ? '' : `; the file seems to separate values by ${separator === ';' ? '";"' : 'tabs'}, but shrinkwell reads comma-separated files`;
  throw dataError(`${tableName(table)}: no column "${name}" for the ${what}${hint} (columns are: ${columnList(table.header)})${note}`);
}

const DECIMAL = /^[+-]?(\d+\.?\d*|\.\d+)([eE][+-]?\d+)?$/;
const MISSING_MARKERS = new Set(['na', 'n/a', 'nan', 'null', 'none', '.', '-', '?']);
const INFINITY = /^[+-]?(inf|infinity)$/i;

/** A cell read as a number, or why it is not one. */
export type CellReading =
  | { ok: true; value: number }
  | { ok: false; reason: 'blank' | 'not a number' | 'missing marker' | 'not finite' | 'decimal comma' };

/** Reads one cell strictly: plain decimal notation only (no hex, no thousands separators). */
export function readNumberCell(text: string): CellReading {
  if (text === '') return { ok: false, reason: 'blank' };
  if (DECIMAL.test(text)) {
    const value = Number(text);
    return Number.isFinite(value) ? { ok: true, value } : { ok: false, reason: 'not finite' };
  }
  if (INFINITY.test(text)) return { ok: false, reason: 'not finite' };
  if (MISSING_MARKERS.has(text.toLowerCase())) return { ok: false, reason: 'missing marker' };
  if (/^[+-]?\d+,\d+$/.test(text)) return { ok: false, reason: 'decimal comma' };
  return { ok: false, reason: 'not a number' };
}

/** Options of `numericColumn`. */
export interface NumericColumnOptions {
  /** Blank cells become NaN; otherwise a blank cell is an error. */
  allowBlank: boolean;
  /** The column's role, e.g. `covariate (model.covariates)`, for messages. */
  what: string;
}

/**
 * A column read as numbers: blank → NaN when allowed.
 * @throws UserError (kind 'data') naming file, line and column: `districts.csv line 7,
 * column "var_mean": "abc" is not a number` (or `is blank`, `is not finite`), or a missing column.
 */
export function numericColumn(table: CsvTable, name: string, opts: NumericColumnOptions): Float64Array {
  const cells = textColumn(table, name, opts.what);
  const values = new Float64Array(cells.length);
  for (let row = 0; row < cells.length; row++) {
    const text = cells[row];
    const reading = readNumberCell(text);
    if (reading.ok) {
      values[row] = reading.value;
      continue;
    }
    if (reading.reason === 'blank' && opts.allowBlank) {
      values[row] = Number.NaN;
      continue;
    }
    const place = cellPlace(table, row, name);
    switch (reading.reason) {
      case 'blank':
        throw dataError(`${place}: is blank; every site needs a value for this ${opts.what}`);
      case 'not finite':
        throw dataError(`${place}: "${text}" is not finite`);
      case 'missing marker':
        throw dataError(
          opts.allowBlank
            ? `${place}: "${text}" is not a number; leave the cell blank where the value is missing`
            : `${place}: "${text}" is not a number; every site needs a value for this ${opts.what}`,
        );
      case 'decimal comma':
        throw dataError(`${place}: "${text}" is not a number; use a point as the decimal mark`);
      default:
        throw dataError(`${place}: "${text}" is not a number`);
    }
  }
  return values;
}
