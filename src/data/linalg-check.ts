/**
 * Exact collinearity among the columns of a design matrix, found by Gram–Schmidt
 * orthogonalisation (modified, with one re-orthogonalisation pass: "twice is enough",
 * Giraud, Langou & Rozložník 2005) so the offending columns can be named.
 */

/** A column that is a linear combination of the columns before it. */
export interface Collinearity {
  /** Index of the dependent column. */
  column: number;
  /**
   * Its expression in the earlier columns: x_column = Σ coefficient × x_index, over the terms
   * that contribute (terms whose contribution is negligible are dropped).
   */
  terms: { index: number; coefficient: number }[];
}

/** Relative size below which a residual counts as zero: far above rounding error (~1e-16). */
const DEPENDENCE_TOLERANCE = 1e-9;

/**
 * Looks for the first column of X (m × p, row-major), restricted to `rows`, that is a linear
 * combination of the columns before it. Column order matters: with the intercept first, a
 * constant covariate is reported as dependent on the intercept.
 * @returns the first dependent column with its combination, or null when X has full column rank.
 */
export function findCollinearity(X: Float64Array, p: number, rows: readonly number[]): Collinearity | null {
  const n = rows.length;
  const q: Float64Array[] = []; // orthonormal basis of the columns accepted so far
  const R = new Float64Array(p * p); // upper-triangular factor, row-major: x_j = Σ_k R[k,j] q_k
  for (let j = 0; j < p; j++) {
    const v = new Float64Array(n);
    for (let i = 0; i < n; i++) v[i] = X[rows[i] * p + j];
    const originalNorm = norm(v);
    for (let pass = 0; pass < 2; pass++) {
      for (let k = 0; k < q.length; k++) {
        const r = dot(q[k], v);
        R[k * p + j] += r;
        for (let i = 0; i < n; i++) v[i] -= r * q[k][i];
      }
    }
    const residual = norm(v);
    if (residual <= DEPENDENCE_TOLERANCE * originalNorm || originalNorm === 0) {
      return { column: j, terms: combination(R, p, j, X, rows) };
    }
    R[j * p + j] = residual;
    for (let i = 0; i < n; i++) v[i] /= residual;
    q.push(v);
  }
  return null;
}

/** Solves R[0:j,0:j] c = R[0:j, j] by back-substitution; keeps the terms that matter. */
function combination(R: Float64Array, p: number, j: number, X: Float64Array, rows: readonly number[]) {
  const c = new Float64Array(j);
  for (let k = j - 1; k >= 0; k--) {
    let s = R[k * p + j];
    for (let l = k + 1; l < j; l++) s -= R[k * p + l] * c[l];
    c[k] = s / R[k * p + k];
  }
  const target = columnNorm(X, p, j, rows);
  const terms: { index: number; coefficient: number }[] = [];
  for (let k = 0; k < j; k++) {
    const contribution = Math.abs(c[k]) * columnNorm(X, p, k, rows);
    if (contribution > DEPENDENCE_TOLERANCE * target) terms.push({ index: k, coefficient: c[k] });
  }
  return terms;
}

function columnNorm(X: Float64Array, p: number, j: number, rows: readonly number[]): number {
  let s = 0;
  for (const i of rows) s += X[i * p + j] * X[i * p + j];
  return Math.sqrt(s);
}

function dot(a: Float64Array, b: Float64Array): number {
  let s = 0;
  for (let i = 0; i < a.length; i++) s += a[i] * b[i];
  return s;
}

function norm(a: Float64Array): number {
  return Math.sqrt(dot(a, a));
}
