/**
 * A minimal, valid run folder (the contract in DEVELOPERS.md) written from given site draws, for
 * the comparison tests: lets a test choose the posterior exactly (e.g. independent normals with
 * a closed-form answer) without running a fit.
 */
import { mkdirSync, writeFileSync } from 'node:fs';
import { join } from 'node:path';

export interface SyntheticSite {
  id: string;
  label?: string;
  flag?: 'publish' | 'caution' | 'suppress';
}

export interface SyntheticRun {
  sites: SyntheticSite[];
  /** draws[s] = site s's draws, chain after chain (chains × drawsPerChain values). */
  draws: Float32Array[];
  chains: number;
  drawsPerChain: number;
  converged?: boolean;
  /** Written as the manifest's settings.compare (as if the config had a compare: block). */
  compare?: Record<string, unknown>;
  unit?: string;
  interval?: number;
}

function mean(x: Float32Array): number {
  let s = 0;
  for (let i = 0; i < x.length; i++) s += x[i];
  return s / x.length;
}

function sd(x: Float32Array, m: number): number {
  let s = 0;
  for (let i = 0; i < x.length; i++) s += (x[i] - m) ** 2;
  return Math.sqrt(s / (x.length - 1));
}

/** Writes the run folder `dir` and returns it. */
export function writeSyntheticRun(dir: string, run: SyntheticRun): string {
  mkdirSync(dir, { recursive: true });
  const m = run.sites.length;
  const flags = run.sites.map((s) => s.flag ?? 'publish');
  const count = (f: string) => flags.filter((x) => x === f).length;
  const estimates = ['site,label,n,direct,direct_se,direct_cv,estimate,sd,lower,upper,cv,weight_direct,flag,reasons'];
  run.sites.forEach((s, i) => {
    const mu = mean(run.draws[i]);
    const sigma = sd(run.draws[i], mu);
    estimates.push([s.id, s.label ?? `Site ${s.id}`, 10, mu, sigma, '', mu, sigma, mu - 2 * sigma, mu + 2 * sigma, '', 0.5, flags[i], ''].join(','));
  });
  writeFileSync(join(dir, 'estimates.csv'), estimates.join('\n') + '\n');
  writeFileSync(join(dir, 'parameters.csv'), 'quantity,estimate,sd,lower,upper\ncoef:intercept,0,1,-2,2\nsite_sd,1,0.1,0.8,1.2\n');
  writeFileSync(join(dir, 'diagnostics.csv'), 'quantity,rhat,ess_bulk,ess_tail,mcse_mean\ncoef:intercept,1,1000,1000,0.01\nsite_sd,1,1000,1000,0.01\n');
  const summary = {
    format: 'shrinkwell-run',
    format_version: 1,
    title: 'Synthetic comparison run',
    period: null,
    measure: { name: 'Synthetic value', unit: run.unit ?? 'units', decimals: 2 },
    model: { kind: 'area', coefficients: ['intercept'], priors: { coefficients: { kind: 'flat' }, site_sd: { kind: 'uniform' } }, prior_notes: {}, variance_note: null },
    interval: run.interval ?? 0.95,
    sampling: { chains: run.chains, warmup: 0, draws: run.drawsPerChain, seed: 1, method: 'plain', threads: 1 },
    reliability: { cv_caution: 0.15, cv_suppress: 0.3, min_sample: 3, min_weight_direct: 0.2, rhat_max: 1.01, ess_min: 400 },
    converged: run.converged ?? true,
    gate: { worst_rhat: null, lowest_ess_bulk: null, lowest_ess_tail: null, failing: run.converged === false ? ['site_sd'] : [] },
    counts: { sites: m, sampled: m, publish: count('publish'), caution: count('caution'), suppress: count('suppress') },
  };
  writeFileSync(join(dir, 'summary.json'), JSON.stringify(summary, null, 2));
  const manifest = {
    tool: 'shrinkwell',
    version: '0.1.0',
    command: ['shrinkwell', 'fit', 'config.yaml'],
    inputs: [],
    settings: { sites: { id: 'site' }, ...(run.compare ? { compare: run.compare } : {}) },
  };
  writeFileSync(join(dir, 'manifest.json'), JSON.stringify(manifest, null, 2));
  const quantities = ['coef:intercept', 'site_sd', ...run.sites.map((s) => `site:${s.id}`)];
  const perQuantity = run.chains * run.drawsPerChain;
  const values = new Float32Array(quantities.length * perQuantity);
  for (let q = 0; q < 2; q++) for (let i = 0; i < perQuantity; i++) values[q * perQuantity + i] = q + (i % 7) / 7;
  run.draws.forEach((x, s) => {
    if (x.length !== perQuantity) throw new Error(`site ${s}: ${x.length} draws, expected ${perQuantity}`);
    values.set(x, (2 + s) * perQuantity);
  });
  writeFileSync(join(dir, 'draws.json'), JSON.stringify({ dtype: 'float32', byte_order: 'little', quantities, chains: run.chains, draws_per_chain: run.drawsPerChain }));
  // Explicit little-endian bytes, whatever the machine.
  const bytes = Buffer.alloc(values.length * 4);
  for (let i = 0; i < values.length; i++) bytes.writeFloatLE(values[i], 4 * i);
  writeFileSync(join(dir, 'draws.bin'), bytes);
  return dir;
}
