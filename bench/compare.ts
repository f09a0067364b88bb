/**
 * `node dist/bench/compare.js [sites] [chains] [drawsPerChain]`: speed of the site comparisons
 * (not a test). Default 3,000 sites × 4 chains × 2,500 draws (10,000 draws per site): ranks per
 * draw, rank summaries, P(top k)/P(bottom k)/P(above target) with and without their MCSEs, and
 * the pairwise matrix for 200 sites.
 * Target on a 2-core machine: per-site quantities for 3,000 sites × 10,000 draws within about
 * 5 s without MCSE (measured 2.7–5 s for the ranks, +0.5–3 s for the MCSEs, 0.7 s for the
 * 200-site matrix; the spread is other load on the shared machine). Peak RSS about 340 MB, most
 * of it the simulated draws (120 MB) and the rank draws (60 MB as 16-bit doubled ranks).
 */
import { performance } from 'node:perf_hooks';
import { compareSites, pairwiseMatrix, rankDraws, summarizeRanks, type DrawArray } from '../src/summaries/compare.js';
import { createRng } from '../src/sampler/rng.js';
import { normal } from '../src/sampler/variates.js';

function makeDraws(m: number, n: number): Float32Array[] {
  const rng = createRng(11, 0);
  const sites: Float32Array[] = [];
  for (let s = 0; s < m; s++) {
    const mean = normal(rng);
    const x = new Float32Array(n);
    for (let i = 0; i < n; i++) x[i] = mean + 0.5 * normal(rng);
    sites.push(x);
  }
  return sites;
}

function time<T>(label: string, f: () => T): T {
  const t0 = performance.now();
  const out = f();
  process.stdout.write(`${label.padEnd(52)} ${((performance.now() - t0) / 1000).toFixed(2)} s\n`);
  return out;
}

const m = Number(process.argv[2] ?? 3000);
const chains = Number(process.argv[3] ?? 4);
const perChain = Number(process.argv[4] ?? 2500);
const n = chains * perChain;
process.stdout.write(`${m} sites × ${chains} chains × ${perChain} draws\n`);
const sites: DrawArray[] = time('simulate draws', () => makeDraws(m, n));
const ranks = time('ranks per draw', () => rankDraws(sites));
time('rank summaries', () => summarizeRanks(ranks, { level: 0.95, top: 10 }));
time('compareSites, no pairs, no MCSE', () => compareSites({ sites, chains, drawsPerChain: perChain }, { level: 0.95, top: 10, target: 0, pairs: 'none', mcse: false }));
time('compareSites, no pairs, with MCSE', () => compareSites({ sites, chains, drawsPerChain: perChain }, { level: 0.95, top: 10, target: 0, pairs: 'none', mcse: true }));
const few = sites.slice(0, Math.min(200, m));
time(`pairwise matrix, ${few.length} sites`, () => pairwiseMatrix(few));
const forty = sites.slice(0, Math.min(40, m));
time(`compareSites all pairs with MCSE, ${forty.length} sites`, () =>
  compareSites({ sites: forty, chains, drawsPerChain: perChain }, { level: 0.95, top: 5, target: 0, pairs: 'all', mcse: true }));
time(`compareSites all pairs with MCSE, ${few.length} sites`, () =>
  compareSites({ sites: few, chains, drawsPerChain: perChain }, { level: 0.95, top: 5, target: 0, pairs: 'all', mcse: true }));
process.stdout.write(`peak RSS ${(process.resourceUsage().maxRSS / 1024).toFixed(0)} MB\n`);
