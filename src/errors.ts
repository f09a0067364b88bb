/**
 * Typed failures and the process exit codes they map to.
 *
 * Numerics throw nothing user-facing; the edges (config, data, output, report) throw a
 * `UserError` whose message is one line an analyst can act on. Only `src/cli` turns these into
 * exit codes, so the mapping lives in one place.
 */

/** Exit codes, documented in the README. */
export const EXIT = {
  ok: 0,
  /** Unexpected failure inside shrinkwell (a bug): stack trace printed. */
  internal: 1,
  /** Command-line usage: unknown command or option, missing argument. */
  usage: 2,
  /** The config file is missing, is not valid YAML, or breaks the schema. */
  config: 3,
  /** An input data file is missing or holds bad values. */
  data: 4,
  /** The fit ran and wrote its outputs, but failed the convergence gate. */
  notConverged: 5,
  /** Outputs could not be written (permissions, disk, existing target). */
  output: 6,
  /** The report could not be rendered to PDF (no browser); HTML is still written. */
  report: 7,
  /** A run folder given to `report` or `compare` is missing, broken or from another version. */
  runFolder: 8,
} as const;

export type ExitKind = keyof typeof EXIT;

/** A mistake in the user's input: printed as one line, never with a stack trace. */
export class UserError extends Error {
  readonly kind: ExitKind;
  constructor(kind: ExitKind, message: string) {
    super(message);
    this.name = 'UserError';
    this.kind = kind;
  }
}

export const configError = (message: string): UserError => new UserError('config', message);
export const dataError = (message: string): UserError => new UserError('data', message);
