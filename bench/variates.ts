/**
 * Micro-benchmark: nanoseconds per variate for the seeded generator and the variate functions.
 * Not a test; speed targets live here. Run after `npm run build` with
 * `node dist/bench/variates.js` (all cases) or `node dist/bench/variates.js CASE_NUMBER`.
 * Each case runs in its own Node process so that call sites stay monomorphic and one case's
 * compiled code does not slow another's.
 *
 * Also times the Marsaglia polar method (Marsaglia & Bray 1964) in two forms — discarding the
 * second value of each pair, and caching it in a closure — as the comparison behind the choice of
 * the ziggurat in src/sampler/variates.ts.
 */
import { execFileSync } from 'node:child_process';
import { fileURLToPath } from 'node:url';
import { createRng, type Rng } from '../src/sampler/rng.js';
import { gamma, inverseGamma, normal } from '../src/sampler/variates.js';

const DRAWS = 4_000_000;
const REPEATS = 5;

/** Best-of-REPEATS time per call, in ns; the checksum keeps the loop from being optimised away. */
function nsPerCall(draw: () => number): { ns: number; checksum: number } {
  let best = Infinity;
  let checksum = 0;
  for (let repeat = 0; repeat < REPEATS; repeat++) {
    const start = process.hrtime.bigint();
    for (let i = 0; i < DRAWS; i++) checksum += draw();
    const elapsed = Number(process.hrtime.bigint() - start);
    best = Math.min(best, elapsed / DRAWS);
  }
  return { ns: best, checksum };
}

/** Polar method, second value of the pair thrown away (stateless). */
function polarDiscard(rng: Rng): number {
  for (;;) {
    const a = 2 * rng.uniform() - 1;
    const b = 2 * rng.uniform() - 1;
    const s = a * a + b * b;
    if (s < 1 && s > 0) return a * Math.sqrt((-2 * Math.log(s)) / s);
  }
}

/** Polar method with the second value cached in a closure (stateful outside the generator). */
function polarCached(rng: Rng): () => number {
  let spare = 0;
  let hasSpare = false;
  return () => {
    if (hasSpare) {
      hasSpare = false;
      return spare;
    }
    for (;;) {
      const a = 2 * rng.uniform() - 1;
      const b = 2 * rng.uniform() - 1;
      const s = a * a + b * b;
      if (s < 1 && s > 0) {
        const factor = Math.sqrt((-2 * Math.log(s)) / s);
        spare = b * factor;
        hasSpare = true;
        return a * factor;
      }
    }
  };
}

function benchCases(): Array<[string, () => number]> {
  const rng = createRng(20261201, 0);
  return [
    ['nextU32', () => rng.nextU32()],
    ['uniform', () => rng.uniform()],
    ['normal (ziggurat, 256 layers)', () => normal(rng)],
    ['normal (polar, discard pair)', () => polarDiscard(rng)],
    ['normal (polar, cached pair)', polarCached(rng)],
    ['gamma shape 0.3', () => gamma(rng, 0.3)],
    ['gamma shape 1', () => gamma(rng, 1)],
    ['gamma shape 2.5', () => gamma(rng, 2.5)],
    ['gamma shape 40', () => gamma(rng, 40)],
    ['inverseGamma shape 3, scale 2', () => inverseGamma(rng, 3, 2)],
  ];
}

function main(): void {
  const cases = benchCases();
  const which = process.argv[2];
  if (which !== undefined) {
    const [name, draw] = cases[Number(which)];
    const { ns, checksum } = nsPerCall(draw);
    console.log(`${name.padEnd(32)} ${ns.toFixed(2).padStart(7)} ns   (checksum ${checksum.toExponential(3)})`);
    return;
  }
  console.log(`ns per variate, best of ${REPEATS} runs of ${DRAWS} draws (node ${process.version})`);
  const self = fileURLToPath(import.meta.url);
  for (let index = 0; index < cases.length; index++) {
    process.stdout.write(execFileSync(process.execPath, [self, String(index)], { encoding: 'utf8' }));
  }
}

main();
