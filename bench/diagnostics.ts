/**
 * Micro-benchmark: microseconds per monitored quantity for diagnoseQuantity (R-hat, bulk and tail
 * ESS, MCSE) on 4 chains × 2,500 draws, the shape of a default fit. Not a test; the target is
 * well under 1 ms per quantity (a fit monitors about 3,000 quantities on a 2-core machine).
 * Run after `npm run build` with `node dist/bench/diagnostics.js`.
 *
 * Workloads are stationary AR(1) chains: phi = 0.3 (a well-mixed site), 0.9 (a slowly mixing
 * scale parameter) and 0.995 (a stuck chain, where Geyer's sequence runs for hundreds of lags
 * and the autocovariances switch to the FFT). The last one is also timed with the FFT switched
 * off, which shows what the switch saves.
 */
import { createScratch, diagnoseQuantity, type ScratchOptions } from '../src/diagnostics/convergence.js';
import { createRng } from '../src/sampler/rng.js';
import { normal } from '../src/sampler/variates.js';

const CHAINS = 4;
const DRAWS = 2500;
const QUANTITIES = 40;
const REPEATS = 9;

function ar1Quantity(phi: number, stream: number): Float64Array[] {
  const rng = createRng(20261201, stream);
  const innovationSd = Math.sqrt(1 - phi * phi);
  const chains: Float64Array[] = [];
  for (let k = 0; k < CHAINS; k++) {
    const c = new Float64Array(DRAWS);
    let x = normal(rng);
    for (let t = 0; t < DRAWS; t++) {
      if (t > 0) x = phi * x + innovationSd * normal(rng);
      c[t] = x;
    }
    chains.push(c);
  }
  return chains;
}

function median(values: number[]): number {
  const v = [...values].sort((a, b) => a - b);
  const h = (v.length - 1) / 2;
  return (v[Math.floor(h)] + v[Math.ceil(h)]) / 2;
}

/**
 * Median over repeats of the mean wall time per quantity, in µs, and the same for process CPU time
 * (user + system; on a shared machine the wall time also counts time spent descheduled).
 * Also the median bulk ESS seen.
 */
function time(phi: number, options: ScratchOptions = {}): { us: number; cpuUs: number; essBulk: number } {
  const quantities = Array.from({ length: QUANTITIES }, (_, q) => ar1Quantity(phi, q));
  const scratch = createScratch(CHAINS, DRAWS, options);
  const ess: number[] = [];
  for (const chains of quantities) ess.push(diagnoseQuantity(chains, scratch).essBulk); // warm-up
  const perQuantity: number[] = [];
  const cpuPerQuantity: number[] = [];
  for (let r = 0; r < REPEATS; r++) {
    const cpu = process.cpuUsage();
    const start = process.hrtime.bigint();
    for (const chains of quantities) diagnoseQuantity(chains, scratch);
    perQuantity.push(Number(process.hrtime.bigint() - start) / 1000 / QUANTITIES);
    const used = process.cpuUsage(cpu);
    cpuPerQuantity.push((used.user + used.system) / QUANTITIES);
  }
  return { us: median(perQuantity), cpuUs: median(cpuPerQuantity), essBulk: median(ess) };
}

console.log(`diagnoseQuantity, ${CHAINS} chains × ${DRAWS} draws, median of ${REPEATS} repeats over ${QUANTITIES} quantities`);
const cases: Array<{ label: string; phi: number; options?: ScratchOptions }> = [
  { label: 'AR(1) phi = 0.3', phi: 0.3 },
  { label: 'AR(1) phi = 0.9', phi: 0.9 },
  { label: 'AR(1) phi = 0.995', phi: 0.995 },
  { label: 'AR(1) phi = 0.995, no FFT', phi: 0.995, options: { fftFromLag: Infinity } },
];
for (const c of cases) {
  const { us, cpuUs, essBulk } = time(c.phi, c.options);
  console.log(
    `${c.label.padEnd(28)} ${us.toFixed(0).padStart(6)} µs per quantity (CPU ${cpuUs.toFixed(0)} µs)  ` +
      `(3,000 quantities: ${((us * 3000) / 1e6).toFixed(2)} s; median bulk ESS ${essBulk.toFixed(0)})`,
  );
}
