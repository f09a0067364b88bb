/**
 * Convergence diagnostics for MCMC draws: rank-normalized split R-hat, bulk and tail effective
 * sample size (ESS), and the Monte Carlo standard error (MCSE) of the mean.
 *
 * Estimators of Vehtari, A., Gelman, A., Simpson, D., Carpenter, B. & Bürkner, P.-C. (2021)
 * "Rank-normalization, folding, and localization: an improved R-hat for assessing convergence of
 * MCMC", Bayesian Analysis 16(2), 667–718, doi:10.1214/20-BA1221, written to agree number for
 * number with their reference implementation, the R package posterior 1.4.0 (functions rhat,
 * ess_bulk, ess_tail, mcse_mean and the helpers .rhat, .ess, z_scale, fold_draws, .split_chains).
 * The ESS is the estimator of Gelman et al. (2013) Bayesian Data Analysis, 3rd ed., ch. 11, with
 * Geyer's (1992) initial monotone sequence.
 *
 * One deliberate difference: any non-finite draw (NaN or ±Infinity) makes every diagnostic NaN.
 * posterior 1.4.0 still returns a rank-based R-hat and bulk-ESS when a draw is ±Infinity; here a
 * non-finite draw is taken as a failed sampler, never as converged.
 */
import { AutocovarianceSums } from './autocovariance.js';
import { normalQuantile } from './normal-quantile.js';
import { SortOrder } from './sort-order.js';

/** Diagnostics of one monitored quantity. NaN where the estimator is undefined (constant or non-finite draws). */
export interface QuantityDiagnostics {
  /** max(bulk, folded) rank-normalized split R-hat. */
  rhat: number;
  /** ESS of the rank-normalized split draws. */
  essBulk: number;
  /** min of the ESS of the 5% and 95% quantile indicators. */
  essTail: number;
  /** Posterior sd / sqrt(ESS of the raw split draws). */
  mcseMean: number;
}

/** The parts that make up {@link QuantityDiagnostics}, for reports and tests. */
export interface DetailedDiagnostics extends QuantityDiagnostics {
  /** R-hat of the rank-normalized split draws. */
  rhatBulk: number;
  /** R-hat of the rank-normalized split folded draws |x - median(x)|. */
  rhatTail: number;
  /** ESS of the raw (not rank-normalized) split draws, used by the MCSE of the mean. */
  essMean: number;
  /** ESS of the split indicator I[x <= q05]. */
  essQ05: number;
  /** ESS of the split indicator I[x <= q95]. */
  essQ95: number;
}

/** Blom offset of the rank normal scores, (r - 3/8) / (S - 2·3/8 + 1) (Vehtari et al. 2021, eq. 14). */
const BLOM_OFFSET = 3 / 8;
/** posterior's test for constant input: max - min below machine epsilon (absolute). */
const CONSTANT_TOLERANCE = Number.EPSILON;

/**
 * Reusable buffers for {@link diagnoseQuantity}, sized for one (chains × draws) shape.
 * Also holds the normal scores of the integer ranks for that shape, computed once.
 */
export class DiagnosticsScratch {
  /** Draws per split chain: floor(n/2) (n when n = 1, which is not split). */
  readonly splitLength: number;
  /** Number of split chains: 2m (m when n = 1). */
  readonly splitChains: number;
  /** Total split draws S = splitChains · splitLength (the middle draw of odd chains is dropped). */
  readonly splitTotal: number;

  readonly raw: Float64Array;
  readonly sortOrder: SortOrder;
  /**
   * After {@link diagnoseQuantity} on finite draws: all nChains·nDraws draws (middle draws of
   * odd-length chains included) in ascending order. Callers read posterior quantiles from here.
   */
  readonly sortedAll: Float64Array;
  readonly middles: Float64Array;
  readonly folded: Float64Array;
  readonly foldedSource: Int32Array;
  readonly bulkScoreAt: Float64Array;
  readonly tailScoreAt: Float64Array;
  readonly zBulk: Float64Array;
  readonly zTail: Float64Array;
  readonly indicator05: Float64Array;
  readonly indicator95: Float64Array;
  readonly ess: EssWorkspace;
  /** blom[r] = Phi^{-1}((r - 3/8) / (S + 1/4)) for integer ranks r = 1..S. */
  readonly blom: Float64Array;

  constructor(
    readonly nChains: number,
    readonly nDraws: number,
    options: ScratchOptions = {},
  ) {
    if (!Number.isInteger(nChains) || nChains < 1) throw new RangeError(`nChains must be a positive integer, got ${nChains}`);
    if (!Number.isInteger(nDraws) || nDraws < 0) throw new RangeError(`nDraws must be a non-negative integer, got ${nDraws}`);
    const split = nDraws > 1;
    this.splitLength = split ? Math.floor(nDraws / 2) : nDraws;
    this.splitChains = split ? 2 * nChains : nChains;
    this.splitTotal = this.splitChains * this.splitLength;
    const s = this.splitTotal;
    const oddLength = split && nDraws % 2 === 1;
    this.raw = new Float64Array(s);
    this.sortOrder = new SortOrder(s);
    this.sortedAll = oddLength ? new Float64Array(nChains * nDraws) : this.sortOrder.sorted;
    this.middles = new Float64Array(oddLength ? nChains : 0);
    this.folded = new Float64Array(s);
    this.foldedSource = new Int32Array(s);
    this.bulkScoreAt = new Float64Array(s);
    this.tailScoreAt = new Float64Array(s);
    this.zBulk = new Float64Array(s);
    this.zTail = new Float64Array(s);
    this.indicator05 = new Float64Array(s);
    this.indicator95 = new Float64Array(s);
    this.ess = new EssWorkspace(this.splitChains, this.splitLength, options.fftFromLag);
    this.blom = new Float64Array(s + 1);
    const denominator = s - 2 * BLOM_OFFSET + 1;
    for (let r = 1; r <= s; r++) this.blom[r] = normalQuantile((r - BLOM_OFFSET) / denominator);
  }
}

/** Buffers of the ESS and R-hat estimators for matrices of at most nChains × length. */
class EssWorkspace {
  readonly centered: Float64Array;
  readonly chainMeans: Float64Array;
  readonly chainSquares: Float64Array;
  readonly rho: Float64Array;
  readonly lagSums: AutocovarianceSums;
  constructor(nChains: number, length: number, fftFromLag?: number) {
    this.centered = new Float64Array(nChains * length);
    this.chainMeans = new Float64Array(nChains);
    this.chainSquares = new Float64Array(nChains);
    this.rho = new Float64Array(Math.max(length, 2));
    this.lagSums = new AutocovarianceSums(length, fftFromLag);
  }
}

/** Tuning knobs of the scratch (tests use them to force one autocovariance path). */
export interface ScratchOptions {
  /** Lag from which autocovariances come from one FFT pass instead of lag-by-lag sums. */
  fftFromLag?: number;
}

/**
 * Allocate reusable buffers for {@link diagnoseQuantity} on draws of `nChains` chains of
 * `nDraws` draws each. Reuse one scratch for all quantities of a fit.
 */
export function createScratch(nChains: number, nDraws: number, options?: ScratchOptions): DiagnosticsScratch {
  return new DiagnosticsScratch(nChains, nDraws, options);
}

/**
 * R-hat, bulk-ESS, tail-ESS and MCSE of the mean of one quantity (Vehtari et al. 2021):
 *  - rhat = max(R-hat(z(split(x))), R-hat(z(split(|x - median x|)))),
 *  - essBulk = ESS(z(split(x))), essTail = min(ESS(split(I[x <= q05])), ESS(split(I[x <= q95]))),
 *  - mcseMean = sd(x) / sqrt(ESS(split(x))) — as posterior::mcse_mean: the sd of all draws over the
 *    ESS of the raw draws, because the MCSE of the mean concerns the mean of x itself, not of its ranks.
 * z(.) are the Blom normal scores of the average ranks pooled over all split chains; q05 and q95 are
 * type-7 sample quantiles of all draws. One O(S) radix sort per call (see sort-order.ts), ranks
 * read off the permutation, the folded order by a merge; no allocations when a matching scratch
 * is passed.
 *
 * @param chains chains[k] = draws of chain k after warm-up, all of equal length
 * @param scratch buffers from {@link createScratch} for this shape (allocated when omitted)
 */
export function diagnoseQuantity(chains: readonly Float64Array[], scratch?: DiagnosticsScratch): DetailedDiagnostics {
  const m = chains.length;
  if (m === 0) throw new RangeError('diagnoseQuantity needs at least one chain');
  const n = chains[0].length;
  for (let k = 1; k < m; k++) {
    if (chains[k].length !== n) throw new RangeError(`chain ${k} has ${chains[k].length} draws, chain 0 has ${n}`);
  }
  const sc = scratch ?? new DiagnosticsScratch(m, n);
  if (sc.nChains !== m || sc.nDraws !== n) {
    throw new RangeError(`scratch is for ${sc.nChains} chains × ${sc.nDraws} draws, got ${m} × ${n}`);
  }
  if (n === 0 || !allFinite(chains)) return allNaN();

  const nSplit = sc.splitLength;
  const mSplit = sc.splitChains;
  const s = sc.splitTotal;
  const total = m * n;

  // Split layout as posterior's cbind(first halves, second halves); odd n drops the middle draw.
  const raw = sc.raw;
  if (n === 1) {
    for (let k = 0; k < m; k++) raw[k] = chains[k][0];
  } else {
    const secondStart = n - nSplit;
    for (let k = 0; k < m; k++) {
      const chain = chains[k];
      raw.set(chain.subarray(0, nSplit), k * nSplit);
      raw.set(chain.subarray(secondStart, n), (m + k) * nSplit);
    }
  }

  // Sorting permutation of the split draws: ranks come from it directly.
  sc.sortOrder.compute(raw, s);
  const order = sc.sortOrder.order;
  const sorted = sc.sortOrder.sorted;
  // Median and quantiles use all draws, the middle ones included (posterior folds and takes
  // quantiles before splitting).
  let sortedAll = sorted;
  if (sc.middles.length > 0) {
    const mid = (n - 1) / 2;
    for (let k = 0; k < m; k++) sc.middles[k] = chains[k][mid];
    sc.middles.sort();
    mergeSorted(sorted, s, sc.middles, sc.sortedAll);
    sortedAll = sc.sortedAll;
  }
  const median = sortedMedian(sortedAll, total);
  const q05 = sortedQuantileType7(sortedAll, total, 0.05);
  const q95 = sortedQuantileType7(sortedAll, total, 0.95);
  const allConstant = isConstantRange(sortedAll[0], sortedAll[total - 1]);

  // Normal scores by sorted position: bulk from the sorted draws, tail from the folded draws,
  // whose k-th smallest sits at sorted position foldedSource[k].
  const bulkAt = sc.bulkScoreAt;
  const tailAt = sc.tailScoreAt;
  scoreTieGroups(sorted, s, sc.blom, bulkAt, null);
  foldSorted(sorted, s, median, sc.folded, sc.foldedSource);
  scoreTieGroups(sc.folded, s, sc.blom, tailAt, sc.foldedSource);

  // Back to split layout: one scatter through the sorting permutation.
  const zBulk = sc.zBulk;
  const zTail = sc.zTail;
  for (let p = 0; p < s; p++) {
    const i = order[p];
    zBulk[i] = bulkAt[p];
    zTail[i] = tailAt[p];
  }
  const i05 = sc.indicator05;
  const i95 = sc.indicator95;
  let count05 = 0;
  let count95 = 0;
  for (let i = 0; i < s; i++) {
    const v = raw[i];
    const below05 = v <= q05 ? 1 : 0;
    const below95 = v <= q95 ? 1 : 0;
    i05[i] = below05;
    i95[i] = below95;
    count05 += below05;
    count95 += below95;
  }

  // posterior returns NA for (numerically) constant input to each estimator; these are the
  // same tests, read off the sorted values and counts instead of another pass over the draws.
  const splitConstant = sorted[0] === sorted[s - 1]; // also: rank scores constant
  const rawConstant = isConstantRange(sorted[0], sorted[s - 1]);
  const foldedConstant = sc.folded[0] === sc.folded[s - 1];

  const ws = sc.ess;
  let rhatBulk = Number.NaN;
  let essBulk = Number.NaN;
  if (!splitConstant) {
    chainMoments(zBulk, mSplit, nSplit, ws); // shared by R-hat and ESS
    rhatBulk = rhatFromMoments(mSplit, nSplit, ws);
    essBulk = essFromMoments(mSplit, nSplit, ws);
  }
  const rhatTail = foldedConstant ? Number.NaN : rhatOfMatrix(zTail, mSplit, nSplit, ws);
  const essQ05 = allConstant || count05 === 0 || count05 === s ? Number.NaN : essOfMatrix(i05, mSplit, nSplit, ws);
  const essQ95 = allConstant || count95 === 0 || count95 === s ? Number.NaN : essOfMatrix(i95, mSplit, nSplit, ws);
  const essMean = rawConstant ? Number.NaN : essOfMatrix(raw, mSplit, nSplit, ws);
  const sd = Math.sqrt(varianceOfChains(chains));
  return {
    rhat: maxOrNaN(rhatBulk, rhatTail),
    essBulk,
    essTail: minOrNaN(essQ05, essQ95),
    mcseMean: sd / Math.sqrt(essMean),
    rhatBulk,
    rhatTail,
    essMean,
    essQ05,
    essQ95,
  };
}

/**
 * Split every chain into its first and second half (posterior's .split_chains): 2m chains of
 * floor(n/2) draws, first halves first; the middle draw of an odd-length chain is dropped.
 * Chains of one draw are returned unsplit.
 */
export function splitChains(chains: readonly Float64Array[]): Float64Array[] {
  const n = chains.length === 0 ? 0 : chains[0].length;
  if (n <= 1) return chains.map((c) => c.slice());
  const half = Math.floor(n / 2);
  return [...chains.map((c) => c.slice(0, half)), ...chains.map((c) => c.slice(n - half, n))];
}

/**
 * Rank-normalize draws pooled over all chains (posterior's z_scale): average ranks r among all S
 * draws (ties averaged), then z = Phi^{-1}((r - 3/8) / (S - 2·3/8 + 1)) (Blom 1958 scores, as in
 * Vehtari et al. 2021, sec. 4.1). Returns arrays of the input's shape. Draws must be finite.
 */
export function rankNormalize(chains: readonly Float64Array[]): Float64Array[] {
  const flat = flatten(chains);
  const s = flat.length;
  const blom = new Float64Array(s + 1);
  const denominator = s - 2 * BLOM_OFFSET + 1;
  for (let r = 1; r <= s; r++) blom[r] = normalQuantile((r - BLOM_OFFSET) / denominator);
  const sortOrder = new SortOrder(s);
  sortOrder.compute(flat, s);
  const scoreAt = new Float64Array(s);
  scoreTieGroups(sortOrder.sorted, s, blom, scoreAt, null);
  const z = new Float64Array(s);
  for (let p = 0; p < s; p++) z[sortOrder.order[p]] = scoreAt[p];
  const out: Float64Array[] = [];
  let offset = 0;
  for (const chain of chains) {
    out.push(z.slice(offset, offset + chain.length));
    offset += chain.length;
  }
  return out;
}

/**
 * Basic R-hat of chains as given (posterior's .rhat; Gelman et al. 2013, BDA3 eq. 11.4):
 * B = N·var(chain means), W = mean of chain variances, R-hat = sqrt(((N-1)/N·W + B/N) / W).
 * NaN for constant or non-finite input.
 */
export function rhatOfChains(chains: readonly Float64Array[]): number {
  const { values, nChains, length } = toMatrix(chains);
  if (!allFinite(chains) || isConstantArray(values, nChains * length)) return Number.NaN;
  return rhatOfMatrix(values, nChains, length, new EssWorkspace(nChains, length));
}

/** Classic split R-hat without rank-normalization: {@link rhatOfChains} of {@link splitChains}. */
export function splitRhat(chains: readonly Float64Array[]): number {
  return rhatOfChains(splitChains(chains));
}

/**
 * Effective sample size of chains as given (posterior's .ess; no splitting): BDA3 ch. 11 with
 * Geyer's initial monotone sequence and tau >= 1/log10(M·N). NaN for fewer than 3 draws per chain,
 * constant or non-finite input.
 */
export function essOfChains(chains: readonly Float64Array[]): number {
  const { values, nChains, length } = toMatrix(chains);
  if (!allFinite(chains) || isConstantArray(values, nChains * length)) return Number.NaN;
  return essOfMatrix(values, nChains, length, new EssWorkspace(nChains, length));
}

// ---------------------------------------------------------------------------------------------
// Core estimators on a flat matrix: chain j occupies values[j*N .. (j+1)*N).

/**
 * Per-chain means, centered values (into ws.centered) and sums of squared deviations (into
 * ws.chainSquares) of a flat matrix: the shared first step of R-hat and ESS. Sums use two
 * accumulators, which halves the add-latency chain.
 */
function chainMoments(values: Float64Array, nChains: number, length: number, ws: EssWorkspace): void {
  const means = ws.chainMeans;
  const squares = ws.chainSquares;
  const centered = ws.centered;
  for (let j = 0; j < nChains; j++) {
    const base = j * length;
    const end = base + length;
    let s0 = 0;
    let s1 = 0;
    let i = base;
    for (; i + 1 < end; i += 2) {
      s0 += values[i];
      s1 += values[i + 1];
    }
    if (i < end) s0 += values[i];
    const mean = (s0 + s1) / length;
    let q0 = 0;
    let q1 = 0;
    for (i = base; i + 1 < end; i += 2) {
      const d0 = values[i] - mean;
      const d1 = values[i + 1] - mean;
      centered[i] = d0;
      centered[i + 1] = d1;
      q0 += d0 * d0;
      q1 += d1 * d1;
    }
    if (i < end) {
      const d = values[i] - mean;
      centered[i] = d;
      q0 += d * d;
    }
    means[j] = mean;
    squares[j] = q0 + q1;
  }
}

/** Mean and sample variance (divisor n - 1) of xs[0..n). */
function meanAndVariance(xs: Float64Array, n: number): { mean: number; variance: number } {
  let sum = 0;
  for (let j = 0; j < n; j++) sum += xs[j];
  const mean = sum / n;
  let ss = 0;
  for (let j = 0; j < n; j++) ss += (xs[j] - mean) * (xs[j] - mean);
  return { mean, variance: ss / (n - 1) };
}

/**
 * Basic R-hat from the chain moments left in `ws` by {@link chainMoments} (posterior's .rhat):
 * B = N·var(chain means), W = mean of chain variances, R-hat = sqrt((B/W + N - 1)/N).
 */
function rhatFromMoments(nChains: number, length: number, ws: EssWorkspace): number {
  let sumOfVars = 0;
  for (let j = 0; j < nChains; j++) sumOfVars += ws.chainSquares[j] / (length - 1);
  const within = sumOfVars / nChains;
  const between = length * meanAndVariance(ws.chainMeans, nChains).variance;
  return Math.sqrt((between / within + length - 1) / length);
}

/** Basic R-hat of a flat matrix; the caller has already excluded constant input. */
function rhatOfMatrix(values: Float64Array, nChains: number, length: number, ws: EssWorkspace): number {
  chainMoments(values, nChains, length, ws);
  return rhatFromMoments(nChains, length, ws);
}

/**
 * ESS of a flat matrix (posterior 1.4.0 .ess, line by line): Geyer's initial positive sequence on
 * pairs of autocorrelations, made monotone, the "improved" last even term, tau >= 1/log10(M·N).
 * The caller has already excluded constant input.
 */
function essOfMatrix(values: Float64Array, nChains: number, length: number, ws: EssWorkspace): number {
  if (length < 3) return Number.NaN;
  chainMoments(values, nChains, length, ws);
  return essFromMoments(nChains, length, ws);
}

/** ESS from the chain moments left in `ws` by {@link chainMoments}. */
function essFromMoments(nChains: number, length: number, ws: EssWorkspace): number {
  const total = nChains * length;
  if (length < 3) return Number.NaN;
  const centered = ws.centered;
  const lags = ws.lagSums;
  lags.load(centered, nChains, length);
  const toMeanAcov = 1 / total; // L(t) / (M N) = mean over chains of the biased autocovariance
  const meanVar = ((lags.at(0) * toMeanAcov) * length) / (length - 1);
  let varPlus = (meanVar * (length - 1)) / length;
  if (nChains > 1) varPlus += meanAndVariance(ws.chainMeans, nChains).variance;

  // Geyer's initial positive sequence.
  const rho = ws.rho;
  let t = 0;
  let rhoEven = 1;
  let rhoOdd = 1 - (meanVar - lags.at(1) * toMeanAcov) / varPlus;
  rho[0] = rhoEven;
  rho[1] = rhoOdd;
  while (t < length - 5 && !Number.isNaN(rhoEven + rhoOdd) && rhoEven + rhoOdd > 0) {
    t += 2;
    rhoEven = 1 - (meanVar - lags.at(t) * toMeanAcov) / varPlus;
    rhoOdd = 1 - (meanVar - lags.at(t + 1) * toMeanAcov) / varPlus;
    rho[t] = 0;
    rho[t + 1] = 0;
    if (rhoEven + rhoOdd >= 0) {
      rho[t] = rhoEven;
      rho[t + 1] = rhoOdd;
    }
  }
  const maxT = t;
  // The "improved" estimate adds the last even term when positive.
  if (rhoEven > 0) rho[maxT] = rhoEven;

  // Geyer's initial monotone sequence.
  t = 0;
  while (t <= maxT - 4) {
    t += 2;
    if (rho[t] + rho[t + 1] > rho[t - 2] + rho[t - 1]) {
      rho[t] = (rho[t - 2] + rho[t - 1]) / 2;
      rho[t + 1] = rho[t];
    }
  }

  // R's sum(rho_hat_t[1:max_t]) also takes rho[0] when max_t = 0 (1:0 is c(1, 0)).
  let sum = 0;
  for (let i = 0; i < Math.max(maxT, 1); i++) sum += rho[i];
  let tau = -1 + 2 * sum + rho[maxT];
  const tauBound = 1 / Math.log10(total);
  if (tau < tauBound) tau = tauBound;
  return total / tau;
}

// ---------------------------------------------------------------------------------------------
// Sorting-based helpers.

/** First index p in sorted[0..len) with sorted[p] >= value. */
function lowerBound(sorted: Float64Array, len: number, value: number): number {
  let lo = 0;
  let hi = len;
  while (lo < hi) {
    const mid = (lo + hi) >>> 1;
    if (sorted[mid] < value) lo = mid + 1;
    else hi = mid;
  }
  return lo;
}

/**
 * Walk the tie groups of sorted[0..len): the group at positions [a, b) has average rank
 * (a+1+b)/2 and Blom score z, written to scoreAt[k] for every k in the group or, with `through`,
 * to scoreAt[through[k]]. Untied values (the common case) take the tabulated score of rank k+1.
 */
function scoreTieGroups(
  sorted: Float64Array,
  len: number,
  blom: Float64Array,
  scoreAt: Float64Array,
  through: Int32Array | null,
): void {
  let a = 0;
  if (through === null) {
    while (a < len) {
      if (a + 1 < len && sorted[a + 1] === sorted[a]) a = scoreTieGroup(sorted, len, blom, scoreAt, null, a);
      else {
        scoreAt[a] = blom[a + 1];
        a++;
      }
    }
  } else {
    while (a < len) {
      if (a + 1 < len && sorted[a + 1] === sorted[a]) a = scoreTieGroup(sorted, len, blom, scoreAt, through, a);
      else {
        scoreAt[through[a]] = blom[a + 1];
        a++;
      }
    }
  }
}

/** One group of at least two tied values starting at `a`; returns the position after it. */
function scoreTieGroup(
  sorted: Float64Array,
  len: number,
  blom: Float64Array,
  scoreAt: Float64Array,
  through: Int32Array | null,
  a: number,
): number {
  const v = sorted[a];
  let b = a + 2;
  while (b < len && sorted[b] === v) b++;
  const rankTwice = a + 1 + b;
  // An odd group size gives an integer average rank, whose score is tabulated.
  const score =
    (rankTwice & 1) === 0
      ? blom[rankTwice >>> 1]
      : normalQuantile((rankTwice / 2 - BLOM_OFFSET) / (len - 2 * BLOM_OFFSET + 1));
  if (through === null) for (let k = a; k < b; k++) scoreAt[k] = score;
  else for (let k = a; k < b; k++) scoreAt[through[k]] = score;
  return b;
}

/**
 * Folded draws |x - median| in ascending order without a second sort: the draws below the median,
 * read downwards, and those at or above it, read upwards, are each already in order, so a merge
 * suffices. `source[k]` is the position in `sorted` of the k-th folded value.
 */
function foldSorted(sorted: Float64Array, len: number, median: number, folded: Float64Array, source: Int32Array): void {
  const split = lowerBound(sorted, len, median);
  let below = split - 1;
  let above = split;
  let k = 0;
  // Written without a data-dependent branch: the left/right choice is a coin flip for each draw,
  // which a branch predictor cannot learn. |sorted[i] - median| equals median - sorted[i] below
  // the median exactly (rounding is symmetric), so the value can be recomputed from the index.
  while (below >= 0 && above < len) {
    const takeLeft = +(median - sorted[below] <= sorted[above] - median);
    const from = above + takeLeft * (below - above);
    folded[k] = Math.abs(sorted[from] - median);
    source[k] = from;
    k++;
    below -= takeLeft;
    above += 1 - takeLeft;
  }
  while (below >= 0) {
    folded[k] = median - sorted[below];
    source[k++] = below--;
  }
  while (above < len) {
    folded[k] = sorted[above] - median;
    source[k++] = above++;
  }
}

function mergeSorted(a: Float64Array, aLength: number, b: Float64Array, out: Float64Array): void {
  let i = 0;
  let j = 0;
  let k = 0;
  while (i < aLength && j < b.length) out[k++] = a[i] <= b[j] ? a[i++] : b[j++];
  while (i < aLength) out[k++] = a[i++];
  while (j < b.length) out[k++] = b[j++];
}

/** Median as R's median(): middle value, or the mean of the two middle values. */
function sortedMedian(sorted: Float64Array, len: number): number {
  const half = len >>> 1;
  return len % 2 === 1 ? sorted[half] : (sorted[half - 1] + sorted[half]) / 2;
}

/** Sample quantile of type 7 (Hyndman & Fan 1996), written as R's quantile.default computes it. */
function sortedQuantileType7(sorted: Float64Array, len: number, prob: number): number {
  const index = 1 + (len - 1) * prob;
  const lo = Math.floor(index);
  const hi = Math.ceil(index);
  const atLo = sorted[lo - 1];
  const atHi = sorted[hi - 1];
  if (index > lo && atHi !== atLo) {
    const h = index - lo;
    return (1 - h) * atLo + h * atHi;
  }
  return atLo;
}

// ---------------------------------------------------------------------------------------------
// Small helpers.

function allFinite(chains: readonly Float64Array[]): boolean {
  for (const chain of chains) {
    for (let i = 0; i < chain.length; i++) {
      const v = chain[i];
      if (v - v !== 0) return false; // NaN and ±Infinity
    }
  }
  return true;
}

function isConstantRange(min: number, max: number): boolean {
  return Math.abs(max - min) < CONSTANT_TOLERANCE;
}

function isConstantArray(values: Float64Array, len: number): boolean {
  let min = Number.POSITIVE_INFINITY;
  let max = Number.NEGATIVE_INFINITY;
  for (let i = 0; i < len; i++) {
    const v = values[i];
    if (v < min) min = v;
    if (v > max) max = v;
  }
  return isConstantRange(min, max);
}

/** Sample variance (divisor S - 1) of all draws of all chains (two accumulators per sum). */
function varianceOfChains(chains: readonly Float64Array[]): number {
  let count = 0;
  let s0 = 0;
  let s1 = 0;
  for (const chain of chains) {
    const n = chain.length;
    let i = 0;
    for (; i + 1 < n; i += 2) {
      s0 += chain[i];
      s1 += chain[i + 1];
    }
    if (i < n) s0 += chain[i];
    count += n;
  }
  const mean = (s0 + s1) / count;
  let q0 = 0;
  let q1 = 0;
  for (const chain of chains) {
    const n = chain.length;
    let i = 0;
    for (; i + 1 < n; i += 2) {
      const d0 = chain[i] - mean;
      const d1 = chain[i + 1] - mean;
      q0 += d0 * d0;
      q1 += d1 * d1;
    }
    if (i < n) q0 += (chain[i] - mean) * (chain[i] - mean);
  }
  return (q0 + q1) / (count - 1);
}

/** R's max()/min() of two numbers: NaN if either is NaN. */
function maxOrNaN(a: number, b: number): number {
  return Number.isNaN(a) || Number.isNaN(b) ? Number.NaN : Math.max(a, b);
}
function minOrNaN(a: number, b: number): number {
  return Number.isNaN(a) || Number.isNaN(b) ? Number.NaN : Math.min(a, b);
}

function allNaN(): DetailedDiagnostics {
  const nan = Number.NaN;
  return { rhat: nan, essBulk: nan, essTail: nan, mcseMean: nan, rhatBulk: nan, rhatTail: nan, essMean: nan, essQ05: nan, essQ95: nan };
}

function flatten(chains: readonly Float64Array[]): Float64Array {
  let len = 0;
  for (const c of chains) len += c.length;
  const out = new Float64Array(len);
  let offset = 0;
  for (const c of chains) {
    out.set(c, offset);
    offset += c.length;
  }
  return out;
}

function toMatrix(chains: readonly Float64Array[]): { values: Float64Array; nChains: number; length: number } {
  if (chains.length === 0) throw new RangeError('need at least one chain');
  const length = chains[0].length;
  for (let k = 1; k < chains.length; k++) {
    if (chains[k].length !== length) throw new RangeError(`chain ${k} has ${chains[k].length} draws, chain 0 has ${length}`);
  }
  return { values: flatten(chains), nChains: chains.length, length };
}
