/**
 * Micro-benchmark: nanoseconds per variate for the seeded generator and the variate functions.
 * Not a test; speed targets live here. Run after `npm run build` with
 * `node dist/bench/variates.js`.
 *
 * Also times the Marsaglia polar method (Marsaglia & Bray 1964) in two forms — discarding the
 * second value of each pair, and caching it in a closure — as the comparison behind the choice of
 * the ziggurat in src/sampler/variates.ts.
 */
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

function main(): void {
  const rng = createRng(20261201, 0);
  const cached = polarCached(rng);
  const cases: Array<[string, () => number]> = [
    ['nextU32', () => rng.nextU32()],
    ['uniform', () => rng.uniform()],
    ['normal (ziggurat, 256 layers)', () => normal(rng)],
    ['normal (polar, discard pair)', () => polarDiscard(rng)],
    ['normal (polar, cached pair)', cached],
    ['gamma shape 0.3', () => gamma(rng, 0.3)],
    ['gamma shape 1', () => gamma(rng, 1)],
    ['gamma shape 2.5', () => gamma(rng, 2.5)],
    ['gamma shape 40', () => gamma(rng, 40)],
    ['inverseGamma shape 3, scale 2', () => inverseGamma(rng, 3, 2)],
  ];
  console.log(`ns per variate, best of ${REPEATS} runs of ${DRAWS} draws (node ${process.version})`);
  for (const [name, draw] of cases) {
    const { ns, checksum } = nsPerCall(draw);
    console.log(`${name.padEnd(32)} ${ns.toFixed(2).padStart(7)} ns   (checksum ${checksum.toExponential(3)})`);
  }
}

main();
