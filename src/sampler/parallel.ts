/**
 * Runs the chains of a fit, and then their summaries, in worker threads or in this thread.
 * Chain k always uses stream k of the seed, and each chain runs start to finish on one thread,
 * so the draws are identical for any thread count (tests/area-sampler.test.ts checks this).
 */
import { existsSync } from 'node:fs';
import { availableParallelism } from 'node:os';
import { dirname, join } from 'node:path';
import { fileURLToPath } from 'node:url';
import { Worker } from 'node:worker_threads';
import { buildKernel, type ModelSpec } from '../models/index.js';
import { summarizeQuantities, unpackSummary, type ChainValues, type QuantitySummary } from '../summaries/posterior.js';
import { runChain, type ChainDraws, type ChainPlan } from './driver.js';
import type { WorkerJob, WorkerMessage } from './worker.js';

export interface SamplingRequest {
  spec: ModelSpec;
  plan: ChainPlan;
  chains: number;
  /** Threads to use; 1 runs in this thread. Default: min(chains, available cores). */
  threads?: number;
  /** Called with the total sweeps done over all chains. */
  onProgress?: (sweepsDone: number, sweepsTotal: number) => void;
}

export function defaultThreads(chains: number): number {
  return Math.max(1, Math.min(chains, availableParallelism()));
}

/** Chains assigned round-robin: thread w runs chains w, w + T, w + 2T, … */
export function assignChains(chains: number, threads: number): number[][] {
  const groups: number[][] = Array.from({ length: threads }, () => []);
  for (let c = 0; c < chains; c++) groups[c % threads].push(c);
  return groups.filter((g) => g.length > 0);
}

/** The compiled worker script; when running from TypeScript sources (tests), the built copy. */
function workerScript(): string {
  const here = fileURLToPath(import.meta.url);
  const beside = join(dirname(here), 'worker.js');
  if (here.endsWith('.js') && existsSync(beside)) return beside;
  const built = join(dirname(here), '..', '..', 'dist', 'src', 'sampler', 'worker.js');
  if (existsSync(built)) return built;
  throw new Error(`worker script not found (looked for ${beside} and ${built}); run "npm run build"`);
}

/** Runs one worker job, passing every message to `onMessage`; resolves when the worker exits. */
function runWorker(job: WorkerJob, onMessage: (message: WorkerMessage) => void): Promise<void> {
  return new Promise<void>((resolve, reject) => {
    const worker = new Worker(workerScript(), { workerData: job });
    let failed = false;
    worker.on('message', (message: WorkerMessage) => {
      if (message.type === 'error') {
        failed = true;
        reject(Object.assign(new Error(message.message), { stack: message.stack }));
      } else onMessage(message);
    });
    worker.on('error', reject);
    worker.on('exit', (code) => {
      if (failed) return;
      if (code === 0) resolve();
      else reject(new Error(`worker thread stopped with code ${code}`));
    });
  });
}

export async function sampleChains(request: SamplingRequest): Promise<ChainDraws[]> {
  const threads = Math.min(request.threads ?? defaultThreads(request.chains), request.chains);
  const total = request.chains * (request.plan.warmup + request.plan.draws);
  const progress = new Float64Array(request.chains);
  const report = (chain: number, sweeps: number): void => {
    if (!request.onProgress) return;
    progress[chain] = sweeps;
    let done = 0;
    for (const v of progress) done += v;
    request.onProgress(done, total);
  };
  if (threads <= 1) {
    const kernel = buildKernel(request.spec);
    const out: ChainDraws[] = [];
    for (let c = 0; c < request.chains; c++) out.push(runChain(kernel, request.plan, c, (s) => report(c, s)));
    return out;
  }
  const results: ChainDraws[] = new Array(request.chains);
  await Promise.all(
    assignChains(request.chains, threads).map((chains) =>
      runWorker({ task: 'sample', spec: request.spec, plan: request.plan, chains }, (message) => {
        if (message.type === 'progress') report(message.chain, message.sweeps);
        else if (message.type === 'chain')
          results[message.chain] = { chain: message.chain, draws: message.draws, values: message.values };
      }),
    ),
  );
  return results;
}

/**
 * Summaries and diagnostics of every quantity, split over `threads` workers when the draws are
 * in shared memory (as `sampleChains` leaves them with threads > 1); otherwise in this thread.
 * The result does not depend on the split.
 */
export async function summarizeChains(
  chains: readonly ChainValues[],
  names: readonly string[],
  interval: number,
  threads: number,
): Promise<QuantitySummary[]> {
  const shared = chains.every((c) => c.values.buffer instanceof SharedArrayBuffer);
  if (threads <= 1 || !shared || names.length < 2 * threads) return summarizeQuantities(chains, names, interval);
  const out: QuantitySummary[] = new Array(names.length);
  const size = Math.ceil(names.length / threads);
  const jobs: Promise<void>[] = [];
  for (let from = 0; from < names.length; from += size) {
    const to = Math.min(from + size, names.length);
    const plain = chains.map((c) => ({ draws: c.draws, values: c.values }));
    jobs.push(
      runWorker({ task: 'summarize', chains: plain, from, to, interval }, (message) => {
        if (message.type !== 'summary') return;
        for (let q = message.from; q < to; q++) out[q] = unpackSummary(names[q], message.packed, q - message.from);
      }),
    );
  }
  await Promise.all(jobs);
  return out;
}
