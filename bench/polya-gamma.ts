/**
 * Micro-benchmark: nanoseconds per Pólya–Gamma variate (not a test; speed targets live here).
 * Run after `npm run build` with `node dist/bench/polya-gamma.js` (all cases) or
 * `node dist/bench/polya-gamma.js CASE_NUMBER`. Each case runs in its own Node process so call
 * sites stay monomorphic and one case's compiled code does not slow another's.
 *
 * Cases: pg1 at z = 0, 1, 5 (and 20); pgInt at b = 10, 100, 500 (z = 1), the large-b branches at
 * z = 3 and z = 30, and for comparison the exact sum of b pg1 draws at b = 100 and 500, which is
 * what the gamma-series approximation replaces above b = PG_EXACT_SUM_MAX_B.
 */
import { execFileSync } from 'node:child_process';
import { fileURLToPath } from 'node:url';
import { createRng } from '../src/sampler/rng.js';
import { PG_EXACT_SUM_MAX_B, pg1, pgInt } from '../src/sampler/polya-gamma.js';

const TARGET_MS = 400;
const REPEATS = 5;

/** Best-of-REPEATS time per call, in ns; the checksum keeps the loop from being optimised away. */
function nsPerCall(draw: () => number): { ns: number; checksum: number } {
  // Size the loop so one repeat takes about TARGET_MS.
  let calls = 1000;
  for (;;) {
    const start = process.hrtime.bigint();
    for (let i = 0; i < calls; i++) draw();
    const ms = Number(process.hrtime.bigint() - start) / 1e6;
    if (ms > TARGET_MS / 4) {
      calls = Math.max(1000, Math.round((calls * TARGET_MS) / ms));
      break;
    }
    calls *= 4;
  }
  let best = Infinity;
  let checksum = 0;
  for (let repeat = 0; repeat < REPEATS; repeat++) {
    const start = process.hrtime.bigint();
    for (let i = 0; i < calls; i++) checksum += draw();
    best = Math.min(best, Number(process.hrtime.bigint() - start) / calls);
  }
  return { ns: best, checksum };
}

function benchCases(): Array<[string, () => number]> {
  const rng = createRng(20261201, 0);
  const exactSum = (b: number, z: number) => (): number => {
    let sum = 0;
    for (let i = 0; i < b; i++) sum += pg1(rng, z);
    return sum;
  };
  return [
    ['pg1 z = 0', () => pg1(rng, 0)],
    ['pg1 z = 1', () => pg1(rng, 1)],
    ['pg1 z = 5', () => pg1(rng, 5)],
    ['pg1 z = 20', () => pg1(rng, 20)],
    ['pgInt b = 10, z = 1 (exact sum)', () => pgInt(rng, 10, 1)],
    [`pgInt b = ${PG_EXACT_SUM_MAX_B + 1}, z = 1 (series)`, () => pgInt(rng, PG_EXACT_SUM_MAX_B + 1, 1)],
    ['pgInt b = 100, z = 1 (series)', () => pgInt(rng, 100, 1)],
    ['pgInt b = 500, z = 1 (series)', () => pgInt(rng, 500, 1)],
    ['pgInt b = 500, z = 3 (series)', () => pgInt(rng, 500, 3)],
    ['pgInt b = 500, z = 30 (inverse Gaussian)', () => pgInt(rng, 500, 30)],
    ['sum of 100 pg1, z = 1 (exact)', exactSum(100, 1)],
    ['sum of 500 pg1, z = 1 (exact)', exactSum(500, 1)],
  ];
}

function main(): void {
  const cases = benchCases();
  const which = process.argv[2];
  if (which !== undefined) {
    const [name, draw] = cases[Number(which)];
    const { ns, checksum } = nsPerCall(draw);
    console.log(`${name.padEnd(44)} ${ns.toFixed(0).padStart(8)} ns   (checksum ${checksum.toExponential(3)})`);
    return;
  }
  console.log(`ns per Pólya–Gamma variate, best of ${REPEATS} runs of ~${TARGET_MS} ms (node ${process.version})`);
  const self = fileURLToPath(import.meta.url);
  for (let index = 0; index < cases.length; index++) {
    process.stdout.write(execFileSync(process.execPath, [self, String(index)], { encoding: 'utf8' }));
  }
}

main();
