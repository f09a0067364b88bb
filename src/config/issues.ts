/**
 * Turns schema failures into problems an analyst can act on: a key path such as
 * `model.priors.site_sd` and a short sentence, with hints for misspelt keys and choices.
 */
import type { z } from 'zod';
import { didYouMean } from './suggest.js';

/** One thing wrong with a config: where (`model.covariates[1]`) and what. */
export interface Problem {
  path: readonly (string | number)[];
  message: string;
  /** An unknown key: reported before other problems, since a misspelt key often causes them. */
  unknownKey?: boolean;
}

/** `model.covariates[1]` from `['model', 'covariates', 1]`; "top level" for the root. */
export function formatPath(path: readonly PropertyKey[]): string {
  let text = '';
  for (const part of path) {
    if (typeof part === 'number') text += `[${part}]`;
    else text += text === '' ? String(part) : `.${String(part)}`;
  }
  return text === '' ? 'top level' : text;
}

/** A short, readable rendering of a value the user wrote. */
export function describeValue(value: unknown): string {
  if (value === null) return 'an empty value';
  if (value === undefined) return 'nothing';
  if (typeof value === 'string') return `"${value}"`;
  if (typeof value === 'number') {
    if (Number.isNaN(value)) return 'NaN';
    if (!Number.isFinite(value)) return value > 0 ? 'infinity' : 'minus infinity';
    return String(value);
  }
  if (typeof value === 'boolean') return String(value);
  if (Array.isArray(value)) return 'a list';
  if (typeof value === 'object') return 'a group of keys';
  return typeof value;
}

const EXPECTED: Readonly<Record<string, string>> = {
  string: 'text',
  number: 'a number',
  int: 'a whole number',
  object: 'a group of keys (key: value)',
  array: 'a list such as [a, b]',
  boolean: 'true or false',
};

/**
 * Error map for `safeParse(raw, { error: configErrorMap })`: plain-language messages for the
 * standard failures. Schema-level messages (unknown keys, choices) take precedence over it.
 */
export const configErrorMap: z.core.$ZodErrorMap = (issue) => {
  switch (issue.code) {
    case 'invalid_type': {
      if (issue.input === undefined) return 'is required';
      const expected = EXPECTED[issue.expected] ?? issue.expected;
      return `expected ${expected}, got ${describeValue(issue.input)}`;
    }
    case 'too_small':
    case 'too_big': {
      const small = issue.code === 'too_small';
      const bound = small ? issue.minimum : issue.maximum;
      if (issue.origin === 'string' && small && Number(bound) === 1) return 'must not be empty';
      if (issue.origin === 'array') {
        return `must list ${small ? 'at least' : 'at most'} ${String(bound)} entries`;
      }
      const relation = issue.inclusive
        ? small ? 'at least' : 'at most'
        : small ? 'greater than' : 'less than';
      return `must be ${relation} ${String(bound)}, got ${describeValue(issue.input)}`;
    }
    case 'invalid_value': {
      const values = issue.values.map(String);
      const hint = typeof issue.input === 'string' ? didYouMean(issue.input, values) : '';
      return `expected one of ${values.join(', ')}, got ${describeValue(issue.input)}${hint}`;
    }
    case 'unrecognized_keys':
      return 'unknown key';
    default:
      return undefined;
  }
};

/** Smallest path length among a union branch's issues: how far that branch got. */
function branchDepth(issues: readonly z.core.$ZodIssue[]): number {
  let depth = Infinity;
  for (const issue of issues) depth = Math.min(depth, issue.path.length);
  return depth;
}

/**
 * Flattens schema issues into problems, in the schema's own (stable) order. An unknown key
 * becomes a problem at the key itself. A failed choice is reported inside the one option that
 * got furthest (e.g. `{ half_cauchy: { scal: 1 } }` → `half_cauchy.scale`), or as the choice's
 * own message when no option stands out.
 */
export function problemsFromIssues(
  issues: readonly z.core.$ZodIssue[],
  prefix: readonly PropertyKey[] = [],
): Problem[] {
  const problems: Problem[] = [];
  for (const issue of issues) {
    const path = [...prefix, ...issue.path] as (string | number)[];
    if (issue.code === 'unrecognized_keys') {
      for (const [index, key] of issue.keys.entries()) {
        // Only the first key's message is computed by the schema; the rest are only counted.
        problems.push({
          path: [...path, key],
          message: index === 0 ? issue.message : 'unknown key',
          unknownKey: true,
        });
      }
    } else if (issue.code === 'invalid_union') {
      const depths = issue.errors.map(branchDepth);
      const deepest = Math.max(...depths);
      const leaders = depths.filter((d) => d === deepest).length;
      if (deepest >= 1 && deepest !== Infinity && leaders === 1) {
        problems.push(...problemsFromIssues(issue.errors[depths.indexOf(deepest)], path));
      } else {
        problems.push({ path, message: issue.message });
      }
    } else {
      problems.push({ path, message: issue.message });
    }
  }
  return problems;
}

/**
 * The one-line summary: the first problem, and how many more there are. Unknown keys come
 * first (a misspelt `covariate` also makes `covariates` look missing); otherwise the order
 * given is kept, so the same config always gives the same message.
 */
export function summarizeProblems(fileName: string, problems: readonly Problem[]): string {
  const first = problems.find((p) => p.unknownKey === true) ?? problems[0];
  const more = problems.length - 1;
  const tail = more === 0 ? '' : ` (and ${more} more problem${more === 1 ? '' : 's'})`;
  return `${fileName}: ${formatPath(first.path)}: ${first.message}${tail}`;
}
