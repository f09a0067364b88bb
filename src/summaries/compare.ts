/**
 * Comparisons between sites from posterior draws, for evaluators: the probability that one
 * site's value exceeds another's, each site's rank with its median and interval, the chance of
 * being among the top or bottom k, and the chance of exceeding a target value.
 *
 * Every quantity is a posterior probability or quantile estimated by counting over the joint
 * draws (all chains pooled): because each draw is one coherent sample of all sites at once, the
 * ranks and pairwise orderings computed draw by draw are draws from their own posterior
 * distributions (Gelman, Carlin, Stern, Dunson, Vehtari & Rubin 2013, *Bayesian Data Analysis*
 * 3rd ed., §1.9 and §5.5, where the eight-schools example ranks the schools this way).
 *
 * Conventions:
 *  - Rank 1 is the highest value (`lowerIsBetter` makes rank 1 the lowest). Ties within a draw
 *    get the average of the ranks they span (common practice), so a rank can be a half-integer;
 *    internally ranks are kept doubled, as integers.
 *  - P(θ_a > θ_b) and P(θ_i > target) count a tie as one half, so P(a > b) + P(b > a) = 1.
 *  - "Top k" means an (averaged) rank ≤ k; "bottom k" means a rank ≥ m − k + 1.
 *  - Rank medians and intervals are quantiles of the discrete rank distribution by the inverse of
 *    the empirical distribution function (Hyndman & Fan 1996, Am. Statistician 50(4), type 1):
 *    always a rank that occurred, and the equal-tailed interval covers at least its level.
 *  - Monte Carlo standard errors of probabilities: √(p(1 − p)/ESS) with ESS the effective sample
 *    size of the indicator draws over split chains (Vehtari, Gelman, Simpson, Carpenter &
 *    Bürkner 2021, Bayesian Analysis 16(2), §4.3 — the same route as for quantiles). NaN when the
 *    indicator never changes (p = 0 or 1): then the estimate only says p < 1/draws or > 1 − 1/draws.
 *
 * Pure numerics: draws in, arrays out. Draws must not be NaN.
 */
import { essOfChains, splitChains } from '../diagnostics/convergence.js';

/** One site's draws, all chains pooled one after the other. */
export type DrawArray = Float32Array | Float64Array;

/** Draws of every site: `sites[i]` holds chain c's draws at [c·drawsPerChain, (c+1)·drawsPerChain). */
export interface SiteDraws {
  sites: readonly DrawArray[];
  chains: number;
  drawsPerChain: number;
}

/** Largest number of sites for which the full pairwise matrix is computed by default (m(m−1)/2 pair sweeps). */
export const MAX_MATRIX_SITES = 200;

/** Throws RangeError unless every site has chains·drawsPerChain draws, none NaN. */
export function checkSiteDraws(input: SiteDraws): void {
  const { sites, chains, drawsPerChain } = input;
  if (!Number.isInteger(chains) || chains < 1 || !Number.isInteger(drawsPerChain) || drawsPerChain < 1) {
    throw new RangeError('chains and drawsPerChain must be whole numbers ≥ 1');
  }
  if (sites.length === 0) throw new RangeError('no sites to compare');
  const n = chains * drawsPerChain;
  for (let s = 0; s < sites.length; s++) {
    const x = sites[s];
    if (x.length !== n) throw new RangeError(`site ${s}: ${x.length} draws, expected ${n}`);
    for (let i = 0; i < n; i++) if (x[i] !== x[i]) throw new RangeError(`site ${s}: draw ${i} is NaN`);
  }
}

// ---------------------------------------------------------------------------------------------
// Pairwise probabilities

/** P(θ_a > θ_b) from paired draws (same index = same joint draw); ties count one half. */
export function probabilityGreater(a: DrawArray, b: DrawArray): number {
  const n = a.length;
  let greater = 0;
  let ties = 0;
  for (let i = 0; i < n; i++) {
    const x = a[i];
    const y = b[i];
    if (x > y) greater++;
    else if (x === y) ties++;
  }
  return (greater + 0.5 * ties) / n;
}

/**
 * The full m×m matrix of P(θ_a > θ_b), row-major (entry a·m + b), diagonal 0.5. Each unordered
 * pair is swept once: O(m²·n/2) comparisons.
 */
export function pairwiseMatrix(sites: readonly DrawArray[]): Float64Array {
  const m = sites.length;
  const out = new Float64Array(m * m);
  for (let a = 0; a < m; a++) {
    out[a * m + a] = 0.5;
    for (let b = a + 1; b < m; b++) {
      const p = probabilityGreater(sites[a], sites[b]);
      out[a * m + b] = p;
      out[b * m + a] = 1 - p;
    }
  }
  return out;
}

/** P(θ > target); a draw equal to the target counts one half. */
export function probabilityAbove(x: DrawArray, target: number): number {
  const n = x.length;
  let above = 0;
  let ties = 0;
  for (let i = 0; i < n; i++) {
    const v = x[i];
    if (v > target) above++;
    else if (v === target) ties++;
  }
  return (above + 0.5 * ties) / n;
}

// ---------------------------------------------------------------------------------------------
// Monte Carlo standard error of a probability

/**
 * MCSE of the mean p of indicator draws (pooled chains, chain after chain): √(p(1 − p)/ESS),
 * ESS over split chains (Vehtari et al. 2021, §4.3). NaN when the indicator is constant.
 *
 * @param indicators 0, ½ or 1 per draw, length chains·drawsPerChain
 */
export function probabilityMcse(indicators: Float64Array, chains: number, drawsPerChain: number): number {
  let sum = 0;
  for (let i = 0; i < indicators.length; i++) sum += indicators[i];
  const p = sum / indicators.length;
  if (p <= 0 || p >= 1) return Number.NaN;
  const views: Float64Array[] = [];
  for (let c = 0; c < chains; c++) views.push(indicators.subarray(c * drawsPerChain, (c + 1) * drawsPerChain));
  const ess = essOfChains(splitChains(views));
  if (!Number.isFinite(ess) || ess <= 0) return Number.NaN;
  return Math.sqrt((p * (1 - p)) / ess);
}

/** Indicator draws of θ_a > θ_b (½ for a tie), written into `out`. */
function greaterIndicators(a: DrawArray, b: DrawArray, out: Float64Array): Float64Array {
  for (let i = 0; i < a.length; i++) out[i] = a[i] > b[i] ? 1 : a[i] === b[i] ? 0.5 : 0;
  return out;
}

/** Indicator draws of θ > target (½ for a tie), written into `out`. */
function aboveIndicators(x: DrawArray, target: number, out: Float64Array): Float64Array {
  for (let i = 0; i < x.length; i++) out[i] = x[i] > target ? 1 : x[i] === target ? 0.5 : 0;
  return out;
}

// ---------------------------------------------------------------------------------------------
// Ranks per draw

/** Ranks of every site in every draw, doubled (2·rank is always an integer), site-major. */
export interface RankDraws {
  /** doubled[s·draws + i] = 2 × rank of site s in draw i. */
  doubled: Uint16Array | Uint32Array;
  sites: number;
  draws: number;
  lowerIsBetter: boolean;
}

/** Draws gathered per block: the block buffer (block × m doubles) stays in cache. */
const RANK_BLOCK = 128;

/**
 * Ranks of the m sites within each draw (rank 1 = highest, or lowest with `lowerIsBetter`; ties
 * averaged), O(n · m log m) without comparator callbacks. Draws are gathered in blocks into
 * draw-major order so reads stay sequential. Two exact routes, chosen by the input type:
 *  - all sites Float32Array (the run folder's draws): an argsort by one native numeric sort of
 *    packed keys — the float's bits mapped to an order-preserving unsigned 32-bit integer, times
 *    2^b, plus the site index (b = ⌈log₂ m⌉ bits; exact in a double while 32 + b ≤ 53);
 *  - otherwise: a native sort of a copy of the values, then each site's position by binary search.
 */
export function rankDraws(sites: readonly DrawArray[], opts: { lowerIsBetter?: boolean } = {}): RankDraws {
  const m = sites.length;
  const n = m === 0 ? 0 : sites[0].length;
  const lowerIsBetter = opts.lowerIsBetter ?? false;
  // 2·rank ≤ 2m; 2m + 2 must fit the element type.
  const doubled = 2 * m + 2 <= 0xffff ? new Uint16Array(m * n) : new Uint32Array(m * n);
  const indexBits = Math.max(1, Math.ceil(Math.log2(m)));
  const packed = indexBits <= 21 && sites.every((x) => x instanceof Float32Array);
  const blockSize = Math.max(1, Math.min(RANK_BLOCK, n));
  const block = new Float64Array(blockSize * m);
  const blockRanks = new Uint32Array(blockSize * m);
  const sorted = new Float64Array(m);
  const flip = 2 * m + 2;
  const bitsOf = packed ? sites.map((x) => new Uint32Array(x.buffer, x.byteOffset, x.length)) : [];
  for (let d0 = 0; d0 < n; d0 += blockSize) {
    const len = Math.min(blockSize, n - d0);
    if (packed) gatherPackedKeys(bitsOf, d0, len, indexBits, block);
    else gatherValues(sites, d0, len, block);
    for (let j = 0; j < len; j++) {
      const row = j * m;
      for (let s = 0; s < m; s++) sorted[s] = block[row + s];
      sorted.sort();
      if (packed) ranksFromPackedOrder(sorted, m, indexBits, lowerIsBetter, blockRanks, row);
      else ranksBySearch(sorted, block, row, m, lowerIsBetter, blockRanks);
    }
    for (let s = 0; s < m; s++) {
      const base = s * n + d0;
      for (let j = 0, at = s; j < len; j++, at += m) doubled[base + j] = blockRanks[at];
    }
  }
  return { doubled, sites: m, draws: n, lowerIsBetter };

  function ranksBySearch(sortedValues: Float64Array, values: Float64Array, row: number, count: number, lowFirst: boolean, out: Uint32Array): void {
    for (let s = 0; s < count; s++) {
      const v = values[row + s];
      let lo = 0;
      let hi = count;
      while (lo < hi) {
        const mid = (lo + hi) >>> 1;
        if (sortedValues[mid] < v) lo = mid + 1;
        else hi = mid;
      }
      let end = lo + 1;
      while (end < count && sortedValues[end] === v) end++;
      // Ascending positions lo..end−1 hold ranks lo+1..end; twice their average is lo + 1 + end.
      const ascending2 = lo + 1 + end;
      out[row + s] = lowFirst ? ascending2 : flip - ascending2;
    }
  }
}

function gatherValues(sites: readonly DrawArray[], d0: number, len: number, block: Float64Array): void {
  const m = sites.length;
  for (let s = 0; s < m; s++) {
    const x = sites[s];
    for (let j = 0, at = s; j < len; j++, at += m) block[at] = x[d0 + j];
  }
}

/**
 * Order-preserving key of a float32 from its bits: negative numbers have all bits flipped,
 * non-negative ones the sign bit set (−0 is taken as +0 so that it ties with 0, as `===` does).
 */
function gatherPackedKeys(bitsOf: readonly Uint32Array[], d0: number, len: number, indexBits: number, block: Float64Array): void {
  const m = bitsOf.length;
  const scale = 2 ** indexBits;
  for (let s = 0; s < m; s++) {
    const bits = bitsOf[s];
    for (let j = 0, at = s; j < len; j++, at += m) {
      let u = bits[d0 + j];
      if (u === 0x80000000) u = 0;
      const key = u >= 0x80000000 ? ~u >>> 0 : (u | 0x80000000) >>> 0;
      block[at] = key * scale + s;
    }
  }
}

/** Ranks from sorted packed keys: equal high parts are tied values and share their average rank. */
function ranksFromPackedOrder(sortedKeys: Float64Array, m: number, indexBits: number, lowerIsBetter: boolean, out: Uint32Array, row: number): void {
  const scale = 2 ** indexBits;
  const flip = 2 * m + 2;
  let p = 0;
  while (p < m) {
    const high = Math.floor(sortedKeys[p] / scale);
    let end = p + 1;
    while (end < m && Math.floor(sortedKeys[end] / scale) === high) end++;
    const ascending2 = p + 1 + end;
    const r2 = lowerIsBetter ? ascending2 : flip - ascending2;
    for (let q = p; q < end; q++) out[row + (sortedKeys[q] - Math.floor(sortedKeys[q] / scale) * scale)] = r2;
    p = end;
  }
}

/** Per-site summaries of the rank distribution. */
export interface RankSummary {
  /** Posterior median rank (type-1 quantile: a rank that occurred). */
  median: Float64Array;
  /** Equal-tailed interval of the rank at `level`. */
  lower: Float64Array;
  upper: Float64Array;
  /** Posterior mean rank. */
  mean: Float64Array;
  /** P(rank ≤ k). */
  pTop: Float64Array;
  /** P(rank ≥ m − k + 1). */
  pBottom: Float64Array;
}

/**
 * Median, equal-tailed interval and mean of each site's rank, and P(top k), P(bottom k), by a
 * counting pass over the doubled ranks (histogram of 2m + 1 bins reused for every site).
 */
export function summarizeRanks(ranks: RankDraws, opts: { level: number; top: number }): RankSummary {
  const { doubled, sites: m, draws: n } = ranks;
  const { level, top } = opts;
  if (!(level > 0 && level < 1)) throw new RangeError('level must be in (0, 1)');
  if (!Number.isInteger(top) || top < 1 || top > m) throw new RangeError(`top must be a whole number from 1 to ${m}`);
  const out: RankSummary = {
    median: new Float64Array(m),
    lower: new Float64Array(m),
    upper: new Float64Array(m),
    mean: new Float64Array(m),
    pTop: new Float64Array(m),
    pBottom: new Float64Array(m),
  };
  const counts = new Int32Array(2 * m + 2);
  const topLimit = 2 * top;
  const bottomLimit = 2 * (m - top + 1);
  // Order statistics needed for each quantile (type 1: the ⌈n·p⌉-th smallest, at least the first).
  const need = (p: number) => Math.max(1, Math.ceil(n * p - 1e-9 * n));
  const needLower = need((1 - level) / 2);
  const needMedian = need(0.5);
  const needUpper = need(1 - (1 - level) / 2);
  for (let s = 0; s < m; s++) {
    counts.fill(0);
    const base = s * n;
    let sum = 0;
    let inTop = 0;
    let inBottom = 0;
    for (let i = 0; i < n; i++) {
      const r2 = doubled[base + i];
      counts[r2]++;
      sum += r2;
      if (r2 <= topLimit) inTop++;
      if (r2 >= bottomLimit) inBottom++;
    }
    let cumulative = 0;
    let lower = -1;
    let median = -1;
    let upper = -1;
    for (let r2 = 2; r2 <= 2 * m && upper < 0; r2++) {
      cumulative += counts[r2];
      if (lower < 0 && cumulative >= needLower) lower = r2;
      if (median < 0 && cumulative >= needMedian) median = r2;
      if (upper < 0 && cumulative >= needUpper) upper = r2;
    }
    out.lower[s] = lower / 2;
    out.median[s] = median / 2;
    out.upper[s] = upper / 2;
    out.mean[s] = sum / (2 * n);
    out.pTop[s] = inTop / n;
    out.pBottom[s] = inBottom / n;
  }
  return out;
}

/** MCSE of P(top k) and P(bottom k) per site from the rank draws (see {@link probabilityMcse}). */
export function rankProbabilityMcse(ranks: RankDraws, top: number, chains: number, drawsPerChain: number): { top: Float64Array; bottom: Float64Array } {
  const { doubled, sites: m, draws: n } = ranks;
  const indicators = new Float64Array(n);
  const outTop = new Float64Array(m);
  const outBottom = new Float64Array(m);
  const topLimit = 2 * top;
  const bottomLimit = 2 * (m - top + 1);
  for (let s = 0; s < m; s++) {
    const base = s * n;
    for (let i = 0; i < n; i++) indicators[i] = doubled[base + i] <= topLimit ? 1 : 0;
    outTop[s] = probabilityMcse(indicators, chains, drawsPerChain);
    for (let i = 0; i < n; i++) indicators[i] = doubled[base + i] >= bottomLimit ? 1 : 0;
    outBottom[s] = probabilityMcse(indicators, chains, drawsPerChain);
  }
  return { top: outTop, bottom: outBottom };
}

// ---------------------------------------------------------------------------------------------
// Everything at once

export interface CompareOptions {
  /** Rank 1 = lowest value instead of highest. */
  lowerIsBetter?: boolean;
  /** Probability of the rank interval, e.g. 0.95. */
  level: number;
  /** k of "top k" and "bottom k". */
  top: number;
  /** Value for P(θ_i > target); null for none. */
  target: number | null;
  /**
   * Which pairs to compare: 'all' (the m×m matrix), a list of [a, b] site indices, or 'none'.
   */
  pairs: 'all' | ReadonlyArray<readonly [number, number]> | 'none';
  /** Compute Monte Carlo standard errors (ESS of indicators); default true. */
  mcse?: boolean;
}

export interface PairResult {
  a: number;
  b: number;
  /** P(θ_a > θ_b). */
  p: number;
  mcse: number;
}

export interface SiteComparison {
  sites: number;
  chains: number;
  drawsPerChain: number;
  /** Total draws used, all chains pooled. */
  draws: number;
  lowerIsBetter: boolean;
  level: number;
  top: number;
  target: number | null;
  ranks: RankSummary;
  mcseTop: Float64Array | null;
  mcseBottom: Float64Array | null;
  /** P(θ_i > target), or null without a target. */
  pAbove: Float64Array | null;
  mcseAbove: Float64Array | null;
  /** The m×m matrix of P(θ_a > θ_b) when all pairs were asked for. */
  matrix: Float64Array | null;
  /** Every compared ordered pair: all a ≠ b in index order for 'all', else the requested list. */
  pairs: PairResult[];
}

/**
 * All comparisons of `options` over the sites' draws. Throws RangeError for malformed draws or
 * options (the CLI checks the user's arguments before calling).
 */
export function compareSites(input: SiteDraws, options: CompareOptions): SiteComparison {
  checkSiteDraws(input);
  const { sites, chains, drawsPerChain } = input;
  const m = sites.length;
  const n = chains * drawsPerChain;
  const withMcse = options.mcse ?? true;
  const ranks = rankDraws(sites, { lowerIsBetter: options.lowerIsBetter });
  const summary = summarizeRanks(ranks, { level: options.level, top: options.top });
  const rankMcse = withMcse ? rankProbabilityMcse(ranks, options.top, chains, drawsPerChain) : null;

  const scratch = new Float64Array(n);
  let pAbove: Float64Array | null = null;
  let mcseAbove: Float64Array | null = null;
  if (options.target !== null) {
    if (!Number.isFinite(options.target)) throw new RangeError('target must be a finite number');
    pAbove = new Float64Array(m);
    mcseAbove = withMcse ? new Float64Array(m) : null;
    for (let s = 0; s < m; s++) {
      pAbove[s] = probabilityAbove(sites[s], options.target);
      if (mcseAbove) mcseAbove[s] = probabilityMcse(aboveIndicators(sites[s], options.target, scratch), chains, drawsPerChain);
    }
  }

  let matrix: Float64Array | null = null;
  const pairs: PairResult[] = [];
  const pairMcse = (a: number, b: number) =>
    withMcse ? probabilityMcse(greaterIndicators(sites[a], sites[b], scratch), chains, drawsPerChain) : Number.NaN;
  if (options.pairs === 'all') {
    matrix = pairwiseMatrix(sites);
    for (let a = 0; a < m; a++) {
      for (let b = a + 1; b < m; b++) {
        const mcse = pairMcse(a, b); // the same for (a, b) and (b, a)
        pairs.push({ a, b, p: matrix[a * m + b], mcse }, { a: b, b: a, p: matrix[b * m + a], mcse });
      }
    }
    pairs.sort((x, y) => x.a - y.a || x.b - y.b);
  } else if (options.pairs !== 'none') {
    for (const [a, b] of options.pairs) {
      if (!Number.isInteger(a) || !Number.isInteger(b) || a < 0 || b < 0 || a >= m || b >= m) throw new RangeError(`pair (${a}, ${b}) is out of range`);
      pairs.push({ a, b, p: probabilityGreater(sites[a], sites[b]), mcse: pairMcse(a, b) });
    }
  }

  return {
    sites: m,
    chains,
    drawsPerChain,
    draws: n,
    lowerIsBetter: options.lowerIsBetter ?? false,
    level: options.level,
    top: options.top,
    target: options.target,
    ranks: summary,
    mcseTop: rankMcse?.top ?? null,
    mcseBottom: rankMcse?.bottom ?? null,
    pAbove,
    mcseAbove,
    matrix,
    pairs,
  };
}
