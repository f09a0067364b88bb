import { readFileSync } from 'node:fs';
import { dirname, join, resolve } from 'node:path';
import { fileURLToPath } from 'node:url';
import { describe, expect, test } from 'vitest';
import { parse as parseYaml } from 'yaml';
import { z } from 'zod';
import { UserError } from '../src/errors.js';
import { loadConfig, parseConfigText, validateConfig } from '../src/config/load.js';
import { describeKey, jsonSchemaText } from '../src/config/schema.js';
import { closestMatch, editDistance } from '../src/config/suggest.js';
import type { Settings } from '../src/config/types.js';

const here = dirname(fileURLToPath(import.meta.url));
const fixtures = join(here, 'fixtures', 'config');
const CONFIG = '/office/runs/demo.yaml';

/** A minimal valid area-model config, as parsed YAML. */
function base(): Record<string, any> {
  return {
    title: 'Maize yield per district',
    measure: { name: 'Mean yield' },
    sites: { file: 'districts.csv', id: 'district' },
    model: { kind: 'area', direct: 'mean_yield', variance: 'var_mean' },
    sampling: { seed: 11 },
  };
}

/** `base()` with `edit` applied to a copy. */
function withEdit(edit: (c: Record<string, any>) => void): Record<string, any> {
  const config = structuredClone(base());
  edit(config);
  return config;
}

/** The one-line message a config is rejected with (fails the test if it is accepted). */
function rejection(raw: unknown, path = CONFIG): string {
  try {
    validateConfig(raw, path);
  } catch (error) {
    expect(error).toBeInstanceOf(UserError);
    expect((error as UserError).kind).toBe('config');
    const message = (error as UserError).message;
    expect(message).not.toContain('\n');
    return message;
  }
  throw new Error('config was accepted but should have been rejected');
}

describe('suggest', () => {
  test('edit distance counts insertions, deletions, substitutions and swaps', () => {
    // Textbook pairs (common practice): kitten→sitting = 3, a swap costs 1.
    expect(editDistance('kitten', 'sitting')).toBe(3);
    expect(editDistance('covariate', 'covariates')).toBe(1);
    expect(editDistance('rian', 'rain')).toBe(1);
    expect(editDistance('', 'abc')).toBe(3);
    expect(editDistance('same', 'same')).toBe(0);
  });

  test('closest match only when plausibly a typo', () => {
    expect(closestMatch('covariate', ['kind', 'direct', 'covariates'])).toBe('covariates');
    expect(closestMatch('Rain', ['district', 'rain', 'veg'])).toBe('rain');
    expect(closestMatch('temperature', ['district', 'rain', 'veg'])).toBeUndefined();
  });
});

describe('validateConfig: defaults and resolution', () => {
  test('a minimal config resolves to the documented defaults', () => {
    const { settings, warnings } = validateConfig(base(), CONFIG);
    const expected: Settings = {
      config_path: CONFIG,
      title: 'Maize yield per district',
      measure: { name: 'Mean yield', unit: '', decimals: 2 },
      sites: { file: '/office/runs/districts.csv', id: 'district' },
      model: {
        kind: 'area',
        direct: 'mean_yield',
        variance: 'var_mean',
        variance_from: 'column',
        design_effect: 1,
        covariates: [],
        priors: {
          coefficients: { kind: 'flat' },
          site_sd: { kind: 'uniform' },
          unit_sd: { kind: 'uniform' },
        },
      },
      sampling: { chains: 4, warmup: 1000, draws: 1000, seed: 11, method: 'collapsed' },
      reliability: {
        cv_caution: 0.15,
        cv_suppress: 0.3,
        min_sample: 3,
        min_weight_direct: 0.2,
        rhat_max: 1.01,
        ess_min: 400,
      },
      interval: 0.95,
      report: { paper: 'A4' },
    };
    expect(settings).toEqual(expected);
    expect(warnings).toEqual([]);
  });

  test('a missing seed defaults to 20261201 with a warning', () => {
    const { settings, warnings } = validateConfig(withEdit((c) => delete c.sampling), CONFIG);
    expect(settings.sampling.seed).toBe(20261201);
    expect(warnings).toContain('sampling.seed not set; using 20261201 so the run is reproducible');
  });

  test('paths are made absolute relative to the config file folder', () => {
    const raw = withEdit((c) => {
      c.sites.file = '../data/districts.csv';
      c.report = { template: 'office-templates', map: { file: 'maps/districts.geojson', id_property: 'code' } };
    });
    const { settings } = validateConfig(raw, 'runs/demo.yaml');
    const folder = resolve('runs');
    expect(settings.config_path).toBe(join(folder, 'demo.yaml'));
    expect(settings.sites.file).toBe(resolve(folder, '../data/districts.csv'));
    expect(settings.report.template).toBe(join(folder, 'office-templates'));
    expect(settings.report.map).toEqual({ file: join(folder, 'maps/districts.geojson'), id_property: 'code' });
  });

  test('priors written in YAML become tagged unions', () => {
    const cases: [unknown, unknown, Settings['model']['priors']['site_sd'], Settings['model']['priors']['coefficients']][] = [
      [{ half_cauchy: { scale: 2.5 } }, 'flat', { kind: 'half_cauchy', scale: 2.5 }, { kind: 'flat' }],
      [{ inverse_gamma: { shape: 2, scale: 0.2 } }, { normal: { mean: 1, sd: 10 } }, { kind: 'inverse_gamma', shape: 2, scale: 0.2 }, { kind: 'normal', mean: 1, sd: 10 }],
      [{ uniform: {} }, { normal: { sd: 3 } }, { kind: 'uniform' }, { kind: 'normal', mean: 0, sd: 3 }],
    ];
    for (const [siteSd, coefficients, expectedSiteSd, expectedCoefficients] of cases) {
      const { settings } = validateConfig(withEdit((c) => (c.model.priors = { site_sd: siteSd, coefficients })), CONFIG);
      expect(settings.model.priors.site_sd).toEqual(expectedSiteSd);
      expect(settings.model.priors.coefficients).toEqual(expectedCoefficients);
    }
  });

  test('the variance mode is inferred from the keys present, or taken as written', () => {
    const sd = withEdit((c) => (c.model = { kind: 'area', direct: 'y', sd: 's', sample_size: 'n' }));
    expect(validateConfig(sd, CONFIG).settings.model.variance_from).toBe('sd');
    const pooled = withEdit((c) => (c.model = { kind: 'area', direct: 'y', sd: 's', sample_size: 'n', variance_from: 'pooled', design_effect: 1.5 }));
    const resolved = validateConfig(pooled, CONFIG).settings.model;
    expect(resolved.variance_from).toBe('pooled');
    expect(resolved.design_effect).toBe(1.5);
  });

  test('intercept-only model: covariates may be empty', () => {
    expect(validateConfig(withEdit((c) => (c.model.covariates = [])), CONFIG).settings.model.covariates).toEqual([]);
  });

  test('the schema descriptions say why a default was chosen (quoted in the appendix)', () => {
    expect(describeKey(['model', 'priors', 'site_sd'])).toContain('Gelman (2006');
    expect(describeKey(['reliability', 'rhat_max'])).toContain('Vehtari');
    expect(describeKey(['sampling', 'seed'])).toContain('20261201');
    expect(describeKey(['model', 'no_such_key'])).toBeUndefined();
  });
});

describe('validateConfig: one-line errors', () => {
  test('an unknown key gets a did-you-mean hint from the keys allowed at that level', () => {
    const raw = withEdit((c) => (c.model.covariate = ['rain']));
    expect(rejection(raw)).toBe('demo.yaml: model.covariate: unknown key (did you mean "covariates"?)');
  });

  test('an unknown key with no close match lists the allowed keys', () => {
    const raw = withEdit((c) => (c.measure.colour = 'red'));
    expect(rejection(raw)).toBe('demo.yaml: measure.colour: unknown key (allowed here: name, unit, decimals)');
  });

  test('a misspelt key is reported before the problems it causes, with a count of the rest', () => {
    const raw = withEdit((c) => {
      delete c.title;
      c.titel = 'x';
      c.interval = 2;
    });
    expect(rejection(raw)).toBe('demo.yaml: titel: unknown key (did you mean "title"?) (and 2 more problems)');
  });

  test('the same config always gives the same first problem', () => {
    const raw = withEdit((c) => {
      c.sampling = { chains: 0, draws: 5 };
      c.interval = 1;
    });
    expect(rejection(raw)).toBe('demo.yaml: sampling.chains: must be at least 1, got 0 (and 2 more problems)');
  });

  test('a hyperprior that is none of the options', () => {
    expect(rejection(withEdit((c) => (c.model.priors = { site_sd: 'cauchy' })))).toBe(
      'demo.yaml: model.priors.site_sd: expected one of uniform, half_cauchy, inverse_gamma',
    );
    expect(rejection(withEdit((c) => (c.model.priors = { site_sd: { half_cauchi: { scale: 1 } } })))).toBe(
      'demo.yaml: model.priors.site_sd: expected one of uniform, half_cauchy, inverse_gamma (did you mean "half_cauchy"?)',
    );
    expect(rejection(withEdit((c) => (c.model.priors = { site_sd: 'uniform' })))).toBe(
      'demo.yaml: model.priors.site_sd: expected one of uniform, half_cauchy, inverse_gamma; write it as { uniform: {} }',
    );
    expect(rejection(withEdit((c) => (c.model.priors = { site_sd: { uniform: {}, half_cauchy: { scale: 1 } } })))).toContain(
      'give exactly one',
    );
  });

  test('a problem inside a chosen prior is reported at its own key', () => {
    expect(rejection(withEdit((c) => (c.model.priors = { unit_sd: { half_cauchy: { scal: 1 } } })))).toBe(
      'demo.yaml: model.priors.unit_sd.half_cauchy.scal: unknown key (did you mean "scale"?) (and 1 more problem)',
    );
    expect(rejection(withEdit((c) => (c.model.priors = { site_sd: { half_cauchy: {} } })))).toBe(
      'demo.yaml: model.priors.site_sd.half_cauchy.scale: is required',
    );
    expect(rejection(withEdit((c) => (c.model.priors = { site_sd: { inverse_gamma: { shape: 0, scale: 1 } } })))).toBe(
      'demo.yaml: model.priors.site_sd.inverse_gamma.shape: must be greater than 0, got 0',
    );
    expect(rejection(withEdit((c) => (c.model.priors = { coefficients: { normal: { mean: 0, sd: -1 } } })))).toBe(
      'demo.yaml: model.priors.coefficients.normal.sd: must be greater than 0, got -1',
    );
    expect(rejection(withEdit((c) => (c.model.priors = { coefficients: 'flatt' })))).toBe(
      'demo.yaml: model.priors.coefficients: expected one of flat, normal (did you mean "flat"?)',
    );
  });

  test('wrong types and enum values', () => {
    expect(rejection(withEdit((c) => (c.model.kind = 'areas')))).toBe(
      'demo.yaml: model.kind: expected one of area, unit, counts, got "areas" (did you mean "area"?)',
    );
    expect(rejection(withEdit((c) => (c.sampling.seed = '42')))).toBe('demo.yaml: sampling.seed: expected a number, got "42"');
    expect(rejection(withEdit((c) => (c.model.covariates = 'rain')))).toBe(
      'demo.yaml: model.covariates: expected a list such as [a, b], got "rain"',
    );
    expect(rejection(withEdit((c) => (c.measure.name = null)))).toBe('demo.yaml: measure.name: expected text, got an empty value');
    expect(rejection(withEdit((c) => delete c.title))).toBe('demo.yaml: title: is required');
    expect(rejection([1, 2])).toBe('demo.yaml: top level: expected a group of keys (key: value), got a list');
    expect(rejection(null)).toContain('demo.yaml: the file is empty');
  });

  test('sampling: chains ≥ 1, warmup ≥ 0, draws ≥ 10, all whole numbers; seed a 32-bit whole number', () => {
    expect(rejection(withEdit((c) => (c.sampling.chains = 0)))).toBe('demo.yaml: sampling.chains: must be at least 1, got 0');
    expect(rejection(withEdit((c) => (c.sampling.warmup = -1)))).toBe('demo.yaml: sampling.warmup: must be at least 0, got -1');
    expect(rejection(withEdit((c) => (c.sampling.draws = 9)))).toBe('demo.yaml: sampling.draws: must be at least 10, got 9');
    expect(rejection(withEdit((c) => (c.sampling.draws = 100.5)))).toBe('demo.yaml: sampling.draws: expected a whole number, got 100.5');
    expect(rejection(withEdit((c) => (c.sampling.seed = 2 ** 32)))).toBe(
      'demo.yaml: sampling.seed: must be at most 4294967295, got 4294967296',
    );
    expect(rejection(withEdit((c) => (c.sampling.method = 'fast')))).toContain('sampling.method: expected one of collapsed, plain');
  });

  test('a single chain is allowed but warned about', () => {
    const { warnings } = validateConfig(withEdit((c) => (c.sampling.chains = 1)), CONFIG);
    expect(warnings.some((w) => w.startsWith('sampling.chains is 1: R-hat compares several chains'))).toBe(true);
  });

  test('interval strictly between 0 and 1; design effect positive', () => {
    expect(rejection(withEdit((c) => (c.interval = 1)))).toBe('demo.yaml: interval: must be less than 1, got 1');
    expect(rejection(withEdit((c) => (c.interval = 0)))).toBe('demo.yaml: interval: must be greater than 0, got 0');
    expect(rejection(withEdit((c) => (c.model.design_effect = 0)))).toBe('demo.yaml: model.design_effect: must be greater than 0, got 0');
  });

  test('reliability: cv_caution must be below cv_suppress', () => {
    const raw = withEdit((c) => (c.reliability = { cv_caution: 0.3, cv_suppress: 0.3 }));
    expect(rejection(raw)).toBe('demo.yaml: reliability.cv_suppress: must be greater than cv_caution (0.3 ≤ 0.3)');
    expect(rejection(withEdit((c) => (c.reliability = { min_weight_direct: 1.5 })))).toBe(
      'demo.yaml: reliability.min_weight_direct: must be at most 1, got 1.5',
    );
    expect(rejection(withEdit((c) => (c.reliability = { rhat_max: 1 })))).toBe('demo.yaml: reliability.rhat_max: must be greater than 1, got 1');
  });
});

describe('validateConfig: rules per model kind', () => {
  const area = (model: Record<string, unknown>) => withEdit((c) => (c.model = { kind: 'area', ...model }));

  test('area needs the direct estimate column', () => {
    expect(rejection(area({ variance: 'v' }))).toBe(
      "demo.yaml: model.direct: required for an area model: the column holding each site's direct estimate",
    );
  });

  test('area needs a sampling variance: a column, or sd with sample size', () => {
    expect(rejection(area({ direct: 'y' }))).toBe(
      "demo.yaml: model.variance: an area model needs each site's sampling variance: give model.variance, or model.sd with model.sample_size",
    );
    expect(rejection(area({ direct: 'y', sd: 's' }))).toBe(
      'demo.yaml: model.sample_size: required with model.sd: the sampling variance is sd² / n',
    );
    expect(rejection(area({ direct: 'y', variance: 'v', sd: 's', sample_size: 'n' }))).toBe(
      'demo.yaml: model.sd: give either model.variance, or model.sd with model.sample_size, not both',
    );
  });

  test('an explicit variance_from must agree with the keys present', () => {
    expect(rejection(area({ direct: 'y', sd: 's', sample_size: 'n', variance_from: 'column' }))).toBe(
      'demo.yaml: model.variance: required with variance_from: column (the column of sampling variances) (and 1 more problem)',
    );
    expect(rejection(area({ direct: 'y', variance: 'v', variance_from: 'pooled', sd: 's', sample_size: 'n' }))).toBe(
      'demo.yaml: model.variance: cannot be used with variance_from: pooled, which computes ψ_i from model.sd and model.sample_size; remove one of them',
    );
    expect(rejection(area({ direct: 'y', variance_from: 'pooled', sample_size: 'n' }))).toBe(
      'demo.yaml: model.sd: required with variance_from: pooled (the column of per-site standard deviations)',
    );
    expect(rejection(area({ direct: 'y', variance_from: 'sd', sd: 's' }))).toBe(
      'demo.yaml: model.sample_size: required with variance_from: sd (ψ_i divides by the sample size n_i)',
    );
  });

  test('a design effect with a variance column is ignored, with a warning', () => {
    const { warnings } = validateConfig(area({ direct: 'y', variance: 'v', design_effect: 2 }), CONFIG);
    expect(warnings.some((w) => w.startsWith('model.design_effect is ignored'))).toBe(true);
  });

  test('unit needs the units file and the response column', () => {
    const unit = withEdit((c) => (c.model = { kind: 'unit', response: 'yield' }));
    expect(rejection(unit)).toBe('demo.yaml: units: required for a unit model: the file with one row per sampled unit');
    const noResponse = withEdit((c) => {
      c.model = { kind: 'unit' };
      c.units = { file: 'plots.csv', site: 'district' };
    });
    expect(rejection(noResponse)).toBe('demo.yaml: model.response: required for a unit model: the survey variable in the units file');
    const ok = withEdit((c) => {
      c.model = { kind: 'unit', response: 'yield' };
      c.units = { file: 'plots.csv', site: 'district' };
    });
    const { settings } = validateConfig(ok, CONFIG);
    expect(settings.units).toEqual({ file: '/office/runs/plots.csv', site: 'district' });
    expect(settings.model.variance_from).toBeUndefined();
  });

  test('counts needs cases and trials', () => {
    expect(rejection(withEdit((c) => (c.model = { kind: 'counts', trials: 't' })))).toBe(
      'demo.yaml: model.cases: required for a counts model: the column with the number of cases per site',
    );
    expect(rejection(withEdit((c) => (c.model = { kind: 'counts', cases: 'c' })))).toBe(
      'demo.yaml: model.trials: required for a counts model: the column with the number of trials per site',
    );
  });

  test('covariates are distinct and are not the columns of other roles', () => {
    expect(rejection(withEdit((c) => (c.model.covariates = ['rain', 'veg', 'rain'])))).toBe(
      'demo.yaml: model.covariates[2]: "rain" is listed twice',
    );
    expect(rejection(withEdit((c) => (c.model.covariates = ['rain', 'mean_yield'])))).toBe(
      'demo.yaml: model.covariates[1]: "mean_yield" is also the column of model.direct; a covariate must be a different column',
    );
    expect(rejection(withEdit((c) => (c.model.covariates = [''])))).toBe('demo.yaml: model.covariates[0]: must not be empty');
  });
});

describe('loadConfig and YAML', () => {
  test('the design example validates; keys its model kind ignores are warned about', async () => {
    const { settings, warnings } = await loadConfig(join(fixtures, 'design-example.yaml'));
    expect(settings.model.priors.site_sd).toEqual({ kind: 'half_cauchy', scale: 1 });
    expect(settings.model.covariates).toEqual(['rain', 'veg']);
    expect(settings.sites.file).toBe(join(fixtures, 'districts.csv'));
    expect(warnings).toContain('model.cases is not used by an area model and is ignored');
    expect(warnings.some((w) => w.startsWith('sampling.seed'))).toBe(false);
  });

  test('a missing config file names the path', async () => {
    const path = join(fixtures, 'no-such.yaml');
    await expect(loadConfig(path)).rejects.toMatchObject({ kind: 'config', message: `config file not found: ${path}` });
  });

  test('a YAML syntax error gives one line with line and column', async () => {
    await expect(loadConfig(join(fixtures, 'syntax-error.yaml'))).rejects.toMatchObject({
      kind: 'config',
      message: 'syntax-error.yaml: line 4, column 9: YAML syntax error: Nested mappings are not allowed in compact mappings',
    });
  });

  test('duplicate keys are syntax errors', () => {
    expect(() => parseConfigText('title: a\ntitle: b\n', 'x/demo.yaml')).toThrow(
      'demo.yaml: line 2, column 1: YAML syntax error: Map keys must be unique',
    );
  });

  test('a byte-order mark and CRLF line ends are accepted', async () => {
    const { settings } = await loadConfig(join(fixtures, 'bom-crlf.yaml'));
    expect(settings.title).toBe('Maize yield');
    expect(settings.sampling.seed).toBe(7);
  });

  test('a rejected file is named in the message', async () => {
    await expect(loadConfig(join(fixtures, 'minimal.yaml'))).resolves.toBeDefined();
    const bad = parseConfigText('title: x\nmeasure: { name: y }\nsites: { file: a.csv, id: d }\nmodel: { kind: area, direct: y }\n', 'office/bad.yaml');
    expect(rejection(bad.raw, 'office/bad.yaml')).toMatch(/^bad\.yaml: model\.variance: /);
  });
});

describe('JSON Schema export', () => {
  const committedPath = join(here, '..', 'schema', 'shrinkwell.config.schema.json');

  test('the committed schema equals a fresh export (run `npm run schema` after changing the schema)', () => {
    expect(readFileSync(committedPath, 'utf8')).toBe(jsonSchemaText());
  });

  test('the design example validates against the committed JSON Schema; broken variants do not', () => {
    const committed = JSON.parse(readFileSync(committedPath, 'utf8'));
    expect(committed.$id).toBe('urn:shrinkwell:config-schema:1');
    expect(committed.title).toBe('shrinkwell config');
    // Read back by an independent path: the JSON document itself, not the zod schema.
    const fromJson = z.fromJSONSchema(committed);
    const example = parseYaml(readFileSync(join(fixtures, 'design-example.yaml'), 'utf8'));
    expect(fromJson.safeParse(example).success).toBe(true);
    expect(fromJson.safeParse({ ...example, colour: 'red' }).success).toBe(false);
    expect(fromJson.safeParse({ ...example, interval: 1.5 }).success).toBe(false);
    expect(fromJson.safeParse({ ...example, model: { ...example.model, priors: { site_sd: 'cauchy' } } }).success).toBe(false);
  });
});
