/**
 * One fit, end to end: config → data → sampler → summaries → run folder. This is an edge (it
 * reads and writes files and the clock); every stage it calls is a plain function.
 */
import { createHash } from 'node:crypto';
import { readFile } from 'node:fs/promises';
import { performance } from 'node:perf_hooks';
import { loadConfig } from '../config/load.js';
import type { Settings } from '../config/types.js';
import type { FileFingerprint } from '../data/types.js';
import type { PreparedFit } from '../models/prepared.js';
import { prepareFit } from './prepare.js';
import { UserError } from '../errors.js';
import { samplerCertificate, type Certificate } from '../summaries/certificate.js';
import type { ModelChecks } from '../summaries/model-checks.js';
import { createRng } from '../sampler/rng.js';
import { frequentistCsv, frequentistJson } from '../output/frequentist.js';
import { compareWithPosterior, type FrequentistComparison, type FrequentistFit } from '../summaries/frequentist.js';
import { loadBenchmarkWeights } from '../data/weights.js';
import { benchmarkDraws, type BenchmarkResult } from '../summaries/benchmark.js';
import { benchmarkedCsv, certificateCsv, drawsFiles, modelChecksCsv, diagnosticsCsv, estimatesCsv, manifestJson, parametersCsv, summaryJson } from '../output/contents.js';
import { writeRunFolder, type FileContent } from '../output/run-folder.js';
import { defaultThreads, sampleChains, summarizeChains } from '../sampler/parallel.js';
import type { ChainValues, QuantitySummary } from '../summaries/posterior.js';
import { evaluateGate, siteEstimates, type GateResult, type SiteEstimate } from '../summaries/sites.js';
import { VERSION } from '../version.js';

export interface FitOptions {
  configPath: string;
  outDir: string;
  /** Worker threads (default: min(chains, cores)); the draws do not depend on it. */
  threads?: number;
  /** The command line, recorded in the manifest. */
  command: string[];
  onWarning?: (message: string) => void;
  onProgress?: (done: number, total: number) => void;
}

export interface FitOutcome {
  runDir: string;
  converged: boolean;
  gate: GateResult;
  sites: SiteEstimate[];
  settings: Settings;
  timingsMs: Record<string, number>;
}

/** The random stream of the model checks' replicates: far from the chains' streams 0, 1, …. */
const MODEL_CHECK_STREAM = 1_000_000;

/**
 * Draws the model checks use, evenly spaced through the pooled draws: a predictive p-value
 * from 500 draws has Monte Carlo error ≤ 0.5/√500 ≈ 0.022 (less in the tails that matter),
 * enough for a screening check, and the checks (a distribution function per site and draw)
 * then cost the same for any run length.
 */
const MODEL_CHECK_DRAWS = 500;



/**
 * Pooled draws of one quantity over all chains; with `most`, at most that many, evenly spaced
 * (the same positions for every quantity, so draws of different quantities stay paired).
 */
function pooledDraws(chains: readonly ChainValues[], q: number, most = Infinity): Float64Array {
  const D = chains[0].draws;
  const total = chains.length * D;
  if (total <= most) {
    const out = new Float64Array(total);
    chains.forEach((c, k) => out.set(c.values.subarray(q * D, (q + 1) * D), k * D));
    return out;
  }
  const out = new Float64Array(most);
  const step = total / most;
  for (let i = 0; i < most; i++) {
    const k = Math.floor(i * step);
    const chain = Math.floor(k / D);
    out[i] = chains[chain].values[q * D + (k - chain * D)];
  }
  return out;
}

async function sha256File(path: string): Promise<string> {
  return createHash('sha256').update(await readFile(path)).digest('hex');
}

/**
 * The frequentist cross-check beside the posterior. A failure (e.g. too few sites for the
 * frequentist fit, which a proper prior can still handle) is a warning, not a failed run.
 */
function frequentistCrossCheck(
  prepared: PreparedFit,
  sites: readonly SiteEstimate[],
  onWarning?: (message: string) => void,
): { fit: FrequentistFit; comparison: FrequentistComparison } | null {
  if (!prepared.frequentist) return null;
  try {
    const fit = prepared.frequentist();
    const comparison = compareWithPosterior(fit, sites.map((s) => ({ mean: s.estimate, sd: s.sd })));
    return { fit, comparison };
  } catch (error) {
    if (!(error instanceof UserError)) throw error;
    onWarning?.(`frequentist cross-check skipped: ${error.message}`);
    return null;
  }
}

/** The sampler certificate: Gibbs vs exact posterior means on this data, where exact means exist. */
function certify(
  prepared: PreparedFit,
  summaries: ReadonlyMap<string, QuantitySummary>,
  onWarning?: (message: string) => void,
): Certificate | null {
  if (!prepared.exactMeans) return null;
  try {
    return samplerCertificate(summaries, prepared.exactMeans());
  } catch (error) {
    if (!(error instanceof UserError)) throw error;
    onWarning?.(`sampler certificate skipped: ${error.message}`);
    return null;
  }
}

/** A large benchmarking adjustment usually means the total and the weights are on different scales. */
function warnIfFarFromOne(b: BenchmarkResult, weights: string, onWarning?: (message: string) => void): void {
  const factor = b.total / b.unadjustedSum.mean;
  if (factor > 0.5 && factor < 2) return;
  onWarning?.(
    `benchmark: the weighted sum of the estimates (${b.unadjustedSum.mean.toPrecision(4)}) is far from the total ` +
      `(${b.total}); check that benchmark.total and the weights in column "${weights}" are on the same scale ` +
      '(shares with a mean, counts with a total)',
  );
}

/** The boundary file of the report, fingerprinted like the data (it is an input of the report). */
async function mapFingerprint(settings: Settings, onWarning?: (message: string) => void): Promise<FileFingerprint | null> {
  const file = settings.report.map?.file;
  if (!file) return null;
  try {
    const bytes = await readFile(file);
    const parsed = JSON.parse(bytes.toString('utf8')) as { features?: unknown[] };
    const rows = Array.isArray(parsed.features) ? parsed.features.length : 0;
    return { role: 'map', path: file, rows, sha256: createHash('sha256').update(bytes).digest('hex') };
  } catch (error) {
    onWarning?.(`report.map.file ${file}: ${(error as Error).message.split('\n')[0]}; the report will have no maps`);
    return null;
  }
}

export async function runFit(options: FitOptions): Promise<FitOutcome> {
  const clock = performance.now();
  const lap = (): number => {
    const now = performance.now();
    const elapsed = Math.round(now - lastLap);
    lastLap = now;
    return elapsed;
  };
  let lastLap = clock;
  const { settings, warnings } = await loadConfig(options.configPath);
  warnings.forEach((w) => options.onWarning?.(w));
  const prepared = await prepareFit(settings);
  const benchmarkWeights = await loadBenchmarkWeights(settings);
  const map = await mapFingerprint(settings, options.onWarning);
  if (map) prepared.files.push(map);
  const configSha256 = await sha256File(settings.config_path);
  const timingsMs: Record<string, number> = { read: lap() };

  const { sampling } = settings;
  const threads = Math.min(options.threads ?? sampling.threads ?? defaultThreads(sampling.chains), sampling.chains);
  const chains = await sampleChains({
    spec: prepared.spec,
    plan: { warmup: sampling.warmup, draws: sampling.draws, seed: sampling.seed },
    chains: sampling.chains,
    threads,
    onProgress: options.onProgress,
  });
  timingsMs.sample = lap();

  const names = prepared.quantities;
  const position = new Map(names.map((name, q) => [name, q]));
  const at = (quantity: string): number => position.get(quantity) ?? -1;
  const summaries = await summarizeChains(chains, names, settings.interval, threads);
  timingsMs.diagnostics = lap();
  const byName = new Map(summaries.map((s) => [s.name, s]));
  const gate = evaluateGate(summaries, settings.reliability.rhat_max, settings.reliability.ess_min);
  const weights = prepared.weightDirect((quantity) => pooledDraws(chains, at(quantity)));
  const sites = siteEstimates(prepared.sites, byName, weights, settings.reliability, gate, settings.interval);
  timingsMs.estimates = lap();
  const benchmark = benchmarkWeights && settings.benchmark
    ? benchmarkDraws(
        chains,
        prepared.sites.siteIds.map((id) => at(`site:${id}`)),
        benchmarkWeights,
        settings.benchmark.total,
        settings.benchmark.method,
        settings.interval,
      )
    : null;
  if (benchmark && settings.benchmark) warnIfFarFromOne(benchmark, settings.benchmark.weights, options.onWarning);
  const frequentist = frequentistCrossCheck(prepared, sites, options.onWarning);
  timingsMs.frequentist = lap();
  const certificate = certify(prepared, byName, options.onWarning);
  timingsMs.certificate = lap();
  const checks = prepared.modelChecks?.(
    (quantity) => pooledDraws(chains, at(quantity), MODEL_CHECK_DRAWS),
    Float64Array.from(sites, (s) => s.estimate),
    createRng(sampling.seed, MODEL_CHECK_STREAM),
  ) ?? null;
  timingsMs.checks = lap();
  timingsMs.summarize = timingsMs.diagnostics + timingsMs.estimates + timingsMs.frequentist + timingsMs.certificate + timingsMs.checks;

  const runDir = await writeRunFolder(options.outDir, runFolderFiles(settings, prepared, {
    names, chains, summaries, sites, gate, benchmark, frequentist, certificate, checks, threads, configSha256, command: options.command, timingsMs,
  }));
  timingsMs.write = lap();
  timingsMs.total = Math.round(performance.now() - clock);
  return { runDir, converged: gate.converged, gate, sites, settings, timingsMs };
}

interface FitProducts {
  names: string[];
  chains: ChainValues[];
  summaries: QuantitySummary[];
  sites: SiteEstimate[];
  gate: GateResult;
  benchmark: BenchmarkResult | null;
  frequentist: { fit: FrequentistFit; comparison: FrequentistComparison } | null;
  certificate: Certificate | null;
  checks: ModelChecks | null;
  threads: number;
  configSha256: string;
  command: string[];
  timingsMs: Record<string, number>;
}

function runFolderFiles(
  settings: Settings,
  prepared: PreparedFit,
  r: FitProducts,
): Map<string, FileContent> {
  const draws = drawsFiles(r.names, r.chains);
  return new Map<string, FileContent>([
    ['estimates.csv', estimatesCsv(r.sites)],
    ['parameters.csv', parametersCsv(r.summaries)],
    ['diagnostics.csv', diagnosticsCsv(r.summaries)],
    [
      'summary.json',
      summaryJson({
        settings,
        coefficientNames: prepared.coefficientNames,
        varianceNote: prepared.varianceNote,
        directIntervalNote: prepared.directIntervalNote,
        cvRule: prepared.cvRule,
        methodNote: prepared.methodNote,
        summaries: r.summaries,
        sites: r.sites,
        gate: r.gate,
        threads: r.threads,
        benchmark: r.benchmark,
        frequentist: r.frequentist,
        certificate: r.certificate,
        checks: r.checks,
      }),
    ],
    ...(r.checks ? ([['model_checks.csv', modelChecksCsv(r.checks)]] as Array<[string, FileContent]>) : []),
    ...(r.certificate ? ([['certificate.csv', certificateCsv(r.certificate)]] as Array<[string, FileContent]>) : []),
    ...(r.frequentist
      ? ([
          ['frequentist.csv', frequentistCsv(r.frequentist.fit)],
          ['frequentist.json', frequentistJson(r.frequentist.fit)],
        ] as Array<[string, FileContent]>)
      : []),
    [
      'manifest.json',
      manifestJson({
        settings,
        version: VERSION,
        command: r.command,
        configSha256: r.configSha256,
        inputs: prepared.files,
        threads: r.threads,
        timingsMs: r.timingsMs,
        createdAt: new Date().toISOString(),
      }),
    ],
    ...(r.benchmark ? ([['benchmarked.csv', benchmarkedCsv(r.sites, r.benchmark)]] as Array<[string, FileContent]>) : []),
    ['draws.json', draws.json],
    ['draws.bin', draws.bin],
  ]);
}
