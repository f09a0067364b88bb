/** Test helpers: build CountsData in memory and fit it in this thread (no files, no workers). */
import type { CoefficientPrior, ScalePrior } from '../../src/config/types.js';
import type { CountsData } from '../../src/data/counts.js';
import { countsQuantities } from '../../src/models/counts.js';
import type { AreaSamplerMethod } from '../../src/models/area.js';
import { sampleChains } from '../../src/sampler/parallel.js';
import { quantityChains, summarizeQuantities, type QuantitySummary } from '../../src/summaries/posterior.js';

export interface CountRow {
  id: string;
  /** Covariates without the intercept. */
  x?: number[];
  cases: number;
  trials: number;
}

export function countsData(rows: readonly CountRow[], covariates: readonly string[] = [], designEffect = 1): CountsData {
  const m = rows.length;
  const p = covariates.length + 1;
  const X = new Float64Array(m * p);
  rows.forEach((r, i) => {
    X[i * p] = 1;
    (r.x ?? []).forEach((v, j) => (X[i * p + j + 1] = v));
  });
  const cases = Float64Array.from(rows, (r) => r.cases);
  const trials = Float64Array.from(rows, (r) => r.trials);
  return {
    m,
    p,
    siteIds: rows.map((r) => r.id),
    labels: rows.map((r) => r.id),
    coefficientNames: ['intercept', ...covariates],
    X,
    cases,
    trials,
    designEffect,
    effectiveCases: cases.map((y) => y / designEffect),
    effectiveTrials: trials.map((n) => n / designEffect),
    hasData: Uint8Array.from(rows, (r) => (r.trials > 0 ? 1 : 0)),
    casesColumn: 'cases',
    trialsColumn: 'trials',
  };
}

export interface CountsFitSettings {
  coefficients?: CoefficientPrior;
  siteSd: ScalePrior;
  method?: AreaSamplerMethod;
  chains?: number;
  warmup?: number;
  draws?: number;
  seed?: number;
  interval?: number;
}

export interface InMemoryFit extends Map<string, QuantitySummary> {
  /** Per-chain draws of one quantity. */
  chainsOf(name: string): Float64Array[];
}

export async function fitCountsInMemory(data: CountsData, s: CountsFitSettings): Promise<InMemoryFit> {
  const chains = await sampleChains({
    spec: {
      kind: 'counts',
      data,
      coefficients: s.coefficients ?? { kind: 'flat' },
      siteSd: s.siteSd,
      method: s.method ?? 'collapsed',
    },
    plan: { warmup: s.warmup ?? 500, draws: s.draws ?? 2500, seed: s.seed ?? 1 },
    chains: s.chains ?? 4,
    threads: 1,
  });
  const names = countsQuantities(data);
  const summaries = summarizeQuantities(chains, names, s.interval ?? 0.95);
  const fit = new Map(summaries.map((q) => [q.name, q])) as InMemoryFit;
  fit.chainsOf = (name) => quantityChains(chains, names.indexOf(name));
  return fit;
}

/** Fourth central moment of pooled draws, for the Monte Carlo se of a posterior sd. */
export function fourthCentralMoment(chains: Float64Array[], mean: number): number {
  let sum = 0;
  let count = 0;
  for (const c of chains) for (const v of c) {
    sum += (v - mean) ** 4;
    count++;
  }
  return sum / count;
}

/**
 * Monte Carlo se of a sample sd by the delta method, √((μ₄ − σ⁴)/(4σ²·ESS)) (common practice;
 * as in tests/area-sampler.test.ts).
 */
export function mcseOfSd(fit: InMemoryFit, name: string): number {
  const q = fit.get(name)!;
  const mu4 = fourthCentralMoment(fit.chainsOf(name), q.mean);
  return Math.sqrt(Math.max(mu4 - q.sd ** 4, 0) / (4 * q.sd ** 2 * q.essBulk));
}
