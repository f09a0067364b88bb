/**
 * Small dense linear algebra for symmetric positive-definite (SPD) matrices of order p
 * (p ≤ ~20: the number of regression coefficients).
 *
 * Matrices are p × p, row-major, in a `Float64Array` of length ≥ p·p. Nothing here allocates:
 * every function writes into buffers the caller owns, so these can sit inside per-draw and
 * per-grid-point loops. Output buffers may alias inputs where a function says so.
 *
 * The algorithms are the textbook ones (Golub & Van Loan, *Matrix Computations*, 4th ed. 2013,
 * §4.2 Cholesky, §3.1 triangular systems; recalled): A = L Lᵀ with L lower triangular,
 * log|A| = 2 Σ log L_jj, A⁻¹ = L⁻ᵀ L⁻¹.
 */

/**
 * Cholesky factorisation A = L Lᵀ (Golub & Van Loan 2013, Alg. 4.2.1, recalled).
 *
 * Reads only the lower triangle of `a`. Writes L into the lower triangle of `l` and zeros the
 * strict upper triangle, so `l` is a plain lower-triangular matrix afterwards. `l` may be `a`
 * (in place).
 *
 * @returns `false` if A is not numerically positive definite (a pivot ≤ 0 or not finite);
 *   `l` then holds garbage.
 */
export function cholesky(a: Float64Array, p: number, l: Float64Array): boolean {
  for (let j = 0; j < p; j++) {
    const rowJ = j * p;
    let d = a[rowJ + j];
    for (let k = 0; k < j; k++) d -= l[rowJ + k] * l[rowJ + k];
    if (!(d > 0) || !Number.isFinite(d)) return false;
    const ljj = Math.sqrt(d);
    l[rowJ + j] = ljj;
    for (let i = j + 1; i < p; i++) {
      const rowI = i * p;
      let s = a[rowI + j];
      for (let k = 0; k < j; k++) s -= l[rowI + k] * l[rowJ + k];
      l[rowI + j] = s / ljj;
    }
    for (let k = j + 1; k < p; k++) l[rowJ + k] = 0;
  }
  return true;
}

/**
 * Solves L z = b by forward substitution (L lower triangular, e.g. from {@link cholesky}).
 * `z` may be `b`.
 */
export function forwardSolve(l: Float64Array, p: number, b: ArrayLike<number>, z: Float64Array): void {
  for (let i = 0; i < p; i++) {
    const row = i * p;
    let s = b[i];
    for (let k = 0; k < i; k++) s -= l[row + k] * z[k];
    z[i] = s / l[row + i];
  }
}

/** Solves Lᵀ x = z by back substitution (L lower triangular). `x` may be `z`. */
export function backSolve(l: Float64Array, p: number, z: ArrayLike<number>, x: Float64Array): void {
  for (let i = p - 1; i >= 0; i--) {
    let s = z[i];
    for (let k = i + 1; k < p; k++) s -= l[k * p + i] * x[k];
    x[i] = s / l[i * p + i];
  }
}

/** Solves (L Lᵀ) x = b given the Cholesky factor L. `x` may be `b`. */
export function choleskySolve(l: Float64Array, p: number, b: ArrayLike<number>, x: Float64Array): void {
  forwardSolve(l, p, b, x);
  backSolve(l, p, x, x);
}

/** log |A| = 2 Σ_j log L_jj for A = L Lᵀ. */
export function choleskyLogDet(l: Float64Array, p: number): number {
  let s = 0;
  for (let j = 0; j < p; j++) s += Math.log(l[j * p + j]);
  return 2 * s;
}

/**
 * xᵀ A⁻¹ x = ‖L⁻¹ x‖² for A = L Lᵀ. `work` (length ≥ p) receives L⁻¹x.
 */
export function inverseQuadraticForm(
  l: Float64Array,
  p: number,
  x: ArrayLike<number>,
  work: Float64Array,
): number {
  forwardSolve(l, p, x, work);
  let s = 0;
  for (let i = 0; i < p; i++) s += work[i] * work[i];
  return s;
}

/**
 * A⁻¹ = L⁻ᵀ L⁻¹ from the Cholesky factor L, written as a full symmetric matrix into `out`.
 * Done in place in `out` (triangular inverse column by column, then the product L⁻ᵀL⁻¹ row by
 * row, each entry read before it is overwritten), so no work buffer is needed. `out` may be `l`.
 */
export function choleskyInverse(l: Float64Array, p: number, out: Float64Array): void {
  lowerTriangularInverse(l, p, out);
  // A⁻¹_ij = Σ_{k ≥ i} M_ki M_kj for j ≤ i; rows ≥ i of M are still intact when row i is formed.
  for (let i = 0; i < p; i++) {
    for (let j = 0; j <= i; j++) {
      let s = 0;
      for (let k = i; k < p; k++) s += out[k * p + i] * out[k * p + j];
      out[i * p + j] = s;
    }
  }
  for (let i = 0; i < p; i++) {
    for (let j = i + 1; j < p; j++) out[i * p + j] = out[j * p + i];
  }
}

/**
 * In-place Cholesky factorisation of the SPD matrix in `a` (lower triangle read; L left in the
 * lower triangle, upper triangle zeroed).
 *
 * @returns log |A| = 2 Σ log L_jj, or NaN if A is not numerically positive definite.
 */
export function choleskyLower(a: Float64Array, p: number): number {
  return cholesky(a, p, a) ? choleskyLogDet(a, p) : Number.NaN;
}

/** Solves L z = b in place (b ← L⁻¹ b), L lower triangular. */
export function solveLowerInPlace(l: Float64Array, p: number, b: Float64Array): void {
  forwardSolve(l, p, b, b);
}

/** Solves Lᵀ x = z in place (z ← L⁻ᵀ z), L lower triangular. */
export function solveUpperTransposedInPlace(l: Float64Array, p: number, z: Float64Array): void {
  backSolve(l, p, z, z);
}

/**
 * Inverse of a lower-triangular matrix, M = L⁻¹ (lower triangular), column by column
 * (Golub & Van Loan 2013 §3.1, recalled). Writes the lower triangle of `out` and zeros the
 * strict upper triangle. `out` may be `l`.
 */
export function lowerTriangularInverse(l: Float64Array, p: number, out: Float64Array): void {
  if (out !== l) out.set(l.subarray(0, p * p));
  for (let j = 0; j < p; j++) {
    const mjj = 1 / out[j * p + j];
    out[j * p + j] = mjj;
    for (let i = j + 1; i < p; i++) {
      let s = out[i * p + j] * mjj;
      for (let k = j + 1; k < i; k++) s += out[i * p + k] * out[k * p + j];
      out[i * p + j] = -s / out[i * p + i];
    }
  }
  for (let i = 0; i < p; i++) for (let j = i + 1; j < p; j++) out[i * p + j] = 0;
}
