/**
 * The counts model's input checks (one-line errors naming file, line and column), its per-site
 * survey figures (direct share, binomial standard error, Wilson interval, the CV rule for shares)
 * and its weight on own data.
 */
import { dirname, join } from 'node:path';
import { fileURLToPath } from 'node:url';
import { describe, expect, test } from 'vitest';
import { validateConfig } from '../src/config/load.js';
import type { Settings } from '../src/config/types.js';
import { loadCountsData } from '../src/data/counts.js';
import { UserError } from '../src/errors.js';
import { countsSiteInputs, countsWeights, shareCv, wilsonInterval } from '../src/models/counts-prepare.js';
import { normalQuantile } from '../src/diagnostics/normal-quantile.js';
import { countsData } from './support/counts-fit.js';

const here = dirname(fileURLToPath(import.meta.url));
const dataDir = join(here, 'fixtures', 'data');

function settingsFor(file: string, model: Record<string, unknown> = {}): Settings {
  const raw = {
    title: 'Anaemia in young children, Tessavar region',
    measure: { name: 'Share of children with anaemia', unit: 'share' },
    sites: { file, id: 'district', label: 'name' },
    model: { kind: 'counts', cases: 'anaemic', trials: 'tested', covariates: ['water', 'clinic_km'], ...model },
    sampling: { seed: 5 },
  };
  return validateConfig(raw, join(dataDir, 'config.yaml')).settings;
}

async function loadError(file: string, model: Record<string, unknown> = {}): Promise<string> {
  try {
    await loadCountsData(settingsFor(file, model));
  } catch (error) {
    expect(error).toBeInstanceOf(UserError);
    expect((error as UserError).kind).toBe('data');
    expect((error as UserError).message).not.toContain('\n');
    return (error as UserError).message;
  }
  throw new Error(`${file} loaded but should have been rejected`);
}

describe('loading cases and trials', () => {
  test('reads counts, marks the site without trials, keeps the design effect', async () => {
    const { data, files } = await loadCountsData(settingsFor('counts_ok.csv', { design_effect: 1.5 }));
    expect(data.m).toBe(8);
    expect(data.coefficientNames).toEqual(['intercept', 'water', 'clinic_km']);
    expect(Array.from(data.trials)).toEqual([40, 22, 0, 31, 18, 27, 3, 45]);
    expect(Array.from(data.cases)).toEqual([7, 9, 0, 12, 0, 14, 0, 15]);
    expect(Array.from(data.hasData)).toEqual([1, 1, 0, 1, 1, 1, 1, 1]);
    expect(data.effectiveTrials[0]).toBeCloseTo(40 / 1.5, 12);
    expect(data.effectiveCases[0]).toBeCloseTo(7 / 1.5, 12);
    expect(files[0].rows).toBe(8);
  });

  test.each([
    ['counts_fraction.csv', 'counts_fraction.csv line 5, column "anaemic": 12.5 is not a whole number; give counts, not shares or weighted totals'],
    ['counts_over.csv', 'counts_over.csv line 3, column "anaemic": 23 cases is more than the 22 trials (column "tested")'],
    ['counts_negative.csv', 'counts_negative.csv line 7, column "tested": -27 is negative; a count cannot be below 0'],
    ['counts_trials_blank.csv', 'counts_trials_blank.csv line 6, column "tested": is blank; write 0 for a site without a sample'],
    ['counts_cases_blank.csv', 'counts_cases_blank.csv line 9, column "anaemic": is blank, but the site has 45 trials (column "tested"); give the number of cases, 0 if none'],
    ['counts_too_few.csv', 'counts_too_few.csv: only 3 sites have both cases and non-cases (0 < anaemic < tested); the model with 3 coefficients needs at least p + 2 = 5'],
  ])('%s: one-line error', async (file, message) => {
    expect(await loadError(file)).toBe(message);
  });

  test('a design effect is accepted for counts without a warning that it is ignored', () => {
    const raw = {
      title: 't',
      measure: { name: 'm' },
      sites: { file: 'counts_ok.csv', id: 'district' },
      model: { kind: 'counts', cases: 'anaemic', trials: 'tested', design_effect: 2 },
      sampling: { seed: 1 },
    };
    const { settings, warnings } = validateConfig(raw, join(dataDir, 'config.yaml'));
    expect(settings.model.design_effect).toBe(2);
    expect(warnings.some((w) => w.includes('design_effect'))).toBe(false);
  });
});

describe('direct figures for shares', () => {
  test('Wilson score interval: Newcombe (1998) Table II examples (values recalled from memory)', () => {
    // Newcombe, R.G. (1998), "Two-sided confidence intervals for the single proportion:
    // comparison of seven methods", Statistics in Medicine 17, 857–872, Table II, method 3
    // (score interval without continuity correction), 95%: 81/263, 15/148, 0/20, 1/29.
    const z = normalQuantile(0.975);
    const cases: Array<[number, number, number, number]> = [
      [81, 263, 0.2553, 0.3662],
      [15, 148, 0.0624, 0.1605],
      [0, 20, 0, 0.1611],
      [1, 29, 0.0061, 0.1718],
    ];
    for (const [y, n, lower, upper] of cases) {
      const w = wilsonInterval(y / n, n, z);
      // Published to 4 decimals: within half a unit of the last digit.
      expect(Math.abs(w.lower - lower), `${y}/${n} lower`).toBeLessThanOrEqual(5e-5);
      expect(Math.abs(w.upper - upper), `${y}/${n} upper`).toBeLessThanOrEqual(5e-5);
    }
    // At 0 cases the upper limit is z²/(n + z²) (the closed form at p̂ = 0).
    expect(wilsonInterval(0, 10, z).upper).toBeCloseTo((z * z) / (10 + z * z), 14);
  });

  test('site inputs: share, binomial se (× √deff), Wilson interval with the effective n; CV rule', async () => {
    const { data } = await loadCountsData(settingsFor('counts_ok.csv', { design_effect: 2 }));
    const sites = countsSiteInputs(data, 0.95);
    expect(sites.direct[0]).toBeCloseTo(7 / 40, 14);
    expect(sites.directSe[0]).toBeCloseTo(Math.sqrt((2 * (7 / 40) * (33 / 40)) / 40), 14);
    const w = wilsonInterval(7 / 40, 20, normalQuantile(0.975));
    expect(sites.directInterval!.lower[0]).toBe(w.lower);
    expect(sites.directInterval!.upper[0]).toBe(w.upper);
    expect(Number.isNaN(sites.direct[2])).toBe(true); // no trials
    expect(sites.n[2]).toBe(0);
    expect(sites.directSe[4]).toBe(0); // 0 of 18: the binomial se is 0 ...
    expect(sites.directInterval!.upper[4]).toBeGreaterThan(0.15); // ... but the interval is not empty
    expect(sites.cvOf!(0.2, 0.04)).toBeCloseTo(0.2, 14);
  });

  test('CV of a share: symmetric in p and 1 − p, the plain CV below ½, undefined at 0 and 1', () => {
    expect(shareCv(0.1, 0.02)).toBeCloseTo(0.2, 14);
    expect(shareCv(0.9, 0.02)).toBeCloseTo(0.2, 14);
    expect(shareCv(0.5, 0.1)).toBeCloseTo(0.2, 14);
    expect(Number.isNaN(shareCv(0, 0))).toBe(true);
    expect(Number.isNaN(shareCv(1, 0))).toBe(true);
  });
});

describe('weight on own data', () => {
  test('the area model weight with ψ = 1/(ñ p(1 − p)), averaged over draws; 0 without a sample', () => {
    const data = countsData([
      { id: 'a', cases: 10, trials: 40 },
      { id: 'b', cases: 0, trials: 0 },
    ]);
    const p = [Float64Array.from([0.2, 0.3]), Float64Array.from([0.5, 0.5])];
    const sigma = Float64Array.from([0.5, 1]);
    const weights = countsWeights(data, (i) => p[i], sigma);
    const w = (share: number, s: number) => {
      const info = 40 * share * (1 - share) * s * s;
      return info / (1 + info);
    };
    expect(weights[0]).toBeCloseTo((w(0.2, 0.5) + w(0.3, 1)) / 2, 14);
    expect(weights[1]).toBe(0);
  });
});
