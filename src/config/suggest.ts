/**
 * "Did you mean …?" hints for misspelt keys and column names.
 *
 * The distance is the optimal-string-alignment variant of the Damerau–Levenshtein distance
 * (insertions, deletions, substitutions and swaps of two neighbouring characters each cost 1),
 * compared without regard to letter case, so `Rain` finds `rain` and `covaraites` finds
 * `covariates`.
 */

/**
 * Edit distance between two strings: the fewest insertions, deletions, substitutions or
 * transpositions of adjacent characters turning `a` into `b` (optimal string alignment;
 * Damerau 1964, Levenshtein 1966).
 */
export function editDistance(a: string, b: string): number {
  const n = a.length;
  const m = b.length;
  if (n === 0) return m;
  if (m === 0) return n;
  // Three rolling rows: the transposition step looks two rows back.
  let before = new Int32Array(m + 1);
  let previous = new Int32Array(m + 1);
  let current = new Int32Array(m + 1);
  for (let j = 0; j <= m; j++) previous[j] = j;
  for (let i = 1; i <= n; i++) {
    current[0] = i;
    for (let j = 1; j <= m; j++) {
      const cost = a[i - 1] === b[j - 1] ? 0 : 1;
      let best = Math.min(previous[j] + 1, current[j - 1] + 1, previous[j - 1] + cost);
      if (i > 1 && j > 1 && a[i - 1] === b[j - 2] && a[i - 2] === b[j - 1]) {
        best = Math.min(best, before[j - 2] + 1);
      }
      current[j] = best;
    }
    [before, previous, current] = [previous, current, before];
  }
  return previous[m];
}

/** How far a word may be from a candidate and still be suggested: about one edit in three. */
function allowedDistance(word: string): number {
  if (word.length <= 3) return 1;
  return Math.max(2, Math.floor(word.length / 3));
}

/**
 * The candidate closest to `word` (case-insensitive), or undefined when none is close enough
 * to be a plausible typo. Ties go to the earlier candidate, so hints are stable.
 */
export function closestMatch(word: string, candidates: readonly string[]): string | undefined {
  const lower = word.toLowerCase();
  let best: string | undefined;
  let bestDistance = Infinity;
  for (const candidate of candidates) {
    if (candidate === word) continue;
    const d = editDistance(lower, candidate.toLowerCase());
    if (d < bestDistance) {
      best = candidate;
      bestDistance = d;
    }
  }
  return bestDistance <= allowedDistance(word) ? best : undefined;
}

/** ` (did you mean "x"?)` when a close candidate exists, otherwise the empty string. */
export function didYouMean(word: string, candidates: readonly string[]): string {
  const match = closestMatch(word, candidates);
  return match === undefined ? '' : ` (did you mean "${match}"?)`;
}
