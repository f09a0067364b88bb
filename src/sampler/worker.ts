/**
 * Worker-thread entry. Two jobs:
 * - `sample`: build the kernel from the spec and run the given chains, posting progress and each
 *   chain's draws. Draws live in SharedArrayBuffers, so neither posting them back nor handing
 *   them to the summary workers copies 100s of MB.
 * - `summarize`: posterior summaries and diagnostics of a range of quantities.
 */
import { parentPort, workerData } from 'node:worker_threads';
import { buildKernel, type ModelSpec } from '../models/index.js';
import { summarizeRange, type ChainValues } from '../summaries/posterior.js';
import { runChain, type ChainPlan } from './driver.js';

export type WorkerJob =
  | { task: 'sample'; spec: ModelSpec; plan: ChainPlan; chains: number[] }
  | { task: 'summarize'; chains: ChainValues[]; from: number; to: number; interval: number };

export type WorkerMessage =
  | { type: 'progress'; chain: number; sweeps: number }
  | { type: 'chain'; chain: number; draws: number; values: Float64Array }
  | { type: 'summary'; from: number; packed: Float64Array }
  | { type: 'error'; message: string; stack?: string };

function post(message: WorkerMessage, transfer: ArrayBuffer[] = []): void {
  parentPort!.postMessage(message, transfer);
}

const sharedArray = (length: number): Float64Array =>
  new Float64Array(new SharedArrayBuffer(length * Float64Array.BYTES_PER_ELEMENT));

function run(job: WorkerJob): void {
  if (job.task === 'summarize') {
    const packed = summarizeRange(job.chains, job.from, job.to, job.interval);
    post({ type: 'summary', from: job.from, packed }, [packed.buffer as ArrayBuffer]);
    return;
  }
  const kernel = buildKernel(job.spec);
  for (const chain of job.chains) {
    const report = (sweeps: number) => post({ type: 'progress', chain, sweeps });
    const result = runChain(kernel, job.plan, chain, report, sharedArray);
    post({ type: 'chain', chain, draws: result.draws, values: result.values });
  }
}

if (parentPort) {
  try {
    run(workerData as WorkerJob);
  } catch (error) {
    const err = error instanceof Error ? error : new Error(String(error));
    post({ type: 'error', message: err.message, stack: err.stack });
  }
}
