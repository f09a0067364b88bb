/**
 * Exact characteristic function of PG(b, z) and a Kolmogorov-distance bound for approximations
 * of it, written from the series definition of Polson, Scott & Windle (2013, JASA 108(504),
 * Definition 1), independently of src/: ω = Σ_k w_k g_k, w_k = 1/(2π²(k − ½)² + z²/2),
 * g_k ~ Gamma(b, 1), whose Laplace transform is cosh^b(z/2)/cosh^b(√((z²/2 + s)/2)). The
 * distance bound is the Gil-Pelaez (1951, Biometrika 38, 481–482) inversion formula applied to
 * the difference of two characteristic functions: sup_x |F_a − F_e| ≤ (1/π) ∫ |φ_a − φ_e|/u du.
 * Shared by tests/polya-gamma.test.ts and the counts-model tests.
 */
const PI = Math.PI;

/** Weights w_k = 1/(2π²(k − ½)² + z²/2) of Polson, Scott & Windle (2013, Definition 1). */
export function pgWeight(k: number, z: number): number {
  const h = k - 0.5;
  return 1 / (2 * PI * PI * h * h + 0.5 * z * z);
}

/**
 * Cumulant κ_r = b (r − 1)! Σ_k w_k^r for r ≥ 2 (cumulants of independent gammas add), summed
 * from the smallest term, plus an integral for the terms beyond 2·10⁵.
 */
export function pgCumulant(r: number, b: number, z: number): number {
  const n = 200_000;
  let sum = (2 * PI * PI) ** -r * n ** (1 - 2 * r) / (2 * r - 1);
  for (let k = n; k >= 1; k--) sum += pgWeight(k, z) ** r;
  let factorial = 1;
  for (let j = 2; j < r; j++) factorial *= j;
  return b * factorial * sum;
}

/** Mean b Σ_k w_k: the sum to N plus the tail integral atan(κ/N)/(2π²κ), κ = |z|/(2π). */
export function pgMeanBySeries(b: number, z: number): number {
  const n = 100_000;
  let sum = 0;
  for (let k = n; k >= 1; k--) sum += pgWeight(k, z);
  const kappa = Math.abs(z) / (2 * PI);
  const tail = kappa === 0 ? 1 / n : Math.atan(kappa / n) / kappa;
  return b * (sum + tail / (2 * PI * PI));
}

/** [Re, Im] of log cosh(w), w = √(c² − iu/2) (principal root), as w + log(1 + e^{−2w}) − log 2. */
function logCoshRoot(c: number, u: number): [number, number] {
  const re = c * c;
  const im = -0.5 * u;
  const wr = Math.sqrt(0.5 * (Math.hypot(re, im) + re));
  const wi = im / (2 * wr);
  const m = Math.exp(-2 * wr);
  const zr = 1 + m * Math.cos(2 * wi);
  const zi = -m * Math.sin(2 * wi);
  return [wr + 0.5 * Math.log(zr * zr + zi * zi) - Math.LN2, wi + Math.atan2(zi, zr)];
}

/** log E[e^{iuω}] for ω ~ PG(b, z) = b [log cosh(z/2) − log cosh(√(z²/4 − iu/2))]. */
export function pgLogCf(b: number, z: number, u: number): [number, number] {
  const c = 0.5 * Math.abs(z);
  const logCoshC = c + Math.log1p(Math.exp(-2 * c)) - Math.LN2;
  const [r, i] = logCoshRoot(c, u);
  return [b * (logCoshC - r), -b * i];
}

/**
 * log characteristic function of a gamma-series approximation: Σ_{k≤K} Gamma(b) w_k plus one
 * Gamma(α) θ with the exact tail mean and variance (a two-moment match).
 */
export function gammaSeriesLogCf(b: number, z: number, terms: number): (u: number) => [number, number] {
  const w: number[] = [];
  let s1 = 0;
  let s2 = 0;
  for (let k = 1; k <= terms; k++) {
    w.push(pgWeight(k, z));
    s1 += w[k - 1];
    s2 += w[k - 1] ** 2;
  }
  const tailMean = pgMeanBySeries(b, z) - b * s1;
  const tailVariance = pgCumulant(2, b, z) - b * s2;
  const theta = tailVariance / tailMean;
  const alpha = tailMean / theta;
  return (u) => {
    let re = -0.5 * alpha * Math.log1p(u * u * theta * theta);
    let im = alpha * Math.atan(u * theta);
    for (const x of w) {
      re -= 0.5 * b * Math.log1p(u * u * x * x);
      im += b * Math.atan(u * x);
    }
    return [re, im];
  };
}

/**
 * Upper bound on sup_x |F_approx(x) − F_exact(x)| for PG(b, z): (1/π) ∫ |φ_a − φ_e|/u du by
 * Simpson's rule up to where |φ_e| < e^{−45}, with φ_a − φ_e = φ_e (e^D − 1) evaluated without
 * cancellation. For small b the exact characteristic function decays slowly (like
 * exp(−b√(u/2)·…)), so the upper limit and the node count grow as b shrinks.
 */
export function pgKolmogorovBound(
  b: number,
  z: number,
  logCfApprox: (u: number) => [number, number],
  nodes = 4000,
): number {
  let limit = 1;
  while (pgLogCf(b, z, limit)[0] > -45) limit *= 1.25;
  const h = limit / nodes;
  let sum = 0;
  for (let j = 1; j <= nodes; j++) {
    const u = j * h;
    const [er, ei] = pgLogCf(b, z, u);
    const [ar, ai] = logCfApprox(u);
    const dr = ar - er;
    const di = ai - ei;
    const s = Math.sin(0.5 * di);
    const xr = Math.expm1(dr) * Math.cos(di) - 2 * s * s;
    const xi = Math.exp(dr) * Math.sin(di);
    sum += ((j === nodes ? 1 : j % 2 === 1 ? 4 : 2) * Math.exp(er) * Math.hypot(xr, xi)) / u;
  }
  return (sum * h) / (3 * PI);
}
