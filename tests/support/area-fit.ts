/** Test helpers: build AreaData in memory and fit it in this thread (no files, no workers). */
import type { CoefficientPrior, ScalePrior } from '../../src/config/types.js';
import type { AreaData } from '../../src/data/types.js';
import { areaQuantities, type AreaSamplerMethod } from '../../src/models/area.js';
import { sampleChains } from '../../src/sampler/parallel.js';
import { quantityChains, summarizeQuantities, type QuantitySummary } from '../../src/summaries/posterior.js';

export interface SiteRow {
  id: string;
  /** Covariates without the intercept. */
  x: number[];
  /** Direct estimate and its sampling variance; undefined for an unsampled site. */
  y?: number;
  psi?: number;
}

export function areaData(rows: readonly SiteRow[], covariates: readonly string[] = []): AreaData {
  const m = rows.length;
  const p = covariates.length + 1;
  const X = new Float64Array(m * p);
  const direct = new Float64Array(m).fill(NaN);
  const variance = new Float64Array(m).fill(NaN);
  const hasData = new Uint8Array(m);
  rows.forEach((r, i) => {
    X[i * p] = 1;
    r.x.forEach((v, j) => (X[i * p + j + 1] = v));
    if (r.y !== undefined) {
      direct[i] = r.y;
      variance[i] = r.psi!;
      hasData[i] = 1;
    }
  });
  return {
    m,
    p,
    siteIds: rows.map((r) => r.id),
    labels: rows.map((r) => r.id),
    coefficientNames: ['intercept', ...covariates],
    X,
    direct,
    variance,
    sampleSize: new Float64Array(m).fill(NaN),
    hasData,
    varianceNote: 'given',
  };
}

export interface FitSettings {
  coefficients?: CoefficientPrior;
  siteSd: ScalePrior;
  method?: AreaSamplerMethod;
  chains?: number;
  warmup?: number;
  draws?: number;
  seed?: number;
  threads?: number;
  interval?: number;
}

export interface InMemoryFit extends Map<string, QuantitySummary> {
  /** Per-chain draws of one quantity. */
  chainsOf(name: string): Float64Array[];
}

export async function fitInMemory(data: AreaData, s: FitSettings): Promise<InMemoryFit> {
  const chains = await sampleChains({
    spec: {
      kind: 'area',
      data,
      coefficients: s.coefficients ?? { kind: 'flat' },
      siteSd: s.siteSd,
      method: s.method ?? 'collapsed',
    },
    plan: { warmup: s.warmup ?? 500, draws: s.draws ?? 2500, seed: s.seed ?? 1 },
    chains: s.chains ?? 4,
    threads: s.threads ?? 1,
  });
  const names = areaQuantities(data);
  const summaries = summarizeQuantities(chains, names, s.interval ?? 0.95);
  const fit = new Map(summaries.map((q) => [q.name, q])) as InMemoryFit;
  fit.chainsOf = (name) => quantityChains(chains, names.indexOf(name));
  return fit;
}
