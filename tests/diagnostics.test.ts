import { readFileSync } from 'node:fs';
import { describe, expect, it } from 'vitest';
import {
  createScratch,
  diagnoseQuantity,
  essOfChains,
  rankNormalize,
  rhatOfChains,
  splitChains,
  splitRhat,
  type DetailedDiagnostics,
} from '../src/diagnostics/convergence.js';
import { normalQuantile } from '../src/diagnostics/normal-quantile.js';
import { SortOrder } from '../src/diagnostics/sort-order.js';

// ---------------------------------------------------------------------------------------------
// Seeded generators local to this file.

/** mulberry32 (Tommy Ettinger, public domain): a small 32-bit generator, enough for test data. */
function mulberry32(seed: number): () => number {
  let a = seed | 0;
  return () => {
    a = (a + 0x6d2b79f5) | 0;
    let t = Math.imul(a ^ (a >>> 15), 1 | a);
    t = (t + Math.imul(t ^ (t >>> 7), 61 | t)) ^ t;
    return ((t ^ (t >>> 14)) >>> 0) / 4294967296;
  };
}

/** Standard normal variates by Box–Muller (Box & Muller 1958). */
function normals(seed: number): () => number {
  const u = mulberry32(seed);
  let spare: number | null = null;
  return () => {
    if (spare !== null) {
      const s = spare;
      spare = null;
      return s;
    }
    let u1 = 0;
    while (u1 === 0) u1 = u();
    const r = Math.sqrt(-2 * Math.log(u1));
    const angle = 2 * Math.PI * u();
    spare = r * Math.sin(angle);
    return r * Math.cos(angle);
  };
}

/** m stationary AR(1) chains x_t = phi x_{t-1} + sqrt(1 - phi^2) e_t, unit marginal variance. */
function ar1Chains(m: number, n: number, phi: number, seed: number): Float64Array[] {
  const z = normals(seed);
  const innovationSd = Math.sqrt(1 - phi * phi);
  const chains: Float64Array[] = [];
  for (let k = 0; k < m; k++) {
    const c = new Float64Array(n);
    let x = z();
    for (let t = 0; t < n; t++) {
      if (t > 0) x = phi * x + innovationSd * z();
      c[t] = x;
    }
    chains.push(c);
  }
  return chains;
}

/**
 * The input generator of tests/fixtures/diagnostics/posterior-reference.R: MINSTD (Park & Miller
 * 1988) uniforms and + - * / floor only, so R and JavaScript build bit-identical draws.
 */
interface ReferenceSpec {
  m: number;
  n: number;
  seed: number;
  phi: number;
  shift: number;
  scale: number;
  transform: 'none' | 'floor4' | 'cube' | 'binary';
}
function referenceDraws(spec: ReferenceSpec): Float64Array[] {
  let state = spec.seed;
  const u = (): number => {
    const p = 48271 * state;
    state = p - Math.floor(p / 2147483647) * 2147483647;
    return state / 2147483647;
  };
  const chains: Float64Array[] = [];
  for (let k = 0; k < spec.m; k++) {
    const c = new Float64Array(spec.n);
    let a = 0;
    for (let t = 0; t < spec.n; t++) {
      const e = u() + u() + u() + u() - 2;
      a = t === 0 ? e : spec.phi * a + e;
      const v =
        spec.transform === 'none'
          ? a
          : spec.transform === 'floor4'
            ? Math.floor(4 * a) / 4
            : spec.transform === 'cube'
              ? a * a * a
              : a > 0.3
                ? 1
                : 0;
      c[t] = v * (1 + spec.scale * k) + spec.shift * k;
    }
    chains.push(c);
  }
  return chains;
}

// ---------------------------------------------------------------------------------------------
// A deliberately plain, slow transcription of the same formulas (Vehtari et al. 2021 as coded in
// posterior 1.4.0): index sort with a comparator for ranks, explicit folding, every lag of the
// autocovariance by a double loop. Only the inverse normal CDF is shared; it is checked on its own
// below.

type Matrix = number[][]; // matrix[j] = chain j

function plainSplit(chains: Matrix): Matrix {
  const n = chains[0].length;
  if (n === 1) return chains.map((c) => c.slice());
  const half = n / 2;
  const first = chains.map((c) => c.slice(0, Math.floor(half)));
  const second = chains.map((c) => c.slice(Math.ceil(half + 1) - 1)); // R: x[ceiling(half + 1):n]
  return [...first, ...second];
}

function plainAverageRanks(values: number[]): number[] {
  const order = values.map((_, i) => i).sort((a, b) => values[a] - values[b]);
  const ranks = new Array<number>(values.length);
  let a = 0;
  while (a < order.length) {
    let b = a;
    while (b + 1 < order.length && values[order[b + 1]] === values[order[a]]) b++;
    const average = (a + 1 + (b + 1)) / 2;
    for (let k = a; k <= b; k++) ranks[order[k]] = average;
    a = b + 1;
  }
  return ranks;
}

function plainZScale(chains: Matrix): Matrix {
  const flat = chains.flat();
  const ranks = plainAverageRanks(flat);
  const s = flat.length;
  const z = ranks.map((r) => normalQuantile((r - 3 / 8) / (s - 2 * (3 / 8) + 1)));
  const n = chains[0].length;
  return chains.map((_, j) => z.slice(j * n, (j + 1) * n));
}

function plainSorted(values: number[]): number[] {
  return values.slice().sort((a, b) => a - b);
}

function plainMedian(values: number[]): number {
  const s = plainSorted(values);
  const h = Math.floor(s.length / 2);
  return s.length % 2 === 1 ? s[h] : (s[h - 1] + s[h]) / 2;
}

function plainQuantile7(values: number[], p: number): number {
  const s = plainSorted(values);
  const index = 1 + (s.length - 1) * p;
  const lo = Math.floor(index);
  const hi = Math.ceil(index);
  let q = s[lo - 1];
  if (index > lo && s[hi - 1] !== q) {
    const h = index - lo;
    q = (1 - h) * q + h * s[hi - 1];
  }
  return q;
}

function plainIsConstant(chains: Matrix): boolean {
  const flat = chains.flat();
  return Math.abs(Math.max(...flat) - Math.min(...flat)) < Number.EPSILON;
}

function plainMean(x: number[]): number {
  return x.reduce((s, v) => s + v, 0) / x.length;
}

function plainVar(x: number[]): number {
  const m = plainMean(x);
  return x.reduce((s, v) => s + (v - m) * (v - m), 0) / (x.length - 1);
}

function plainRhat(chains: Matrix): number {
  if (plainIsConstant(chains)) return Number.NaN;
  const n = chains[0].length;
  const between = n * plainVar(chains.map(plainMean));
  const within = plainMean(chains.map(plainVar));
  return Math.sqrt((between / within + n - 1) / n);
}

function plainAutocovariance(x: number[]): number[] {
  const n = x.length;
  const m = plainMean(x);
  const out: number[] = [];
  for (let t = 0; t < n; t++) {
    let s = 0;
    for (let i = 0; i + t < n; i++) s += (x[i] - m) * (x[i + t] - m);
    out.push(s / n);
  }
  return out;
}

function plainEss(chains: Matrix): number {
  const m = chains.length;
  const n = chains[0].length;
  if (n < 3 || plainIsConstant(chains)) return Number.NaN;
  const acov = chains.map(plainAutocovariance);
  const acovMean = (t: number): number => plainMean(acov.map((a) => a[t]));
  const meanVar = (acovMean(0) * n) / (n - 1);
  let varPlus = (meanVar * (n - 1)) / n;
  if (m > 1) varPlus += plainVar(chains.map(plainMean));
  const rhoAt = (t: number): number => 1 - (meanVar - acovMean(t)) / varPlus;
  const rho = new Array<number>(n).fill(0);
  let t = 0;
  let even = 1;
  let odd = rhoAt(1);
  rho[0] = even;
  rho[1] = odd;
  while (t < n - 5 && !Number.isNaN(even + odd) && even + odd > 0) {
    t += 2;
    even = rhoAt(t);
    odd = rhoAt(t + 1);
    if (even + odd >= 0) {
      rho[t] = even;
      rho[t + 1] = odd;
    }
  }
  const maxT = t;
  if (even > 0) rho[maxT] = even;
  for (let k = 2; k <= maxT - 2; k += 2) {
    if (rho[k] + rho[k + 1] > rho[k - 2] + rho[k - 1]) {
      rho[k] = (rho[k - 2] + rho[k - 1]) / 2;
      rho[k + 1] = rho[k];
    }
  }
  const upTo = maxT === 0 ? 1 : maxT; // R's rho_hat_t[1:max_t] is rho_hat_t[1] when max_t = 0
  let tau = -1 + 2 * rho.slice(0, upTo).reduce((s, v) => s + v, 0) + rho[maxT];
  tau = Math.max(tau, 1 / Math.log10(m * n));
  return (m * n) / tau;
}

function plainDiagnose(input: Float64Array[]): DetailedDiagnostics {
  const chains: Matrix = input.map((c) => Array.from(c));
  const flat = chains.flat();
  if (flat.some((v) => !Number.isFinite(v))) {
    const nan = Number.NaN;
    return { rhat: nan, essBulk: nan, essTail: nan, mcseMean: nan, rhatBulk: nan, rhatTail: nan, essMean: nan, essQ05: nan, essQ95: nan };
  }
  const median = plainMedian(flat);
  const folded = chains.map((c) => c.map((v) => Math.abs(v - median)));
  const zBulk = plainZScale(plainSplit(chains));
  const zTail = plainZScale(plainSplit(folded));
  const rhatBulk = plainRhat(zBulk);
  const rhatTail = plainRhat(zTail);
  const essQuantile = (p: number): number => {
    if (plainIsConstant(chains)) return Number.NaN;
    const q = plainQuantile7(flat, p);
    return plainEss(plainSplit(chains.map((c) => c.map((v) => (v <= q ? 1 : 0)))));
  };
  const essQ05 = essQuantile(0.05);
  const essQ95 = essQuantile(0.95);
  const essMean = plainEss(plainSplit(chains));
  const nanOr = (f: (a: number, b: number) => number, a: number, b: number): number =>
    Number.isNaN(a) || Number.isNaN(b) ? Number.NaN : f(a, b);
  return {
    rhat: nanOr(Math.max, rhatBulk, rhatTail),
    essBulk: plainEss(zBulk),
    essTail: nanOr(Math.min, essQ05, essQ95),
    mcseMean: Math.sqrt(plainVar(flat)) / Math.sqrt(essMean),
    rhatBulk,
    rhatTail,
    essMean,
    essQ05,
    essQ95,
  };
}

const FIELDS = ['rhat', 'essBulk', 'essTail', 'mcseMean', 'rhatBulk', 'rhatTail', 'essMean', 'essQ05', 'essQ95'] as const;

/** |actual - expected| <= tol · max(1, |expected|), NaN only equal to NaN. */
function expectClose(actual: number, expected: number, tol: number, label: string): void {
  if (Number.isNaN(expected)) {
    expect(actual, label).toBeNaN();
    return;
  }
  expect(Number.isFinite(actual), `${label}: ${actual}`).toBe(true);
  expect(Math.abs(actual - expected), `${label}: ${actual} vs ${expected}`).toBeLessThanOrEqual(
    tol * Math.max(1, Math.abs(expected)),
  );
}

function expectAllClose(actual: DetailedDiagnostics, expected: Partial<DetailedDiagnostics>, tol: number, label: string): void {
  for (const f of FIELDS) if (expected[f] !== undefined) expectClose(actual[f], expected[f] as number, tol, `${label} ${f}`);
}

// ---------------------------------------------------------------------------------------------

describe('normalQuantile (Wichura 1988, AS 241)', () => {
  it('matches R 4.2.2 qnorm (also AS 241) to the last bits', () => {
    // Values printed by R 4.2.2: sprintf("%.17g", qnorm(p)).
    const table: Array<[number, number]> = [
      [1e-300, -37.047096299361201],
      [1e-100, -21.273453560965319],
      [1e-20, -9.2623400897984052],
      [1e-10, -6.361340902404056],
      [1e-5, -4.2648907939228256],
      [0.001, -3.090232306167813],
      [0.025, -1.9599639845400538],
      [0.05, -1.6448536269514726],
      [0.075, -1.4395314709384557], // just inside the central branch (|p - 1/2| <= 0.425)
      [0.0749, -1.4402382675279632], // just inside the tail branch
      [0.3, -0.5244005127080407],
      [0.6, 0.2533471031357998],
      [0.975, 1.9599639845400536],
      [0.99999, 4.26489079392384],
    ];
    for (const [p, z] of table) expect(Math.abs(normalQuantile(p) - z)).toBeLessThanOrEqual(2 * Number.EPSILON * Math.abs(z));
    expect(normalQuantile(0.5)).toBe(0);
    expect(normalQuantile(0)).toBe(Number.NEGATIVE_INFINITY);
    expect(normalQuantile(1)).toBe(Number.POSITIVE_INFINITY);
    expect(normalQuantile(-0.1)).toBeNaN();
    expect(normalQuantile(Number.NaN)).toBeNaN();
  });

  it('inverts the normal CDF obtained by numerical integration of the density', () => {
    // Phi(z) = 1/2 + integral_0^z phi by composite Simpson, 4000 panels: error below 1e-14 for |z| <= 4.
    const phiCdf = (z: number): number => {
      const panels = 4000;
      const h = z / panels;
      const f = (x: number): number => Math.exp(-0.5 * x * x) / Math.sqrt(2 * Math.PI);
      let s = f(0) + f(z);
      for (let i = 1; i < panels; i++) s += (i % 2 === 1 ? 4 : 2) * f(i * h);
      return 0.5 + (s * h) / 3;
    };
    for (const p of [1e-4, 0.003, 0.02, 0.1, 0.33, 0.5, 0.71, 0.9, 0.999]) {
      expect(Math.abs(phiCdf(normalQuantile(p)) - p)).toBeLessThan(1e-13);
    }
  });
});

describe('SortOrder (radix sort with repair and fallback)', () => {
  function check(values: number[]): void {
    const v = Float64Array.from(values);
    const so = new SortOrder(v.length + 3); // capacity larger than needed on purpose
    so.compute(v, v.length);
    const expected = values.slice().sort((a, b) => a - b);
    const seen = new Set<number>();
    for (let p = 0; p < v.length; p++) {
      expect(so.sorted[p]).toBe(v[so.order[p]]);
      expect(so.sorted[p] === expected[p], `position ${p}`).toBe(true); // -0 and 0 count as equal
      seen.add(so.order[p]);
    }
    expect(seen.size).toBe(v.length); // a permutation
  }
  it('sorts continuous, tied, signed-zero, constant, tiny and outlier-stretched inputs', () => {
    const u = mulberry32(99);
    check(Array.from({ length: 5000 }, () => u() - 0.5));
    check(Array.from({ length: 3000 }, () => Math.floor(u() * 7) - 3)); // heavy ties
    check([0, -0, 0, -0, 1e-300, -1e-300, 5e-324, -5e-324]);
    check(Array.from({ length: 100 }, () => 4.25)); // constant
    check([]);
    check([3]);
    check(Array.from({ length: 2000 }, (_, i) => (i === 5 ? 1e200 : i === 6 ? -1e200 : u()))); // comparison-sort fallback
    check(Array.from({ length: 2000 }, (_, i) => (i === 5 ? Number.MAX_VALUE : i === 6 ? -Number.MAX_VALUE : u()))); // range overflows
    check(Array.from({ length: 4000 }, () => 1 + (u() - 0.5) * 1e-12)); // concentrated
  });
});

describe('diagnoseQuantity against posterior 1.4.0 (reference implementation of Vehtari et al. 2021)', () => {
  // Values from tests/fixtures/diagnostics/posterior-reference.R, run with R 4.2.2 and the R package
  // posterior 1.4.0 (Debian r-cran-posterior 1.4.0+dfsg-1): rhat, ess_bulk, ess_tail, mcse_mean,
  // the bulk and folded parts of rhat, ess_mean and ess_quantile(x, 0.05 / 0.95). posterior uses an
  // FFT for the autocovariances and long-double sums, so agreement is to rounding, not to the bit:
  // tolerance 1e-9 relative.
  const specs: Record<string, ReferenceSpec> = {
    'ar-odd': { m: 4, n: 503, seed: 11, phi: 0.6, shift: 0.1, scale: 0, transform: 'none' },
    ties: { m: 4, n: 200, seed: 22, phi: 0.3, shift: 0, scale: 0, transform: 'floor4' },
    'one-chain': { m: 1, n: 1000, seed: 33, phi: 0, shift: 0, scale: 0, transform: 'none' },
    slow: { m: 2, n: 3000, seed: 44, phi: 0.995, shift: 0, scale: 0, transform: 'none' },
    scales: { m: 4, n: 400, seed: 55, phi: 0, shift: 0, scale: 1, transform: 'none' },
    skewed: { m: 3, n: 301, seed: 66, phi: 0.2, shift: 0, scale: 0, transform: 'cube' },
    tiny: { m: 2, n: 7, seed: 77, phi: 0, shift: 0, scale: 0, transform: 'none' },
    binary: { m: 4, n: 100, seed: 88, phi: 0.5, shift: 0, scale: 0, transform: 'binary' },
    shifted: { m: 4, n: 250, seed: 99, phi: 0.1, shift: 1, scale: 0, transform: 'none' },
  };
  const N = Number.NaN;
  const expected: Record<string, DetailedDiagnostics & { first: number; last: number }> = {
    'ar-odd': { rhat: 1.0128626425346885, essBulk: 446.52369421842621, essTail: 1017.1845666479471, mcseMean: 0.034439017802961429, rhatBulk: 1.0128626425346885, rhatTail: 1.0039268448171936, essMean: 448.77424793369954, essQ05: 1017.1845666479471, essQ95: 1197.6944124487172, first: 0.35820690419441403, last: 0.036824866530294986 },
    ties: { rhat: 1.0081216105187152, essBulk: 352.41842097841453, essTail: 562.76821370968162, mcseMean: 0.033711429606028444, rhatBulk: 1.0081216105187152, rhatTail: 0.99686575558376267, essMean: 355.07974986665982, essQ05: 562.76821370968162, essQ95: 756.65149385246809, first: -0.5, last: 0.75 },
    'one-chain': { rhat: 1.000149788881707, essBulk: 962.60955181412646, essTail: 1020.5198260197818, mcseMean: 0.018307724277213191, rhatBulk: 0.99916452192106209, rhatTail: 1.000149788881707, essMean: 969.54898821588711, essQ05: 1020.5198260197818, essQ95: 1072.2439789898533, first: 0.074620712583242099, last: 0.0089300461155037425 },
    slow: { rhat: 1.158983773267616, essBulk: 9.9644027437236335, essTail: 31.900778318136322, mcseMean: 1.6866778110114227, rhatBulk: 1.158983773267616, rhatTail: 1.092170989699065, essMean: 10.006978573777554, essQ05: 52.244959794972587, essQ95: 31.900778318136322, first: -0.56717238322234387, last: -9.3617999576617965 },
    scales: { rhat: 1.1581653374765679, essBulk: 1346.135834905765, essTail: 111.60456957647021, mcseMean: 0.044147771141670483, rhatBulk: 0.99917574129912301, rhatTail: 1.1581653374765679, essMean: 1320.5876349838272, essQ05: 133.22659252544264, essQ95: 111.60456957647021, first: -1.2089654790279294, last: -2.3405952799788654 },
    skewed: { rhat: 1.0009213078958163, essBulk: 550.81091070649825, essTail: 779.40735770070921, mcseMean: 0.026232166200401617, rhatBulk: 1.0009213078958163, rhatTail: 1.0003904059518185, essMean: 635.99490465461474, essQ05: 918.5481442038398, essQ95: 779.40735770070921, first: 0.0033240547083267335, last: -0.032166320901250767 },
    tiny: { rhat: 0.97217947333164401, essBulk: 6, essTail: 6, mcseMean: 0.20239006659183828, rhatBulk: 0.97217947333164401, rhatTail: 0.85996999908415461, essMean: 6, essQ05: 6, essQ95: 6, first: -0.49255167063910132, last: 0.1946821064663502 },
    binary: { rhat: 1.0028635471078042, essBulk: 215.2683457324836, essTail: N, mcseMean: 0.030117579653960922, rhatBulk: 1.0028635471078042, rhatTail: 1.0028635471078042, essMean: 215.26834573248371, essQ05: 215.26834573248371, essQ95: N, first: 0, last: 1 },
    shifted: { rhat: 2.0800138188922688, essBulk: 5.4810863430895544, essTail: 38.277395507473223, mcseMean: 0.55102700345512257, rhatBulk: 2.0800138188922688, rhatTail: 1.3212941852201894, essMean: 5.2313738096066738, essQ05: 42.320254716155979, essQ95: 38.277395507473223, first: -0.77613786225027304, last: 2.9960205211494393 },
  };

  for (const [name, spec] of Object.entries(specs)) {
    it(`${name}: ${spec.m} chains × ${spec.n} draws`, () => {
      const chains = referenceDraws(spec);
      const ref = expected[name];
      // Same input as in R, bit for bit.
      expect(chains[0][0]).toBe(ref.first);
      expect(chains[spec.m - 1][spec.n - 1]).toBe(ref.last);
      expectAllClose(diagnoseQuantity(chains), ref, 1e-9, name);
    });
  }

  it("posterior's own vector test (set.seed(1234); rnorm(1000)) and its acceptance ranges", () => {
    // stan-dev/posterior tests/testthat/test-convergence.R, "convergence diagnostics accept vectors
    // as input": rhat in (0.99, 1.01), ess_bulk in (900, 1100), ess_tail in (750, 850),
    // mcse_mean in (0.02, 0.04). Draws saved from R 4.2.2 (Mersenne-Twister / Inversion).
    const text = readFileSync(new URL('./fixtures/diagnostics/rnorm-1000-seed-1234.txt', import.meta.url), 'utf8');
    const draws = Float64Array.from(text.trim().split('\n').map(Number));
    expect(draws.length).toBe(1000);
    const d = diagnoseQuantity([draws]);
    expect(d.rhat).toBeGreaterThan(0.99);
    expect(d.rhat).toBeLessThan(1.01);
    expect(d.essBulk).toBeGreaterThan(900);
    expect(d.essBulk).toBeLessThan(1100);
    expect(d.essTail).toBeGreaterThan(750);
    expect(d.essTail).toBeLessThan(850);
    expect(d.mcseMean).toBeGreaterThan(0.02);
    expect(d.mcseMean).toBeLessThan(0.04);
    // And the exact values posterior 1.4.0 gives for these draws.
    expectAllClose(d, { rhat: 1.0016670685970686, essBulk: 955.13767089769169, essTail: 782.01377619929769, mcseMean: 0.03226010803902675 }, 1e-9, 'rnorm1234');
  });

  it('caps the ESS at S·log10(S) for antithetic chains (posterior test "negative ess estimates are avoided")', () => {
    // posterior's test: arima.sim(list(ar = -0.9), 1000) gives ess_basic = 3000 = 1000 · log10(1000).
    // Here: our own AR(1) with phi = -0.9, 2 chains × 1000 (4 split chains of 500): cap 2000·log10(2000).
    const chains = ar1Chains(2, 1000, -0.9, 4242);
    expect(essOfChains(splitChains(chains))).toBeCloseTo(2000 * Math.log10(2000), 9);
    expect(diagnoseQuantity(chains).essMean).toBeCloseTo(2000 * Math.log10(2000), 9);
  });
});

describe('diagnoseQuantity equals the plain slow transcription', () => {
  const cases: Array<[string, Float64Array[]]> = [
    ['normal 4 × 503 (odd length)', ar1Chains(4, 503, 0, 1)],
    ['AR(0.7) 3 × 400', ar1Chains(3, 400, 0.7, 2)],
    ['rounded draws with many ties 4 × 251', ar1Chains(4, 251, 0.4, 3).map((c) => c.map((v) => Math.round(v * 3) / 3))],
    ['very coarse ties 2 × 120', ar1Chains(2, 120, 0.2, 4).map((c) => c.map((v) => Math.sign(v) * Math.round(v * v)))],
    ['one chain of 999', ar1Chains(1, 999, 0.3, 5)],
    ['slow AR(0.995) 2 × 1500 (FFT path)', ar1Chains(2, 1500, 0.995, 6)],
    ['skewed exp() 4 × 300', ar1Chains(4, 300, 0.5, 7).map((c) => c.map((v) => Math.exp(2 * v)))],
    ['short chains 3 × 9', ar1Chains(3, 9, 0.1, 8)],
    ['one draw per chain 4 × 1', ar1Chains(4, 1, 0, 9)],
    // Small spread far from zero. (The raw-draw ESS behind the MCSE is conditioned by
    // ulp(mean)/sd: summation order alone moves it by that relative amount, so 1e-10 agreement
    // needs ulp(1000)/sd below ~1e-12; the rank-based parts do not depend on the scale at all.)
    ['small spread far from zero: 1000 + 0.1 z, 4 × 200', ar1Chains(4, 200, 0.3, 15).map((c) => c.map((v) => 1000 + 0.1 * v))],
    // Outliers stretch the range so that the radix keys collapse: exercises the comparison-sort fallback.
    ['extreme outliers 4 × 200', ar1Chains(4, 200, 0.3, 16).map((c, k) => c.map((v, i) => (i === 7 ? (k - 1.5) * 1e150 : v)))],
    ['heavy tails (z^9) 3 × 300', ar1Chains(3, 300, 0.3, 19).map((c) => c.map((v) => v ** 9))],
    ['two draws per chain 4 × 2', ar1Chains(4, 2, 0, 10)],
  ];
  for (const [label, chains] of cases) {
    it(label, () => {
      const expected = plainDiagnose(chains);
      expectAllClose(diagnoseQuantity(chains), expected, 1e-10, label);
      // Same answer whichever autocovariance path is taken.
      const n = chains[0].length;
      expectAllClose(diagnoseQuantity(chains, createScratch(chains.length, n, { fftFromLag: 1 })), expected, 1e-10, `${label} (FFT)`);
      expectAllClose(diagnoseQuantity(chains, createScratch(chains.length, n, { fftFromLag: Infinity })), expected, 1e-10, `${label} (direct)`);
    });
  }

  it('a reused scratch gives the same answers as a fresh one', () => {
    const scratch = createScratch(4, 300);
    const inputs = [ar1Chains(4, 300, 0.99, 11), ar1Chains(4, 300, 0, 12), ar1Chains(4, 300, 0.5, 13).map((c) => c.map(Math.round))];
    for (const chains of inputs) expectAllClose(diagnoseQuantity(chains, scratch), plainDiagnose(chains), 1e-10, 'reused');
  });

  it('leaves all draws sorted in scratch.sortedAll (read by the posterior summaries)', () => {
    for (const [m, n] of [[4, 300], [3, 301], [2, 1]]) {
      const chains = ar1Chains(m, n, 0.5, 20 + n);
      const scratch = createScratch(m, n);
      diagnoseQuantity(chains, scratch);
      const expected = chains.flatMap((c) => Array.from(c)).sort((a, b) => a - b);
      expect(Array.from(scratch.sortedAll.subarray(0, m * n))).toEqual(expected);
    }
  });

  it('exported helpers agree with the plain versions', () => {
    const chains = ar1Chains(3, 201, 0.6, 14);
    const plain = chains.map((c) => Array.from(c));
    expect(splitChains(chains).map((c) => Array.from(c))).toEqual(plainSplit(plain));
    const z = rankNormalize(chains).map((c) => Array.from(c));
    const zPlain = plainZScale(plain);
    for (let j = 0; j < z.length; j++) for (let i = 0; i < z[j].length; i++) expectClose(z[j][i], zPlain[j][i], 1e-12, 'z');
    expectClose(rhatOfChains(chains), plainRhat(plain), 1e-12, 'rhat');
    expectClose(splitRhat(chains), plainRhat(plainSplit(plain)), 1e-12, 'split rhat');
    expectClose(essOfChains(chains), plainEss(plain), 1e-10, 'ess');
  });
});

describe('behaviour on simulated chains', () => {
  // Tolerances: sampling spread of each statistic over 200–400 replicate seeds, simulated once
  // offline with this file's generators (numbers quoted at each check); the tests accept about
  // ±4 replicate sds around the expected value.

  it('iid N(0,1), 4 chains × 1000: R-hat near 1, bulk ESS near 4000, tail ESS near 3850', () => {
    // 400 replicates: R-hat mean 1.0003, sd 0.0005 (max 1.0024); bulk ESS mean 3930, sd 174;
    // tail ESS mean 3844, sd 166.
    const d = diagnoseQuantity(ar1Chains(4, 1000, 0, 2024));
    expect(d.rhat).toBeGreaterThan(0.99); // posterior test-convergence.R range for iid draws
    expect(d.rhat).toBeLessThan(1.01);
    expect(Math.abs(d.essBulk - 4000)).toBeLessThan(4 * 174 + 70); // + the estimator's bias (−70)
    expect(Math.abs(d.essTail - 3844)).toBeLessThan(4 * 166);
  });

  it('iid N(0,1), 1 chain × 1000 (split into 2): finite and close to posterior-style values', () => {
    // 400 replicates: bulk ESS mean 965, sd 86; tail ESS mean 911, sd 86; R-hat sd 0.0017, max 1.012.
    const d = diagnoseQuantity(ar1Chains(1, 1000, 0, 77));
    expect(Math.abs(d.essBulk - 965)).toBeLessThan(4 * 86);
    expect(Math.abs(d.essTail - 911)).toBeLessThan(4 * 86);
    expect(Math.abs(d.rhat - 1)).toBeLessThan(4 * 0.0017 + 0.001);
  });

  it('chains with shifted means (chain k shifted by k sd): R-hat far above 1.01', () => {
    // 400 replicates of 4 × 1000: R-hat mean 1.536, sd 0.016.
    const z = normals(31);
    const chains = [0, 1, 2, 3].map((k) => Float64Array.from({ length: 1000 }, () => z() + k));
    const d = diagnoseQuantity(chains);
    expect(d.rhat).toBeGreaterThan(1.4);
    expect(d.rhatBulk).toBe(d.rhat);
  });

  it('chains with equal means and different scales: only the folded R-hat catches it', () => {
    // 400 replicates of 4 × 1000 with sd 1, 2, 3, 4: bulk R-hat mean 1.0000, sd 0.0006;
    // folded R-hat mean 1.150, sd 0.009.
    const z = normals(32);
    const chains = [0, 1, 2, 3].map((k) => Float64Array.from({ length: 1000 }, () => z() * (1 + k)));
    const d = diagnoseQuantity(chains);
    expect(d.rhatBulk).toBeLessThan(1.01);
    expect(splitRhat(chains)).toBeLessThan(1.01); // classic split R-hat misses it too
    expect(d.rhatTail).toBeGreaterThan(1.1);
    expect(d.rhat).toBe(d.rhatTail);
  });

  // Stationary AR(1): integrated autocorrelation time (1 + phi)/(1 - phi) (common practice; e.g.
  // Geyer 1992, Statistical Science 7(4), sec. 3), so ESS = S (1 - phi)/(1 + phi).
  // The tail indicators I[x <= q] of a Gaussian AR(1) have lag-t correlation
  //   (Phi2(q, q; phi^t) - p^2) / (p (1 - p)),  Phi2(q,q;r) - p^2 = integral_0^r phi2(q,q;s) ds
  // (Plackett 1954, Biometrika 41, 351–360), integrated numerically below.
  function indicatorEss(total: number, phi: number, p: number): number {
    const q = normalQuantile(p);
    const density = (s: number): number => Math.exp((-q * q) / (1 + s)) / (2 * Math.PI * Math.sqrt(1 - s * s));
    let sumCorrelation = 0;
    for (let t = 1; phi ** t > 1e-17; t++) {
      const r = phi ** t;
      const panels = 200; // Simpson; the integrand is smooth on [0, 0.9]
      const h = r / panels;
      let s = density(0) + density(r);
      for (let i = 1; i < panels; i++) s += (i % 2 === 1 ? 4 : 2) * density(i * h);
      sumCorrelation += (s * h) / 3 / (p * (1 - p));
    }
    return total / (1 + 2 * sumCorrelation);
  }

  const arCases = [
    // phi, replicate sds over 200 seeds of 4 × 5000 (S = 20000) of the bulk ESS and of the ESS of
    // I[x <= q05] and I[x <= q95]. Replicate means: phi 0.5: bulk 6623 (target 6667), q05 11834,
    // q95 11823 (indicator formula 11859); phi 0.9: bulk 1046 (target 1053), q05 2386, q95 2404
    // (indicator formula 2334).
    { phi: 0.5, sdBulk: 255, sdQ05: 562, sdQ95: 593 },
    { phi: 0.9, sdBulk: 89, sdQ05: 236, sdQ95: 276 },
  ];
  for (const { phi, sdBulk, sdQ05, sdQ95 } of arCases) {
    it(`AR(1) phi = ${phi}, 16 replicates of 4 × 5000: ESS ≈ S(1-phi)/(1+phi); tail ESS ≈ indicator formula`, () => {
      const replicates = 16;
      const total = 20000;
      const target = (total * (1 - phi)) / (1 + phi);
      const tailTarget = indicatorEss(total, phi, 0.05);
      const scratch = createScratch(4, 5000);
      let sumBulk = 0;
      let sumMean = 0;
      let sumQ05 = 0;
      let sumQ95 = 0;
      for (let r = 0; r < replicates; r++) {
        const d = diagnoseQuantity(ar1Chains(4, 5000, phi, 700 + r), scratch);
        expect(Math.abs(d.essBulk - target)).toBeLessThan(4 * sdBulk);
        sumBulk += d.essBulk;
        sumMean += d.essMean;
        sumQ05 += d.essQ05;
        sumQ95 += d.essQ95;
      }
      // Averages over 16 replicates: sd shrinks by 4, so ±sd is a 4-sd band.
      expect(Math.abs(sumBulk / replicates - target)).toBeLessThan(sdBulk);
      expect(Math.abs(sumMean / replicates - target)).toBeLessThan(sdBulk);
      expect(Math.abs(sumQ05 / replicates - tailTarget)).toBeLessThan(sdQ05);
      expect(Math.abs(sumQ95 / replicates - tailTarget)).toBeLessThan(sdQ95);
    });
  }

  it('MCSE of the mean for iid draws ≈ sd/sqrt(S)', () => {
    // mcse·sqrt(S)/sd = sqrt(S/ESS_mean); 400 replicates of 4 × 1000: ESS_mean mean 3930, sd 174,
    // so the ratio has mean 1.009 and sd about 0.022.
    const chains = ar1Chains(4, 1000, 0, 555);
    const all = chains.flatMap((c) => Array.from(c));
    const sd = Math.sqrt(plainVar(all));
    const d = diagnoseQuantity(chains);
    expect(Math.abs((d.mcseMean * Math.sqrt(all.length)) / sd - 1.009)).toBeLessThan(4 * 0.022);
  });

  it('MCSE of the mean matches the actual spread of the mean over replicate runs (AR(0.5), 4 × 500)', () => {
    // The empirical sd of the mean over R = 200 replicates has relative standard error
    // about 1/sqrt(2R) = 5%; the mean of the MCSEs is much more precise (sd of one MCSE ≈ 6%).
    const replicates = 200;
    const scratch = createScratch(4, 500);
    const means: number[] = [];
    let sumMcse = 0;
    for (let r = 0; r < replicates; r++) {
      const chains = ar1Chains(4, 500, 0.5, 3000 + r);
      means.push(plainMean(chains.flatMap((c) => Array.from(c))));
      sumMcse += diagnoseQuantity(chains, scratch).mcseMean;
    }
    const spread = Math.sqrt(plainVar(means));
    expect(Math.abs(sumMcse / replicates / spread - 1)).toBeLessThan(4 * 0.05);
    // And both against the exact sd of the mean of a stationary AR(1) path of length n
    // (sum of its autocovariances): Var(mean_k) = (1/n^2) sum_{|t|<n} (n - |t|) phi^|t|.
    const n = 500;
    let v = n;
    for (let t = 1; t < n; t++) v += 2 * (n - t) * 0.5 ** t;
    const exactSd = Math.sqrt(v / (n * n) / 4);
    expect(Math.abs(sumMcse / replicates / exactSd - 1)).toBeLessThan(4 * 0.06 / Math.sqrt(replicates) + 0.01);
  });
});

describe('edge cases', () => {
  it('constant draws give NaN R-hat and ESS (posterior: NA)', () => {
    const chains = [new Float64Array(100).fill(2.5), new Float64Array(100).fill(2.5)];
    const d = diagnoseQuantity(chains);
    for (const f of FIELDS) expect(d[f], f).toBeNaN();
  });

  it('a single NaN or infinite draw makes every diagnostic NaN', () => {
    for (const bad of [Number.NaN, Number.POSITIVE_INFINITY, Number.NEGATIVE_INFINITY]) {
      const chains = ar1Chains(4, 200, 0.2, 17);
      chains[2][117] = bad;
      const d = diagnoseQuantity(chains);
      for (const f of FIELDS) expect(d[f], `${f} with ${bad}`).toBeNaN();
    }
  });

  it('a single chain is split into two and gives finite diagnostics', () => {
    const d = diagnoseQuantity(ar1Chains(1, 400, 0.3, 18));
    for (const f of FIELDS) expect(Number.isFinite(d[f]), f).toBe(true);
    expect(splitChains(ar1Chains(1, 401, 0, 1)).map((c) => c.length)).toEqual([200, 200]);
  });

  it('rejects chains of unequal length and a scratch of the wrong shape', () => {
    expect(() => diagnoseQuantity([new Float64Array(10), new Float64Array(11)])).toThrow(/chain 1 has 11 draws/);
    expect(() => diagnoseQuantity(ar1Chains(2, 10, 0, 1), createScratch(2, 12))).toThrow(/scratch is for 2 chains × 12 draws/);
    expect(() => diagnoseQuantity([])).toThrow(RangeError);
  });
});
