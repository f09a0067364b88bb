import { describe, expect, test } from 'vitest';
import {
  backSolve,
  cholesky,
  choleskyInverse,
  choleskyLogDet,
  choleskyLower,
  choleskySolve,
  forwardSolve,
  inverseQuadraticForm,
  lowerTriangularInverse,
  solveLowerInPlace,
  solveUpperTransposedInPlace,
} from '../src/models/linalg.js';

/** Small fixed-seed generator for test matrices (Marsaglia 2003 xorshift32; common practice). */
function xorshift(seed: number): () => number {
  let s = seed >>> 0 || 1;
  return () => {
    s ^= s << 13;
    s >>>= 0;
    s ^= s >>> 17;
    s ^= s << 5;
    s >>>= 0;
    return s / 4294967296 - 0.5;
  };
}

/** A = B Bᵀ + p·I with B uniform on (−½, ½): symmetric positive definite. */
function randomSpd(p: number, next: () => number): Float64Array {
  const b = Array.from({ length: p * p }, next);
  const a = new Float64Array(p * p);
  for (let i = 0; i < p; i++) {
    for (let j = 0; j < p; j++) {
      let s = i === j ? p : 0;
      for (let k = 0; k < p; k++) s += b[i * p + k] * b[j * p + k];
      a[i * p + j] = s;
    }
  }
  return a;
}

function multiply(a: Float64Array, b: Float64Array, p: number): Float64Array {
  const c = new Float64Array(p * p);
  for (let i = 0; i < p; i++) for (let j = 0; j < p; j++) for (let k = 0; k < p; k++) c[i * p + j] += a[i * p + k] * b[k * p + j];
  return c;
}

/** log|A| by Gaussian elimination with partial pivoting: an independent route to the determinant. */
function logDetByElimination(a: Float64Array, p: number): number {
  const m = Array.from(a);
  let logDet = 0;
  for (let c = 0; c < p; c++) {
    let pivot = c;
    for (let r = c + 1; r < p; r++) if (Math.abs(m[r * p + c]) > Math.abs(m[pivot * p + c])) pivot = r;
    if (pivot !== c) for (let k = 0; k < p; k++) [m[c * p + k], m[pivot * p + k]] = [m[pivot * p + k], m[c * p + k]];
    logDet += Math.log(Math.abs(m[c * p + c]));
    for (let r = c + 1; r < p; r++) {
      const f = m[r * p + c] / m[c * p + c];
      for (let k = c; k < p; k++) m[r * p + k] -= f * m[c * p + k];
    }
  }
  return logDet;
}

describe('Cholesky factorisation on hand-computed matrices', () => {
  test('2×2: [[4,2],[2,3]] = L Lᵀ with L = [[2,0],[1,√2]], |A| = 8, A⁻¹ = [[3,−2],[−2,4]]/8 (hand computation)', () => {
    const a = Float64Array.from([4, 2, 2, 3]);
    const l = new Float64Array(4);
    expect(cholesky(a, 2, l)).toBe(true);
    const expected = [2, 0, 1, Math.SQRT2];
    for (let k = 0; k < 4; k++) expect(l[k]).toBeCloseTo(expected[k], 15);
    expect(choleskyLogDet(l, 2)).toBeCloseTo(Math.log(8), 14);
    const inv = new Float64Array(4);
    choleskyInverse(l, 2, inv);
    const expectedInv = [3 / 8, -2 / 8, -2 / 8, 4 / 8];
    for (let k = 0; k < 4; k++) expect(inv[k]).toBeCloseTo(expectedInv[k], 15);
  });

  test('3×3: [[25,15,−5],[15,18,0],[−5,0,11]] has L = [[5,0,0],[3,3,0],[−1,1,3]] and |A| = 45² (hand computation: 25 = 5², 15 = 5·3, 18 = 3² + 3², …)', () => {
    const a = Float64Array.from([25, 15, -5, 15, 18, 0, -5, 0, 11]);
    const l = new Float64Array(9);
    expect(cholesky(a, 3, l)).toBe(true);
    const expected = [5, 0, 0, 3, 3, 0, -1, 1, 3];
    for (let k = 0; k < 9; k++) expect(l[k]).toBeCloseTo(expected[k], 14);
    expect(choleskyLogDet(l, 3)).toBeCloseTo(Math.log(2025), 13);
    // A x = b with x = (1, −2, 3): b = (25−30−15, 15−36, −5+33) = (−20, −21, 28).
    const x = new Float64Array(3);
    choleskySolve(l, 3, [-20, -21, 28], x);
    expect(Array.from(x).map((v) => Math.round(v * 1e12) / 1e12)).toEqual([1, -2, 3]);
  });

  test('reads only the lower triangle and works in place (the form the samplers use)', () => {
    const a = Float64Array.from([4, 999, 2, 3]); // upper entry is junk
    const logDet = choleskyLower(a, 2);
    expect(logDet).toBeCloseTo(Math.log(8), 14);
    expect(Array.from(a)).toEqual([2, 0, 1, Math.SQRT2]);
    const b = Float64Array.from([2, 4]); // L z = b → z = (1, 3/√2)
    solveLowerInPlace(a, 2, b);
    expect(b[0]).toBeCloseTo(1, 15);
    expect(b[1]).toBeCloseTo(3 / Math.SQRT2, 15);
    solveUpperTransposedInPlace(a, 2, b); // Lᵀ x = z → x = A⁻¹(2, 4) = (2·3 − 4·2, −2·2 + 4·4)/8
    expect(b[0]).toBeCloseTo(-2 / 8, 15);
    expect(b[1]).toBeCloseTo(12 / 8, 15);
  });

  test('reports matrices that are not positive definite', () => {
    const l = new Float64Array(4);
    expect(cholesky(Float64Array.from([1, 2, 2, 1]), 2, l)).toBe(false); // eigenvalues 3, −1
    expect(cholesky(Float64Array.from([1, 1, 1, 1]), 2, l)).toBe(false); // singular
    expect(cholesky(Float64Array.from([Number.NaN, 0, 0, 1]), 2, l)).toBe(false);
    expect(choleskyLower(Float64Array.from([0, 0, 0, 1]), 2)).toBeNaN();
  });
});

describe('random SPD matrices (fixed seed)', () => {
  const next = xorshift(20261201);
  for (const p of [1, 2, 4, 7, 12, 20]) {
    test(`p = ${p}: L Lᵀ = A, A·A⁻¹ = I, solves and log-determinant agree with elimination`, () => {
      const a = randomSpd(p, next);
      const l = new Float64Array(p * p);
      expect(cholesky(a, p, l)).toBe(true);
      // L is lower triangular and reproduces A.
      for (let i = 0; i < p; i++) for (let j = i + 1; j < p; j++) expect(l[i * p + j]).toBe(0);
      const lt = new Float64Array(p * p);
      for (let i = 0; i < p; i++) for (let j = 0; j < p; j++) lt[i * p + j] = l[j * p + i];
      const back = multiply(l, lt, p);
      for (let k = 0; k < p * p; k++) expect(Math.abs(back[k] - a[k])).toBeLessThan(1e-12 * p);

      const inv = new Float64Array(p * p);
      choleskyInverse(l, p, inv);
      const identity = multiply(a, inv, p);
      for (let i = 0; i < p; i++) {
        for (let j = 0; j < p; j++) expect(Math.abs(identity[i * p + j] - (i === j ? 1 : 0))).toBeLessThan(1e-12 * p);
      }
      // In place (out === l) gives the same inverse.
      const lCopy = l.slice();
      choleskyInverse(lCopy, p, lCopy);
      for (let k = 0; k < p * p; k++) expect(lCopy[k]).toBeCloseTo(inv[k], 12);

      expect(choleskyLogDet(l, p)).toBeCloseTo(logDetByElimination(a, p), 10);

      const b = Array.from({ length: p }, next);
      const x = new Float64Array(p);
      choleskySolve(l, p, b, x);
      for (let i = 0; i < p; i++) {
        let s = 0;
        for (let j = 0; j < p; j++) s += a[i * p + j] * x[j];
        expect(Math.abs(s - b[i])).toBeLessThan(1e-12 * p);
      }
      // Forward then back substitution is the same solve; the quadratic form is bᵀA⁻¹b.
      const z = new Float64Array(p);
      forwardSolve(l, p, b, z);
      const x2 = new Float64Array(p);
      backSolve(l, p, z, x2);
      for (let i = 0; i < p; i++) expect(x2[i]).toBeCloseTo(x[i], 12);
      let quad = 0;
      for (let i = 0; i < p; i++) quad += b[i] * x[i];
      expect(inverseQuadraticForm(l, p, b, new Float64Array(p))).toBeCloseTo(quad, 12);

      // L⁻¹ L = I.
      const m = new Float64Array(p * p);
      lowerTriangularInverse(l, p, m);
      const eye = multiply(m, l, p);
      for (let i = 0; i < p; i++) {
        for (let j = 0; j < p; j++) expect(Math.abs(eye[i * p + j] - (i === j ? 1 : 0))).toBeLessThan(1e-13 * p);
      }
    });
  }
});
