/**
 * Worker-thread entry: builds the kernel from the spec it is sent and runs the chains it is
 * given, posting progress and each chain's draws (transferred, not copied) back.
 */
import { parentPort, workerData } from 'node:worker_threads';
import { buildKernel, type ModelSpec } from '../models/index.js';
import { runChain, type ChainPlan } from './driver.js';

export interface WorkerJob {
  spec: ModelSpec;
  plan: ChainPlan;
  chains: number[];
}

export type WorkerMessage =
  | { type: 'progress'; chain: number; sweeps: number }
  | { type: 'chain'; chain: number; draws: number; values: Float64Array }
  | { type: 'error'; message: string; stack?: string };

function post(message: WorkerMessage, transfer: ArrayBuffer[] = []): void {
  parentPort!.postMessage(message, transfer);
}

function main(job: WorkerJob): void {
  try {
    const kernel = buildKernel(job.spec);
    for (const chain of job.chains) {
      const result = runChain(kernel, job.plan, chain, (sweeps) => post({ type: 'progress', chain, sweeps }));
      post({ type: 'chain', chain, draws: result.draws, values: result.values }, [result.values.buffer as ArrayBuffer]);
    }
  } catch (error) {
    const err = error instanceof Error ? error : new Error(String(error));
    post({ type: 'error', message: err.message, stack: err.stack });
  }
}

if (parentPort) main(workerData as WorkerJob);
