/**
 * The one schema of a shrinkwell config file (YAML). Everything else derives from it: the
 * validation in `load.ts`, the defaults, and the JSON Schema that editors use for completion
 * (`schema/shrinkwell.config.schema.json`, written by `scripts/export-schema.ts`).
 *
 * The schema checks shapes, types and ranges of single fields. Rules that tie several fields
 * together (which columns each model kind needs, cv_caution < cv_suppress, …) live in
 * `resolve.ts`, because JSON Schema cannot state them readably.
 */
import { z } from 'zod';
import { didYouMean } from './suggest.js';

/** Seed used when the config sets none, so that every run is reproducible. */
export const DEFAULT_SEED = 20261201;

/** Largest seed: seeds are 32-bit unsigned integers so every generator can take them. */
export const MAX_SEED = 4294967295;

/**
 * A strict object (unknown keys are errors) whose unknown-key message carries a
 * "did you mean" hint computed against the keys allowed at this level.
 */
function keys<Shape extends z.ZodRawShape>(shape: Shape) {
  const allowed = Object.keys(shape);
  return z.strictObject(shape, {
    error: (issue) => {
      if (issue.code !== 'unrecognized_keys') return undefined;
      return unknownKeyMessage(issue.keys[0] ?? '', allowed);
    },
  });
}

/** Message for an unknown key: a close match if there is one, otherwise the allowed keys. */
export function unknownKeyMessage(key: string, allowed: readonly string[]): string {
  const hint = didYouMean(key, allowed);
  if (hint !== '') return `unknown key${hint}`;
  if (allowed.length === 0) return 'unknown key (no settings go here; write {})';
  return `unknown key (allowed here: ${allowed.join(', ')})`;
}

/**
 * A choice written as a one-key mapping, e.g. `{ half_cauchy: { scale: 1 } }`, or as a bare
 * word for options that take no settings (`flat`). `examples` shows each option as written.
 */
function choice<Options extends readonly [z.ZodType, ...z.ZodType[]]>(
  options: Options,
  names: readonly string[],
  examples: Readonly<Record<string, string>>,
) {
  return z.union(options, { error: (issue) => choiceMessage(issue.input, names, examples) });
}

/** Message for a value that matches none of the options of a `choice`. */
export function choiceMessage(
  input: unknown,
  names: readonly string[],
  examples: Readonly<Record<string, string>>,
): string {
  const base = `expected one of ${names.join(', ')}`;
  let given: string[] = [];
  if (typeof input === 'string') given = [input];
  else if (input !== null && typeof input === 'object' && !Array.isArray(input)) {
    given = Object.keys(input);
  }
  if (given.length > 1) return `${base}; give exactly one (got ${given.join(', ')})`;
  if (given.length === 1) {
    const word = given[0];
    if (names.includes(word)) return `${base}; write it as ${examples[word]}`;
    const hint = didYouMean(word, names);
    if (hint !== '') return `${base}${hint}`;
  }
  return base;
}

const columnName = (what: string) =>
  z.string().min(1).describe(`Column of the sites file holding ${what}.`);

const positive = (what: string) => z.number().positive().describe(what);

/** Fixed prior on the regression coefficients: never learned from the data. */
const coefficientPrior = choice(
  [
    z.literal('flat').describe('Flat (improper uniform) prior on every coefficient.'),
    keys({
      normal: keys({
        mean: z.number().default(0).describe('Prior mean of every coefficient.'),
        sd: positive('Prior standard deviation of every coefficient, on the scale of the measure.'),
      }).describe('Independent normal prior on each coefficient, with fixed mean and sd.'),
    }),
  ],
  ['flat', 'normal'],
  { flat: 'flat', normal: '{ normal: { mean: 0, sd: 10 } }' },
);

/** Hyperprior on a standard deviation: learned from the data. */
const scalePrior = (whose: string) =>
  choice(
    [
      keys({
        uniform: keys({}).describe(
          `Uniform prior on ${whose} over (0, ∞). Write { uniform: {} }.`,
        ),
      }),
      keys({
        half_cauchy: keys({
          scale: positive(
            `Scale A of the half-Cauchy prior, in the unit of the measure: half the prior mass lies below A.`,
          ),
        }).describe(
          `Half-Cauchy(0, A) prior on ${whose} (Gelman 2006); the plain sampler draws it through ` +
            `the inverse-gamma mixture of Huang & Wand (2013). Advised when there are few sites, where a uniform ` +
            `prior lets the data overstate the spread between sites.`,
        ),
      }),
      keys({
        inverse_gamma: keys({
          shape: positive('Shape of the inverse-gamma prior on the variance.'),
          scale: positive('Scale of the inverse-gamma prior on the variance.'),
        }).describe(
          `Inverse-gamma(shape, scale) prior on the variance (the square of ${whose}). ` +
            `Gelman (2006) shows small shape and scale values are not "uninformative" near zero; ` +
            `use it only with values that express real prior knowledge.`,
        ),
      }),
    ],
    ['uniform', 'half_cauchy', 'inverse_gamma'],
    {
      uniform: '{ uniform: {} }',
      half_cauchy: '{ half_cauchy: { scale: 1 } }',
      inverse_gamma: '{ inverse_gamma: { shape: 2, scale: 0.2 } }',
    },
  );

const SCALE_PRIOR_DEFAULT_WHY =
  'Default { uniform: {} }: Gelman (2006, Bayesian Analysis 1(3), 515–534) recommends a uniform ' +
  'prior on the standard deviation when the number of groups is not small; with few sites ' +
  'choose half_cauchy, with a scale about the size you would expect the spread to be.';

const measure = keys({
  name: z.string().min(1).describe('What is estimated, e.g. "Mean yield". Used in the report.'),
  unit: z
    .string()
    .default('')
    .describe('Unit of the measure, e.g. "t/ha". Default: none (empty).'),
  decimals: z
    .number()
    .int()
    .min(0)
    .max(10)
    .default(2)
    .describe('Decimals shown for estimates in the report and CSV files. Default 2.'),
}).describe('The quantity estimated for each site.');

const sites = keys({
  file: z
    .string()
    .min(1)
    .describe('CSV file with one row per site (district), relative to this config file.'),
  id: z.string().min(1).describe('Column with the site id; each id must appear once.'),
  label: z
    .string()
    .min(1)
    .optional()
    .describe('Column with a readable site name for the report. Default: the id.'),
}).describe('The sites (districts): their ids, covariates and, for the area model, direct estimates.');

const units = keys({
  file: z
    .string()
    .min(1)
    .describe('CSV file with one row per sampled unit (household, plot), relative to this config file.'),
  site: z.string().min(1).describe('Column giving the site id of each unit.'),
  aggregated: z
    .boolean()
    .optional()
    .describe(
      'true: the file holds per-site sums instead of unit rows (one row per site, or several ' +
        'that are added up), as produced by the aggregation query in the README: n_units, ' +
        'sum_<column> and sum_<column>_times_<column> for the covariates and the response. ' +
        'Default false: one row per sampled unit.',
    ),
}).describe('Unit model only: the unit-level survey file.');

const priors = keys({
  coefficients: coefficientPrior
    .default('flat')
    .describe(
      'Fixed prior on the regression coefficients (never learned from the data): flat, or ' +
        '{ normal: { mean, sd } }. Default flat: the coefficients are then estimated from the ' +
        'data alone, as in the classical regression.',
    ),
  site_sd: scalePrior('the between-site standard deviation σ_u')
    .default({ uniform: {} })
    .describe(
      'Hyperprior on the between-site standard deviation σ_u (learned from the data): ' +
        '{ uniform: {} }, { half_cauchy: { scale } } or { inverse_gamma: { shape, scale } }. ' +
        SCALE_PRIOR_DEFAULT_WHY,
    ),
  unit_sd: scalePrior('the within-site standard deviation σ_e')
    .default({ uniform: {} })
    .describe(
      'Unit model only: hyperprior on the within-site standard deviation σ_e. ' +
        SCALE_PRIOR_DEFAULT_WHY,
    ),
}).describe('Priors: fixed for the coefficients, learned hyperpriors for the standard deviations.');

const model = keys({
  kind: z
    .enum(['area', 'unit', 'counts'])
    .describe(
      'area: one direct estimate per site with known sampling variance (Fay & Herriot 1979); ' +
        'unit: unit-level survey rows with a nested error (Battese, Harter & Fuller 1988); ' +
        'counts: cases out of trials per site, binomial with a logit link.',
    ),
  direct: columnName("the site's direct (survey) estimate; blank where the site has no sample").optional(),
  variance: columnName('the sampling variance ψ_i of the direct estimate (area model)').optional(),
  sd: columnName(
    'the within-site standard deviation of the survey variable (area model); ψ_i = sd² / n',
  ).optional(),
  sample_size: columnName('the number of sampled units n_i in the site').optional(),
  variance_from: z
    .enum(['column', 'sd', 'pooled'])
    .optional()
    .describe(
      'Area model: how ψ_i is obtained. column: read from model.variance; sd: design_effect × ' +
        'sd_i² / n_i; pooled: design_effect × s²_pooled / n_i with s²_pooled = Σ(n_i − 1) sd_i² / ' +
        'Σ(n_i − 1), for when per-site sds rest on too few units to be trusted. Default: column ' +
        'if model.variance is given, otherwise sd.',
    ),
  design_effect: z
    .number()
    .positive()
    .default(1)
    .describe(
      'Area model, variance_from sd or pooled: multiplies ψ_i to allow for the survey design ' +
        '(clustering, weighting). Default 1: simple random sampling within the site. Not applied ' +
        'to a variance read from a column, which should already include it. Counts model: the ' +
        'likelihood uses the effective counts cases/design_effect of trials/design_effect ' +
        '(effective sample size).',
    ),
  response: columnName('the unit-level survey variable (unit model; a column of the units file)').optional(),
  cases: columnName('the number of cases (counts model)').optional(),
  trials: columnName('the number of trials (counts model)').optional(),
  population_size: columnName(
    'the population size N_i (unit model, optional: finite-population estimates)',
  ).optional(),
  finite_population: z
    .boolean()
    .optional()
    .describe(
      'Unit model: true estimates each site\'s finite-population mean (its sampled units as ' +
        'observed plus model predictions for the units not sampled; needs model.population_size). ' +
        'Default false: the model mean X̄ᵀβ + u_i, which differs little when few units per site are sampled.',
    ),
  covariates: z
    .array(z.string().min(1))
    .default([])
    .describe(
      'Columns of the sites file used as covariates, known for every site. The intercept is ' +
        'always included. Default []: an intercept-only model (shrinkage toward one common mean).',
    ),
  priors: priors.prefault({}),
}).describe('Which model to fit and which columns feed it.');

const sampling = keys({
  chains: z
    .number()
    .int()
    .min(1)
    .default(4)
    .describe('Independent Markov chains. Default 4; R-hat needs several chains to compare.'),
  warmup: z
    .number()
    .int()
    .min(0)
    .default(1000)
    .describe('Iterations per chain discarded before draws are kept. Default 1000.'),
  draws: z
    .number()
    .int()
    .min(10)
    .default(1000)
    .describe('Draws kept per chain after warmup. Default 1000.'),
  seed: z
    .number()
    .int()
    .min(0)
    .max(MAX_SEED)
    .default(DEFAULT_SEED)
    .describe(
      `Seed of the random-number generator (0 to ${MAX_SEED}); the same seed gives the same ` +
        `draws. Default ${DEFAULT_SEED}, with a warning, so that a run is always reproducible.`,
    ),
  threads: z
    .number()
    .int()
    .min(1)
    .optional()
    .describe('Worker threads. Default: as many as chains, up to the number of cores. Draws do not depend on it.'),
  method: z
    .enum(['collapsed', 'plain'])
    .default('collapsed')
    .describe(
      'collapsed (default): σ_u² is drawn from its distribution with the site effects integrated ' +
        'out, which keeps mixing good when σ_u is near zero; plain: textbook Gibbs, for comparison.',
    ),
}).describe('Settings of the Gibbs sampler.');

const reliability = keys({
  cv_caution: z
    .number()
    .positive()
    .default(0.15)
    .describe(
      'Coefficient of variation (posterior sd / estimate) above which an estimate carries a ' +
        'caution. Default 0.15 (common practice; agencies differ: Statistics Canada 16.5%, ' +
        'Australian Bureau of Statistics 25% relative standard error).',
    ),
  cv_suppress: z
    .number()
    .positive()
    .default(0.3)
    .describe(
      'Coefficient of variation above which an estimate is not for publication. Default 0.30 ' +
        '(common practice; US NCHS 30% relative standard error, Statistics Canada 33.3%, ' +
        'Australian Bureau of Statistics 50%).',
    ),
  min_sample: z
    .number()
    .int()
    .min(0)
    .default(3)
    .describe('Sites with fewer sampled units than this get a caution. Default 3.'),
  min_weight_direct: z
    .number()
    .min(0)
    .max(1)
    .default(0.2)
    .describe(
      "Below this posterior weight on the site's own data the estimate is mostly synthetic " +
        '(model-based) and says so. Default 0.2.',
    ),
  rhat_max: z
    .number()
    .gt(1)
    .default(1.01)
    .describe(
      'Convergence gate: every R-hat must stay below this. Default 1.01 (Vehtari, Gelman, ' +
        'Simpson, Carpenter & Bürkner 2021).',
    ),
  ess_min: z
    .number()
    .min(1)
    .default(400)
    .describe(
      'Convergence gate: bulk and tail effective sample sizes must reach this. Default 400 ' +
        '(Vehtari et al. 2021).',
    ),
}).describe('Rules deciding which estimates are published, carry a caution or are suppressed.');

const report = keys({
  template: z
    .string()
    .min(1)
    .optional()
    .describe(
      "Folder with an office's own report templates, relative to this config file; templates " +
        'missing there fall back to the default set.',
    ),
  paper: z.enum(['A4', 'Letter']).default('A4').describe('Paper size of the PDF report. Default A4.'),
  map: keys({
    file: z
      .string()
      .min(1)
      .describe('GeoJSON file with one feature per site, relative to this config file.'),
    id_property: z
      .string()
      .min(1)
      .describe("Property of each feature holding the site id (as in the sites file's id column)."),
  })
    .optional()
    .describe('Site boundaries for the maps in the report. Default: no maps.'),
}).describe('How the report is rendered.');

const benchmark = keys({
  total: z
    .number()
    .refine(Number.isFinite, 'must be a finite number')
    .describe(
      'The reliable figure the sites must add up to: the weighted sum Σ weight_i × estimate_i ' +
        '(e.g. the regional mean with population shares as weights, or a regional total with ' +
        'population counts).',
    ),
  weights: z
    .string()
    .min(1)
    .describe('Column of the sites file holding each site\'s weight (population share or count); all ≥ 0, not all 0.'),
  method: z
    .enum(['ratio', 'difference'])
    .default('ratio')
    .describe(
      'ratio (default): every draw of every site is multiplied by total / weighted sum; ' +
        'difference: the same amount is added to every site. Applied draw by draw, so the ' +
        'benchmarked intervals carry the uncertainty of the adjustment.',
    ),
}).describe(
  'Optional: make the site estimates add up to a reliable published total. Both the adjusted ' +
    'and the unadjusted figures are kept.',
);

const compare = keys({
  target: z
    .number()
    .refine(Number.isFinite, 'must be a finite number')
    .optional()
    .describe('A target value in the unit of the measure: `shrinkwell compare` reports each site\'s probability of exceeding it.'),
  top: z
    .number()
    .int()
    .min(1)
    .default(5)
    .describe('k for the probabilities of ranking in the top k and the bottom k. Default 5 (capped at the number of sites).'),
  lower_is_better: z
    .boolean()
    .default(false)
    .describe('Rank 1 goes to the lowest estimate instead of the highest (e.g. for a disease prevalence). Default false.'),
}).describe('Defaults for `shrinkwell compare` (site ranks, pairwise probabilities, target); its options override them.');

/** The config file, as written by the analyst. */
export const configSchema = keys({
  title: z.string().min(1).describe('Title of the run and the report.'),
  period: z.string().min(1).optional().describe('Reporting period, e.g. "2026 long rains".'),
  measure,
  sites,
  units: units.optional(),
  model,
  sampling: sampling.prefault({}),
  reliability: reliability.prefault({}),
  interval: z
    .number()
    .gt(0)
    .lt(1)
    .default(0.95)
    .describe('Probability of the equal-tailed credible intervals. Default 0.95.'),
  report: report.prefault({}),
  benchmark: benchmark.optional(),
  compare: compare.optional(),
}).describe('A shrinkwell run: the data, the model, the sampler and the publication rules.');

/** The config as written (defaults not yet filled in). */
export type ConfigInput = z.input<typeof configSchema>;
/** The config after schema validation, before cross-field rules and path resolution. */
export type ConfigParsed = z.output<typeof configSchema>;

/** The schema inside a wrapper (default, optional, …), or undefined when it is not a wrapper. */
function unwrap(schema: z.ZodType): z.ZodType | undefined {
  const def = schema._zod.def as { innerType?: z.ZodType };
  return def.innerType;
}

/**
 * The analyst-facing description of a config key, e.g. `['model', 'priors', 'site_sd']`,
 * as written in this schema (the report's appendix quotes it to say why a default was chosen).
 * Undefined for an unknown path.
 */
export function describeKey(path: readonly string[]): string | undefined {
  let node: z.ZodType | undefined = configSchema;
  for (const key of path) {
    while (node !== undefined && !(node instanceof z.ZodObject)) node = unwrap(node);
    if (node === undefined) return undefined;
    const shape: Record<string, z.ZodType> = (node as z.ZodObject).shape;
    if (!Object.hasOwn(shape, key)) return undefined;
    node = shape[key];
  }
  while (node !== undefined) {
    if (node.description !== undefined) return node.description;
    node = unwrap(node);
  }
  return undefined;
}

/** Identity of the exported JSON Schema. */
export const JSON_SCHEMA_ID = 'urn:shrinkwell:config-schema:1';

/**
 * The JSON Schema (draft 2020-12) of the config file as the analyst writes it (`io: 'input'`:
 * keys with defaults are optional). Cross-field rules are not expressible here; they are
 * enforced by `validateConfig`.
 */
export function buildJsonSchema(): Record<string, unknown> {
  const generated = z.toJSONSchema(configSchema, { io: 'input' }) as Record<string, unknown>;
  const { $schema, ...rest } = generated;
  return {
    $schema,
    $id: JSON_SCHEMA_ID,
    title: 'shrinkwell config',
    ...rest,
  };
}

/** The JSON Schema as the exact text committed in `schema/` (2-space indent, final newline). */
export function jsonSchemaText(): string {
  return `${JSON.stringify(buildJsonSchema(), null, 2)}\n`;
}
