/**
 * From a schema-valid config to the resolved `Settings`: the rules that tie several fields
 * together, the warnings, the normalised priors and absolute paths.
 */
import { dirname, resolve as resolvePath } from 'node:path';
import type { CoefficientPrior, ModelKind, ScalePrior, Settings } from './types.js';
import type { ConfigParsed } from './schema.js';
import { DEFAULT_SEED } from './schema.js';
import type { Problem } from './issues.js';

type Model = ConfigParsed['model'];
type VarianceFrom = NonNullable<Settings['model']['variance_from']>;

/** True when the raw config has a value at `path` (defaults do not count). */
export function isGiven(raw: unknown, path: readonly string[]): boolean {
  let node: unknown = raw;
  for (const key of path) {
    if (node === null || typeof node !== 'object' || Array.isArray(node)) return false;
    if (!Object.hasOwn(node, key)) return false;
    node = (node as Record<string, unknown>)[key];
  }
  return node !== undefined;
}

/** Where the area model's ψ_i come from, or a problem when the keys do not say it clearly. */
function areaVarianceProblems(model: Model): Problem[] {
  const { variance, sd, sample_size: sampleSize, variance_from: from } = model;
  const problems: Problem[] = [];
  const needSdAndN = (mode: string) => {
    if (sd === undefined) {
      problems.push({ path: ['model', 'sd'], message: `required with variance_from: ${mode} (the column of per-site standard deviations)` });
    }
    if (sampleSize === undefined) {
      problems.push({ path: ['model', 'sample_size'], message: `required with variance_from: ${mode} (ψ_i divides by the sample size n_i)` });
    }
  };
  if (from === 'column') {
    if (variance === undefined) {
      problems.push({ path: ['model', 'variance'], message: 'required with variance_from: column (the column of sampling variances)' });
    }
    if (sd !== undefined) {
      problems.push({ path: ['model', 'sd'], message: 'not used with variance_from: column; remove it, or set variance_from: sd or pooled and remove model.variance' });
    }
  } else if (from === 'sd' || from === 'pooled') {
    if (variance !== undefined) {
      problems.push({ path: ['model', 'variance'], message: `cannot be used with variance_from: ${from}, which computes ψ_i from model.sd and model.sample_size; remove one of them` });
    }
    needSdAndN(from);
  } else if (variance !== undefined && sd !== undefined) {
    problems.push({ path: ['model', 'sd'], message: 'give either model.variance, or model.sd with model.sample_size, not both' });
  } else if (variance === undefined && sd === undefined) {
    problems.push({ path: ['model', 'variance'], message: "an area model needs each site's sampling variance: give model.variance, or model.sd with model.sample_size" });
  } else if (sd !== undefined && sampleSize === undefined) {
    problems.push({ path: ['model', 'sample_size'], message: 'required with model.sd: the sampling variance is sd² / n' });
  }
  return problems;
}

/** The resolved variance mode of a valid area model. */
function varianceFrom(model: Model): VarianceFrom {
  if (model.variance_from !== undefined) return model.variance_from;
  return model.variance !== undefined ? 'column' : 'sd';
}

/** "an area model", "a unit model", "a counts model". */
function aModel(kind: ModelKind): string {
  return `${kind === 'area' ? 'an' : 'a'} ${kind} model`;
}

/** Keys each model kind must have, with why. */
function requiredForKind(config: ConfigParsed): Problem[] {
  const { model } = config;
  const missing = (path: string[], why: string): Problem => ({ path, message: `required for ${aModel(model.kind)}: ${why}` });
  const problems: Problem[] = [];
  if (model.kind === 'area') {
    if (model.direct === undefined) problems.push(missing(['model', 'direct'], "the column holding each site's direct estimate"));
    problems.push(...areaVarianceProblems(model));
  } else if (model.kind === 'unit') {
    if (config.units === undefined) problems.push(missing(['units'], 'the file with one row per sampled unit'));
    if (model.response === undefined) problems.push(missing(['model', 'response'], 'the survey variable in the units file'));
    if (model.finite_population === true && model.population_size === undefined) {
      problems.push({ path: ['model', 'population_size'], message: 'required with model.finite_population: true (the column of population sizes N_i in the sites file)' });
    }
  } else {
    if (model.cases === undefined) problems.push(missing(['model', 'cases'], 'the column with the number of cases per site'));
    if (model.trials === undefined) problems.push(missing(['model', 'trials'], 'the column with the number of trials per site'));
  }
  return problems;
}

/** Column roles other than covariates, for the "also used as" check. */
const ROLE_KEYS = ['direct', 'variance', 'sd', 'sample_size', 'cases', 'trials', 'population_size'] as const;

function covariateProblems(config: ConfigParsed): Problem[] {
  const problems: Problem[] = [];
  const seen = new Set<string>();
  const { model } = config;
  config.model.covariates.forEach((name, index) => {
    const path = ['model', 'covariates', index];
    if (seen.has(name)) problems.push({ path, message: `"${name}" is listed twice` });
    seen.add(name);
    if (name === config.sites.id) problems.push({ path, message: `"${name}" is the site id column (sites.id), not a covariate` });
    for (const role of ROLE_KEYS) {
      if (model[role] === name) {
        problems.push({ path, message: `"${name}" is also the column of model.${role}; a covariate must be a different column` });
      }
    }
  });
  return problems;
}

/**
 * Rules that tie several fields together, each with its own message, in a fixed order.
 * Runs only on a config that already passed the schema.
 */
export function crossFieldProblems(config: ConfigParsed): Problem[] {
  const problems = [...requiredForKind(config), ...covariateProblems(config)];
  const { cv_caution: caution, cv_suppress: suppress } = config.reliability;
  if (!(caution < suppress)) {
    problems.push({ path: ['reliability', 'cv_suppress'], message: `must be greater than cv_caution (${suppress} ≤ ${caution})` });
  }
  return problems;
}

/** Keys that a model kind ignores, so that a stray key is noticed rather than silently dropped. */
const IGNORED_BY_KIND: Readonly<Record<ModelKind, readonly string[][]>> = {
  area: [['units'], ['model', 'response'], ['model', 'cases'], ['model', 'trials'], ['model', 'population_size'], ['model', 'finite_population'], ['model', 'priors', 'unit_sd']],
  unit: [['model', 'direct'], ['model', 'variance'], ['model', 'sd'], ['model', 'sample_size'], ['model', 'variance_from'], ['model', 'design_effect'], ['model', 'cases'], ['model', 'trials']],
  counts: [['units'], ['model', 'direct'], ['model', 'variance'], ['model', 'sd'], ['model', 'sample_size'], ['model', 'variance_from'], ['model', 'response'], ['model', 'population_size'], ['model', 'finite_population'], ['model', 'priors', 'unit_sd']],
};

/** Warnings: things that run, but probably not as the analyst meant. */
export function configWarnings(config: ConfigParsed, raw: unknown): string[] {
  const warnings: string[] = [];
  if (!isGiven(raw, ['sampling', 'seed'])) {
    warnings.push(`sampling.seed not set; using ${DEFAULT_SEED} so the run is reproducible`);
  }
  if (config.sampling.chains < 2) {
    warnings.push(`sampling.chains is ${config.sampling.chains}: R-hat compares several chains, so convergence is poorly checked; 4 chains are usual`);
  }
  const kind = config.model.kind;
  for (const path of IGNORED_BY_KIND[kind]) {
    if (isGiven(raw, path)) warnings.push(`${path.join('.')} is not used by ${aModel(kind)} and is ignored`);
  }
  if (kind === 'unit' && config.model.population_size !== undefined && config.model.finite_population !== true) {
    warnings.push('model.population_size is used only with model.finite_population: true; without it the target is the model mean X̄ᵀβ + u_i');
  }
  if (kind === 'area' && varianceFrom(config.model) === 'column' && isGiven(raw, ['model', 'design_effect'])) {
    warnings.push('model.design_effect is ignored when the sampling variance is read from a column (model.variance); that column should already include the design effect');
  }
  return warnings;
}

function coefficientPrior(prior: ConfigParsed['model']['priors']['coefficients']): CoefficientPrior {
  if (prior === 'flat') return { kind: 'flat' };
  return { kind: 'normal', mean: prior.normal.mean, sd: prior.normal.sd };
}

function scalePrior(prior: ConfigParsed['model']['priors']['site_sd']): ScalePrior {
  if ('half_cauchy' in prior) return { kind: 'half_cauchy', scale: prior.half_cauchy.scale };
  if ('inverse_gamma' in prior) {
    return { kind: 'inverse_gamma', shape: prior.inverse_gamma.shape, scale: prior.inverse_gamma.scale };
  }
  return { kind: 'uniform' };
}

/** Copies only the keys that are set, so the resolved config shows no `undefined` entries. */
function definedOnly<T extends object>(value: T): T {
  return Object.fromEntries(Object.entries(value).filter(([, v]) => v !== undefined)) as T;
}

/**
 * The resolved settings: priors as tagged unions, file paths absolute (relative to the
 * config file's folder), the area model's variance mode made explicit.
 */
export function resolveSettings(config: ConfigParsed, configPath: string): Settings {
  const configFile = resolvePath(configPath);
  const folder = dirname(configFile);
  const { model } = config;
  return definedOnly({
    config_path: configFile,
    title: config.title,
    period: config.period,
    measure: { ...config.measure },
    sites: definedOnly({ ...config.sites, file: resolvePath(folder, config.sites.file) }),
    units: config.units && { ...config.units, file: resolvePath(folder, config.units.file) },
    model: definedOnly({
      ...model,
      variance_from: model.kind === 'area' ? varianceFrom(model) : undefined,
      covariates: [...model.covariates],
      priors: {
        coefficients: coefficientPrior(model.priors.coefficients),
        site_sd: scalePrior(model.priors.site_sd),
        unit_sd: scalePrior(model.priors.unit_sd),
      },
    }),
    sampling: definedOnly({ ...config.sampling }),
    reliability: { ...config.reliability },
    interval: config.interval,
    report: definedOnly({
      paper: config.report.paper,
      template: config.report.template && resolvePath(folder, config.report.template),
      map: config.report.map && { ...config.report.map, file: resolvePath(folder, config.report.map.file) },
    }),
    benchmark: config.benchmark && { ...config.benchmark },
    compare: config.compare && definedOnly({ ...config.compare }),
  });
}
