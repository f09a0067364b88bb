/**
 * The unit model's survey file, reduced as it streams to per-site sufficient statistics.
 *
 * The nested-error model (Battese, Harter & Fuller 1988) needs, per site i, only n_i, the sums
 * Σ_j z_ij and the cross-products Σ_j z_ij z_ijᵀ of z = (covariates…, response): the likelihood
 * depends on the units through the site means and the pooled within-site cross-products
 * (see src/models/unit.ts). So the file is read chunk by chunk into a few Float64Arrays of size
 * m × (k(k+1)/2 + k + 1), k = number of variables; memory does not grow with the number of rows,
 * and no object is made per row (site ids are looked up by their bytes).
 *
 * Numerical care: every variable is shifted by a reference value (its value in the first data
 * row) before it is accumulated, so Σz² − n z̄² does not cancel catastrophically when a variable
 * has a large mean and a small spread (common practice, e.g. Chan, Golub & LeVeque 1983,
 * "Algorithms for computing the sample variance", The American Statistician 37(3), on shifted
 * sums). Site means and within-site cross-products, the quantities the model uses, do not depend
 * on the shift.
 *
 * The parser is a byte-level CSV state machine (comma separated, optional double quotes with ""
 * escapes, LF or CRLF line ends, UTF-8 with or without BOM, blank lines skipped, cells trimmed):
 * csv-parse's streaming API builds an array of strings per record, which is what this module
 * avoids. Numbers in plain decimal notation with at most 15 significant digits and a decimal
 * exponent within ±22 are converted from their digits directly — exactly, since both the digit
 * string and the power of ten are exact doubles and one IEEE division or multiplication rounds
 * correctly (Clinger 1990, "How to read floating point numbers accurately", PLDI, fast path);
 * anything else goes through the same strict check as the sites file (`readNumberCell`).
 *
 * Every error stops the read with one line naming the file, the line and the column.
 *
 * The same statistics can come pre-aggregated (one row per site, e.g. from the GROUP BY query of
 * `aggregationQuery` run in a warehouse): `readAggregatedUnits`. Sufficient statistics are
 * additive, so a site may appear on several rows (partial aggregates) and they are summed.
 */
import { createHash } from 'node:crypto';
import { createReadStream } from 'node:fs';
import { basename } from 'node:path';
import { dataError } from '../errors.js';
import { type CsvTable, cellPlace, readNumberCell, tableName, textColumn } from './csv.js';

/** Per-site sufficient statistics of the unit rows. */
export interface UnitSums {
  /** Number of sites (rows of the sites file), indexed in sites-file order. */
  m: number;
  /** Variables accumulated: the covariates in config order, then the response. */
  variables: string[];
  /** k = variables.length. */
  k: number;
  /** Reference value subtracted from each variable before accumulating (length k). */
  shift: Float64Array;
  /** n_i, the number of units of each site (length m). */
  count: Float64Array;
  /** Σ_j (z_ij − shift), m × k row-major. */
  sum: Float64Array;
  /**
   * Σ_j (z_ij − shift)(z_ij − shift)ᵀ, lower triangle packed row by row (entry (a, b), b ≤ a,
   * at a(a+1)/2 + b), m × k(k+1)/2.
   */
  cross: Float64Array;
  /** Number of unit rows accumulated. */
  rows: number;
}

/** Length of a packed lower triangle of order k. */
export const packedLength = (k: number): number => (k * (k + 1)) / 2;

/** Empty statistics for m sites and the given variables. */
export function createUnitSums(m: number, variables: readonly string[], shift?: ArrayLike<number>): UnitSums {
  const k = variables.length;
  return {
    m,
    variables: [...variables],
    k,
    shift: shift ? Float64Array.from(shift) : new Float64Array(k),
    count: new Float64Array(m),
    sum: new Float64Array(m * k),
    cross: new Float64Array(m * packedLength(k)),
    rows: 0,
  };
}

/** Adds one unit of site `site` with values `z` (unshifted, length k). The hot loop of the reader. */
export function addUnit(s: UnitSums, site: number, z: ArrayLike<number>, work: Float64Array): void {
  const { k, shift } = s;
  for (let a = 0; a < k; a++) work[a] = z[a] - shift[a];
  s.count[site] += 1;
  const sumRow = site * k;
  for (let a = 0; a < k; a++) s.sum[sumRow + a] += work[a];
  let c = site * packedLength(k);
  for (let a = 0; a < k; a++) {
    const za = work[a];
    for (let b = 0; b <= a; b++) s.cross[c++] += za * work[b];
  }
  s.rows++;
}

/**
 * Statistics from rows held in memory: `site[r]` is the site index of row r and
 * `values[r·k + a]` its value of variable a. The shift is the first row's values, as when the
 * same rows are streamed from a file, so both give the same numbers bit for bit.
 */
export function unitSumsFromArrays(m: number, variables: readonly string[], site: Int32Array, values: Float64Array): UnitSums {
  const k = variables.length;
  const s = createUnitSums(m, variables, site.length > 0 ? values.subarray(0, k) : undefined);
  const work = new Float64Array(k);
  for (let r = 0; r < site.length; r++) addUnit(s, site[r], values.subarray(r * k, r * k + k), work);
  return s;
}

/** Adds `from` into `into` (same sites and variables); shifts may differ. Additivity of the statistics. */
export function mergeUnitSums(into: UnitSums, from: UnitSums): void {
  const { k, m } = into;
  const kk = packedLength(k);
  const delta = new Float64Array(k); // from's shift minus into's: z − s_into = (z − s_from) + delta
  for (let a = 0; a < k; a++) delta[a] = from.shift[a] - into.shift[a];
  for (let i = 0; i < m; i++) {
    const n = from.count[i];
    if (n === 0) continue;
    into.count[i] += n;
    let c = 0;
    for (let a = 0; a < k; a++) {
      for (let b = 0; b <= a; b++, c++) {
        const sa = from.sum[i * k + a];
        const sb = from.sum[i * k + b];
        into.cross[i * kk + c] += from.cross[i * kk + c] + delta[a] * sb + delta[b] * sa + n * delta[a] * delta[b];
      }
    }
    for (let a = 0; a < k; a++) into.sum[i * k + a] += from.sum[i * k + a] + n * delta[a];
  }
  into.rows += from.rows;
}

// ---------------------------------------------------------------------------------------------
// Byte-level CSV reading

const COMMA = 0x2c;
const QUOTE = 0x22;
const LF = 0x0a;
const CR = 0x0d;
const SPACE = 0x20;
const TAB = 0x09;
const MINUS = 0x2d;
const PLUS = 0x2b;
const DOT = 0x2e;
const ZERO = 0x30;
const NINE = 0x39;
const LOWER_E = 0x65;
const UPPER_E = 0x45;

/** Exact powers of ten 10^0 … 10^22 (all exactly representable as doubles). */
const POW10 = Array.from({ length: 23 }, (_, i) => Number(`1e${i}`));

/**
 * The value of the plain decimal number in bytes [s, e), or NaN when it is not one the fast path
 * converts exactly (then the caller uses the strict string path). Exact by Clinger's fast path.
 */
export function fastDecimal(buf: Uint8Array, s: number, e: number): number {
  let i = s;
  let negative = false;
  if (i < e && (buf[i] === MINUS || buf[i] === PLUS)) {
    negative = buf[i] === MINUS;
    i++;
  }
  let mantissa = 0;
  let significant = 0;
  let digits = 0;
  let exponent = 0;
  for (; i < e; i++) {
    const d = buf[i] - ZERO;
    if (d < 0 || d > 9) break;
    digits++;
    if (mantissa !== 0 || d !== 0) significant++;
    mantissa = mantissa * 10 + d;
  }
  if (i < e && buf[i] === DOT) {
    i++;
    for (; i < e; i++) {
      const d = buf[i] - ZERO;
      if (d < 0 || d > 9) break;
      digits++;
      if (mantissa !== 0 || d !== 0) significant++;
      mantissa = mantissa * 10 + d;
      exponent--;
    }
  }
  if (digits === 0 || significant > 15) return NaN;
  if (i < e && (buf[i] === LOWER_E || buf[i] === UPPER_E)) {
    i++;
    let expNegative = false;
    if (i < e && (buf[i] === MINUS || buf[i] === PLUS)) {
      expNegative = buf[i] === MINUS;
      i++;
    }
    let value = 0;
    let expDigits = 0;
    for (; i < e; i++) {
      const d = buf[i] - ZERO;
      if (d < 0 || d > 9) break;
      expDigits++;
      if (value < 1000) value = value * 10 + d;
    }
    if (expDigits === 0) return NaN;
    exponent += expNegative ? -value : value;
  }
  if (i !== e) return NaN;
  let x: number;
  if (exponent === 0) x = mantissa;
  else if (exponent > 0 && exponent <= 22) x = mantissa * POW10[exponent];
  else if (exponent < 0 && exponent >= -22) x = mantissa / POW10[-exponent];
  else return NaN;
  return negative ? -x : x;
}

/**
 * Site ids by their UTF-8 bytes: an open-addressing hash table (FNV-1a hash, linear probing), so
 * a row's site is found without making a string. Byte equality of UTF-8 is string equality.
 */
export class SiteLookup {
  private readonly pool: Uint8Array;
  private readonly start: Int32Array;
  private readonly length: Int32Array;
  private readonly table: Int32Array; // site index + 1; 0 = empty
  private readonly mask: number;

  constructor(siteIndex: ReadonlyMap<string, number>) {
    const encoded = [...siteIndex].map(([id, site]) => ({ bytes: Buffer.from(id, 'utf8'), site }));
    const m = encoded.reduce((top, e) => Math.max(top, e.site + 1), 0);
    this.start = new Int32Array(m);
    this.length = new Int32Array(m);
    this.pool = new Uint8Array(encoded.reduce((total, e) => total + e.bytes.length, 0));
    let size = 16;
    while (size < 2 * encoded.length) size *= 2;
    this.table = new Int32Array(size);
    this.mask = size - 1;
    let at = 0;
    for (const { bytes, site } of encoded) {
      this.pool.set(bytes, at);
      this.start[site] = at;
      this.length[site] = bytes.length;
      at += bytes.length;
      let slot = SiteLookup.hash(bytes, 0, bytes.length) & this.mask;
      while (this.table[slot] !== 0) slot = (slot + 1) & this.mask;
      this.table[slot] = site + 1;
    }
  }

  /** FNV-1a over bytes [s, e) (Fowler, Noll & Vo; common practice). */
  static hash(buf: Uint8Array, s: number, e: number): number {
    let h = 0x811c9dc5;
    for (let i = s; i < e; i++) h = Math.imul(h ^ buf[i], 0x01000193);
    return h >>> 0;
  }

  /** The site whose id is the bytes [s, e), or −1. */
  find(buf: Uint8Array, s: number, e: number): number {
    const n = e - s;
    let slot = SiteLookup.hash(buf, s, e) & this.mask;
    for (;;) {
      const entry = this.table[slot];
      if (entry === 0) return -1;
      const site = entry - 1;
      if (this.length[site] === n) {
        const at = this.start[site];
        let same = true;
        for (let j = 0; j < n; j++) {
          if (buf[s + j] !== this.pool[at + j]) {
            same = false;
            break;
          }
        }
        if (same) return site;
      }
      slot = (slot + 1) & this.mask;
    }
  }
}

/** What the reader needs to know about the units file. */
export interface UnitFileLayout {
  /** Path of the units file (messages name its base name). */
  path: string;
  /** Column holding each unit's site id (units.site). */
  siteColumn: string;
  /** Columns accumulated, in order: the covariates, then the response. */
  variables: string[];
  /** Each variable's role for messages, e.g. `covariate (model.covariates)`. */
  roles: string[];
  /** Site id → index in the sites file. */
  siteIndex: ReadonlyMap<string, number>;
  /** Base name of the sites file, for the unknown-site message. */
  sitesFile: string;
}

/** Unknown site ids kept for the message (the read goes on to find them all, up to this many). */
const UNKNOWN_LIMIT = 20;
/** Unknown ids named in the message. */
const UNKNOWN_SHOWN = 8;

/** The field boundaries of the current record, and how many fields it has. */
interface Fields {
  start: Int32Array;
  end: Int32Array;
  quoted: Uint8Array;
  count: number;
}

function decodeField(buf: Buffer, s: number, e: number, quoted: boolean): string {
  let text = buf.toString('utf8', s, e);
  if (quoted) {
    text = text.trim();
    if (text.startsWith('"') && text.endsWith('"') && text.length >= 2) text = text.slice(1, -1);
    text = text.replaceAll('""', '"');
  }
  return text.trim();
}

/** Trims spaces and tabs (and a CR left at the line end) from [s, e): returns the new bounds packed. */
function trimStart(buf: Uint8Array, s: number, e: number): number {
  while (s < e && (buf[s] === SPACE || buf[s] === TAB)) s++;
  return s;
}
function trimEnd(buf: Uint8Array, s: number, e: number): number {
  while (e > s && (buf[e - 1] === SPACE || buf[e - 1] === TAB || buf[e - 1] === CR)) e--;
  return e;
}

/**
 * Incremental reader: `push` chunks of the file in order (any sizes; records may straddle
 * chunks), then `finish`. Memory: the statistics, one partial record and at most
 * UNKNOWN_LIMIT unknown site ids.
 */
export class UnitFileReader {
  private readonly layout: UnitFileLayout;
  private readonly name: string;
  private readonly sums: UnitSums;
  private readonly k: number;
  private pending: Buffer | null = null;
  private atFileStart = true;
  private line = 1;
  private header: string[] | null = null;
  /** Per column of the file: −1 site id, a ≥ 0 variable a, −2 not used. */
  private columnRole = new Int32Array(0);
  private readonly values: Float64Array;
  private readonly work: Float64Array;
  private fields: Fields = { start: new Int32Array(0), end: new Int32Array(0), quoted: new Uint8Array(0), count: 0 };
  private shiftSet = false;
  private readonly lookup: SiteLookup;
  private readonly unknown = new Map<string, number>();
  private unknownRows = 0;

  constructor(layout: UnitFileLayout, m: number) {
    this.layout = layout;
    this.name = basename(layout.path);
    this.k = layout.variables.length;
    this.sums = createUnitSums(m, layout.variables);
    this.values = new Float64Array(this.k);
    this.work = new Float64Array(this.k);
    this.lookup = new SiteLookup(layout.siteIndex);
  }

  /** Feeds the next chunk of the file. */
  push(chunk: Uint8Array): void {
    let buf = Buffer.isBuffer(chunk) ? chunk : Buffer.from(chunk.buffer, chunk.byteOffset, chunk.byteLength);
    if (this.pending !== null) {
      buf = Buffer.concat([this.pending, buf]);
      this.pending = null;
    }
    let pos = 0;
    if (this.atFileStart) {
      if (buf.length < 3 && buf.length > 0 && buf[0] === 0xef) {
        this.pending = buf; // a BOM may straddle chunks
        return;
      }
      if (buf.length >= 3 && buf[0] === 0xef && buf[1] === 0xbb && buf[2] === 0xbf) pos = 3;
      if (buf.length > 0) this.atFileStart = false;
    }
    for (;;) {
      const next = this.scanRecord(buf, pos, false);
      if (next < 0) break;
      pos = next;
    }
    if (pos < buf.length) this.pending = Buffer.from(buf.subarray(pos)); // copy: the chunk is not ours
  }

  /** Ends the file: reads a last record without a line end, checks unknown sites, returns the statistics. */
  finish(): UnitSums {
    if (this.pending !== null && this.pending.length > 0) {
      const buf = this.pending;
      this.pending = null;
      const start = this.atFileStart && buf.length >= 3 && buf[0] === 0xef && buf[1] === 0xbb && buf[2] === 0xbf ? 3 : 0;
      this.scanRecord(buf, start, true);
    }
    if (this.header === null) throw dataError(`${this.name}: the file is empty (expected a header line with column names)`);
    if (this.unknown.size > 0) this.throwUnknown();
    if (this.sums.rows === 0) throw dataError(`${this.name}: no units (the file has a header but no rows)`);
    return this.sums;
  }

  /**
   * Finds the record starting at `pos`; when complete (or at the end of the file), handles it
   * and returns the position after it; otherwise returns −1 (the caller keeps the rest).
   */
  private scanRecord(buf: Buffer, pos: number, atEnd: boolean): number {
    const end = buf.length;
    if (pos >= end) return -1;
    const f = this.fields;
    const capacity = f.start.length;
    let count = 0;
    let fieldStart = pos;
    let quoted = 0;
    let inQuotes = false;
    let innerLines = 0;
    let i = pos;
    for (; i < end; i++) {
      const c = buf[i];
      if (inQuotes) {
        if (c === QUOTE) {
          if (i + 1 < end && buf[i + 1] === QUOTE) i++;
          else if (i + 1 === end && !atEnd) return -1; // cannot tell "" from " yet
          else inQuotes = false;
        } else if (c === LF) innerLines++;
        continue;
      }
      if (c === QUOTE) {
        inQuotes = true;
        quoted = 1;
      } else if (c === COMMA) {
        if (count < capacity) {
          f.start[count] = fieldStart;
          f.end[count] = i;
          f.quoted[count] = quoted;
        }
        count++;
        fieldStart = i + 1;
        quoted = 0;
      } else if (c === LF) {
        break;
      }
    }
    if (i === end && !atEnd) return -1;
    if (count < capacity) {
      f.start[count] = fieldStart;
      f.end[count] = i;
      f.quoted[count] = quoted;
    }
    count++;
    f.count = count;
    this.handleRecord(buf, pos, i);
    this.line += 1 + innerLines;
    return i + 1;
  }

  private handleRecord(buf: Buffer, recordStart: number, recordEnd: number): void {
    const f = this.fields;
    // A blank line (possibly spaces or a lone CR) is skipped, as in the sites file.
    if (f.count === 1) {
      const s = trimStart(buf, recordStart, recordEnd);
      if (trimEnd(buf, s, recordEnd) === s) return;
    }
    if (this.header === null) {
      this.readHeader(buf, recordStart, recordEnd);
      return;
    }
    const columns = this.header.length;
    if (f.count !== columns) {
      throw dataError(`${this.name} line ${this.line}: ${f.count} value${f.count === 1 ? '' : 's'}, but the header has ${columns} columns`);
    }
    let site = -1;
    for (let c = 0; c < columns; c++) {
      const role = this.columnRole[c];
      if (role === -2) continue;
      const quoted = f.quoted[c] === 1;
      const s = trimStart(buf, f.start[c], f.end[c]);
      const e = trimEnd(buf, s, f.end[c]);
      if (role === -1) site = this.siteOf(buf, s, e, quoted, c);
      else this.values[role] = this.numberOf(buf, s, e, quoted, c, role);
    }
    if (site < 0) return; // unknown site: noted, not accumulated
    if (!this.shiftSet) {
      this.sums.shift.set(this.values);
      this.shiftSet = true;
    }
    addUnit(this.sums, site, this.values, this.work);
  }

  private readHeader(buf: Buffer, recordStart: number, recordEnd: number): void {
    const f = this.fields;
    const names: string[] = [];
    // The header may have more fields than the (still empty) boundary buffers hold: rescan it.
    let fieldStart = recordStart;
    let inQuotes = false;
    let quoted = false;
    for (let i = recordStart; i <= recordEnd; i++) {
      const c = i < recordEnd ? buf[i] : COMMA;
      if (inQuotes) {
        if (c === QUOTE) {
          if (i + 1 < recordEnd && buf[i + 1] === QUOTE) i++;
          else inQuotes = false;
        }
        continue;
      }
      if (c === QUOTE) {
        inQuotes = true;
        quoted = true;
      } else if (c === COMMA) {
        names.push(decodeField(buf, fieldStart, trimEnd(buf, fieldStart, i), quoted));
        fieldStart = i + 1;
        quoted = false;
      }
    }
    const headerLine = this.line;
    const seen = new Map<string, number>();
    names.forEach((column, index) => {
      if (column === '') throw dataError(`${this.name} line ${headerLine}: column ${index + 1} has no name`);
      const earlier = seen.get(column);
      if (earlier !== undefined) {
        throw dataError(`${this.name} line ${headerLine}: column "${column}" appears twice (columns ${earlier + 1} and ${index + 1})`);
      }
      seen.set(column, index);
    });
    const role = new Int32Array(names.length).fill(-2);
    const table = { path: this.layout.path, header: names, columns: new Map(names.map((n) => [n, [] as string[]])) } as unknown as CsvTable;
    const find = (column: string, what: string): number => {
      textColumn(table, column, what); // throws the sites file's "no column … did you mean" message
      return seen.get(column)!;
    };
    role[find(this.layout.siteColumn, 'site id (units.site)')] = -1;
    this.layout.variables.forEach((column, a) => {
      role[find(column, this.layout.roles[a])] = a;
    });
    this.columnRole = role;
    this.header = names;
    const capacity = names.length + 1;
    f.start = new Int32Array(capacity);
    f.end = new Int32Array(capacity);
    f.quoted = new Uint8Array(capacity);
  }

  private place(column: number): string {
    return `${this.name} line ${this.line}, column "${this.header![column]}"`;
  }

  /** The site index of the id in [s, e); −1 (and noted) when the sites file does not list it. */
  private siteOf(buf: Buffer, s: number, e: number, quoted: boolean, column: number): number {
    if (!quoted && e > s) {
      const site = this.lookup.find(buf, s, e);
      if (site >= 0) return site;
    }
    const id = decodeField(buf, s, e, quoted);
    if (id === '') throw dataError(`${this.place(column)}: the site id is blank`);
    const site = this.layout.siteIndex.get(id);
    if (site === undefined) {
      this.unknownRows++;
      if (!this.unknown.has(id) && this.unknown.size < UNKNOWN_LIMIT) this.unknown.set(id, this.line);
      return -1;
    }
    return site;
  }

  private numberOf(buf: Buffer, s: number, e: number, quoted: boolean, column: number, variable: number): number {
    if (!quoted) {
      const x = fastDecimal(buf, s, e);
      if (x === x) return x; // not NaN
    }
    const text = decodeField(buf, s, e, quoted);
    const reading = readNumberCell(text);
    if (reading.ok) return reading.value;
    const place = this.place(column);
    const what = this.layout.roles[variable];
    switch (reading.reason) {
      case 'blank':
        throw dataError(`${place}: is blank; every unit needs a value for the ${what}`);
      case 'not finite':
        throw dataError(`${place}: "${text}" is not finite`);
      case 'missing marker':
        throw dataError(`${place}: "${text}" is not a number; every unit needs a value for the ${what} (drop units with missing values before the fit)`);
      case 'decimal comma':
        throw dataError(`${place}: "${text}" is not a number; use a point as the decimal mark`);
      default:
        throw dataError(`${place}: "${text}" is not a number`);
    }
  }

  private throwUnknown(): never {
    const shown = [...this.unknown].slice(0, UNKNOWN_SHOWN).map(([id, line]) => `"${id}" (first on line ${line})`);
    const more = this.unknown.size > UNKNOWN_SHOWN || this.unknown.size === UNKNOWN_LIMIT ? ', and more' : '';
    const rows = this.unknownRows === 1 ? '1 unit' : `${this.unknownRows} units`;
    throw dataError(
      `${this.name}: ${rows} belong to site ids not in the sites file ${this.layout.sitesFile} (column "${this.layout.siteColumn}"): ` +
        `${shown.join(', ')}${more}; every unit's site must be listed in the sites file`,
    );
  }
}

/** The statistics of a units file and its fingerprint. */
export interface StreamedUnits {
  sums: UnitSums;
  sha256: string;
  bytes: number;
}

/**
 * Streams the units file into per-site statistics (see the module doc).
 * @throws UserError (kind 'data'): `units file not found: <path>`, or one line naming the file,
 * line and column of the first bad row; unknown site ids are collected and named together.
 */
export async function readUnitsFile(layout: UnitFileLayout, m: number, chunkBytes = 1 << 20): Promise<StreamedUnits> {
  const reader = new UnitFileReader(layout, m);
  const hash = createHash('sha256');
  let bytes = 0;
  const stream = createReadStream(layout.path, { highWaterMark: chunkBytes });
  try {
    for await (const chunk of stream) {
      const data = chunk as Buffer;
      hash.update(data);
      bytes += data.length;
      reader.push(data);
    }
  } catch (cause) {
    stream.destroy();
    const code = (cause as NodeJS.ErrnoException).code;
    if (code === 'ENOENT') throw dataError(`units file not found: ${layout.path}`);
    if (code === 'EISDIR') throw dataError(`units file ${layout.path} is a folder, not a CSV file`);
    if (code !== undefined) throw dataError(`cannot read units file ${layout.path}: ${(cause as Error).message}`);
    throw cause;
  }
  return { sums: reader.finish(), sha256: hash.digest('hex'), bytes };
}

// ---------------------------------------------------------------------------------------------
// Pre-aggregated statistics: one row per site (or several, summed)

/** The column names of a pre-aggregated statistics file for the given variables. */
export interface AggregateColumns {
  count: string;
  sum: (variable: string) => string;
  /** Name of the cross-product column of two variables (either order is accepted on reading). */
  product: (a: string, b: string) => string;
}

export const AGGREGATE_COLUMNS: AggregateColumns = {
  count: 'n_units',
  sum: (v) => `sum_${v}`,
  product: (a, b) => `sum_${a}_times_${b}`,
};

/**
 * The one aggregation query (standard SQL, GROUP BY) that turns a warehouse table of unit rows
 * into the per-site statistics file `readAggregatedUnits` reads. Products are listed for every
 * pair of variables (covariates and response), squares included.
 */
export function aggregationQuery(table: string, siteColumn: string, variables: readonly string[]): string {
  const quote = (name: string) => (/^[A-Za-z_][A-Za-z0-9_]*$/.test(name) ? name : `"${name.replaceAll('"', '""')}"`);
  const lines = [`  ${quote(siteColumn)}`, `  COUNT(*) AS ${AGGREGATE_COLUMNS.count}`];
  for (const v of variables) lines.push(`  SUM(${quote(v)}) AS ${quote(AGGREGATE_COLUMNS.sum(v))}`);
  variables.forEach((a, i) => {
    for (let j = 0; j <= i; j++) {
      const b = variables[j];
      lines.push(`  SUM(${quote(a)} * ${quote(b)}) AS ${quote(AGGREGATE_COLUMNS.product(a, b))}`);
    }
  });
  return `SELECT\n${lines.join(',\n')}\nFROM ${quote(table)}\nGROUP BY ${quote(siteColumn)};\n`;
}

/** Strict numeric cell of the statistics file. */
function statisticCell(table: CsvTable, row: number, column: string, cells: string[]): number {
  const text = cells[row];
  const reading = readNumberCell(text);
  if (reading.ok) return reading.value;
  const place = cellPlace(table, row, column);
  switch (reading.reason) {
    case 'blank':
      throw dataError(`${place}: is blank; every row of the statistics file needs every sum`);
    case 'not finite':
      throw dataError(`${place}: "${text}" is not finite`);
    case 'decimal comma':
      throw dataError(`${place}: "${text}" is not a number; use a point as the decimal mark`);
    default:
      throw dataError(`${place}: "${text}" is not a number`);
  }
}

/** The cells of a product column under either order of its two variables. */
function productCells(table: CsvTable, a: string, b: string): { column: string; cells: string[] } {
  for (const column of [AGGREGATE_COLUMNS.product(a, b), AGGREGATE_COLUMNS.product(b, a)]) {
    const cells = table.columns.get(column);
    if (cells !== undefined) return { column, cells };
  }
  const wanted = AGGREGATE_COLUMNS.product(a, b);
  return { column: wanted, cells: textColumn(table, wanted, `sum of products of "${a}" and "${b}" (see the aggregation query in the README)`) };
}

/** Relative size below which a negative within-site sum of squares counts as rounding. */
const ROUNDING_SLACK = 1e-9;

/**
 * Per-site statistics from a pre-aggregated file (one row per site, columns named as in
 * `aggregationQuery`). Rows of the same site are summed (partial aggregates); sites absent from
 * the file have no sample. Each row is checked: whole n ≥ 1, finite sums, and non-negative
 * within-site sums of squares (Σz² − (Σz)²/n ≥ 0), which catches columns swapped or sums
 * exported with too few digits.
 * @throws UserError (kind 'data') naming file, line and column.
 */
export function readAggregatedUnits(
  table: CsvTable,
  siteColumn: string,
  variables: readonly string[],
  siteIndex: ReadonlyMap<string, number>,
  m: number,
  sitesFile: string,
): UnitSums {
  const name = tableName(table);
  const k = variables.length;
  const kk = packedLength(k);
  const ids = textColumn(table, siteColumn, 'site id (units.site)');
  const countCells = textColumn(table, AGGREGATE_COLUMNS.count, 'number of units per site (see the aggregation query in the README)');
  const sumCells = variables.map((v) => textColumn(table, AGGREGATE_COLUMNS.sum(v), `sum of "${v}" (see the aggregation query in the README)`));
  const products: Array<{ column: string; cells: string[] }> = [];
  for (let a = 0; a < k; a++) for (let b = 0; b <= a; b++) products.push(productCells(table, variables[a], variables[b]));
  const sums = createUnitSums(m, variables);
  const unknown: string[] = [];
  for (let r = 0; r < table.rows; r++) {
    const id = ids[r];
    if (id === '') throw dataError(`${cellPlace(table, r, siteColumn)}: the site id is blank`);
    const site = siteIndex.get(id);
    if (site === undefined) {
      if (unknown.length < UNKNOWN_SHOWN) unknown.push(`"${id}" (line ${table.lines[r]})`);
      continue;
    }
    const n = statisticCell(table, r, AGGREGATE_COLUMNS.count, countCells);
    if (!(n >= 1) || !Number.isInteger(n)) {
      throw dataError(`${cellPlace(table, r, AGGREGATE_COLUMNS.count)}: the number of units must be a whole number of at least 1 (got ${n})`);
    }
    const rowSum = variables.map((v, a) => statisticCell(table, r, AGGREGATE_COLUMNS.sum(v), sumCells[a]));
    let c = 0;
    for (let a = 0; a < k; a++) {
      for (let b = 0; b <= a; b++, c++) {
        const value = statisticCell(table, r, products[c].column, products[c].cells);
        if (a === b) {
          const within = value - (rowSum[a] * rowSum[a]) / n;
          if (within < -ROUNDING_SLACK * Math.max(Math.abs(value), 1)) {
            throw dataError(
              `${cellPlace(table, r, products[c].column)}: the sum of squares is smaller than (sum of "${variables[a]}")² / ${AGGREGATE_COLUMNS.count}, ` +
                'which no set of units can give; check the columns and export the sums with 15 or more significant digits',
            );
          }
        }
        sums.cross[site * kk + c] += value;
      }
    }
    sums.count[site] += n;
    for (let a = 0; a < k; a++) sums.sum[site * k + a] += rowSum[a];
    sums.rows += n;
  }
  if (unknown.length > 0) {
    throw dataError(`${name}: site ids not in the sites file ${sitesFile} (column "${siteColumn}"): ${unknown.join(', ')}; every site must be listed in the sites file`);
  }
  if (sums.rows === 0) throw dataError(`${name}: no units (the file has a header but no rows)`);
  return sums;
}
