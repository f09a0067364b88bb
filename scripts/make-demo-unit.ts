/**
 * Writes the unit-model demo: an invented region, the "Tevrasca Lowlands", with 30 invented
 * districts, a simulated crop-cut survey of sorghum plots (one row per harvested plot) and, for
 * every district, the mean of two plot-level covariates over all its farm plots from an invented
 * satellite layer (a greenness index and season rainfall), with the number of farm plots.
 *
 *   npx tsc -p tsconfig.json && node dist/scripts/make-demo-unit.js [outDir]
 *
 * Everything is simulated and deterministic (fixed seed, own tiny generator), so rerunning the
 * script reproduces the committed files byte for byte. The data follow the unit model the tool
 * fits (Battese, Harter & Fuller 1988): plot yield = x_ijᵀβ + u_i + e_ij. Six districts have no
 * crop cuts (synthetic estimates), one of them with a greenness far above every sampled
 * district's (flagged as outside the sampled range); a few have a single plot (no direct
 * standard error).
 *
 * The region and the district names are invented; no real place is meant.
 */
import { mkdirSync, writeFileSync } from 'node:fs';
import { join } from 'node:path';
import { mulberry32, normalFrom } from './demo-kit.js';

/** The "truth" the demo is drawn from. */
const TRUTH = {
  seed: 20260417,
  /** Intercept, per-unit greenness and per-mm rainfall effects on plot yield (t/ha). */
  beta: { intercept: 0.35, greenness: 2.6, rain: 0.0011 },
  /** Between-district sd of mean yield not explained by the covariates (t/ha). */
  districtSd: 0.22,
  /** Plot-to-plot sd of yield within a district (t/ha). */
  plotSd: 0.55,
};

const REGION = 'Tevrasca Lowlands';

/** Invented district names (no real places intended). */
const NAMES = [
  'Amberlune', 'Brackmoor', 'Cindravel', 'Dostrelle', 'Embervane', 'Fennoway', 'Gildrassa', 'Hollowmere',
  'Irrenvale', 'Jessamoor', 'Kaldruin', 'Lomberrow', 'Marrowind', 'Nestrova', 'Orrinvale', 'Pallimere',
  'Quillane', 'Roskavel', 'Sundravel', 'Tolloway', 'Umbrisca', 'Velmoren', 'Wistrane', 'Yarrowdel',
  'Zephrane', 'Ashcombe Vale', 'Barrowick', 'Corrimand', 'Dellowyn', 'Essendrel',
];

/** Crop-cut plots per district; 0 = no survey there. */
const SAMPLE_SIZES = [
  12, 8, 0, 15, 5, 1, 22, 9, 0, 6, 3, 18, 11, 0, 7, 2, 14, 25, 4, 0, 10, 6, 1, 16, 0, 8, 13, 5, 0, 9,
];

/** The district whose satellite greenness lies beyond every sampled district's (unsampled). */
const OUTLYING = 28;

interface District {
  id: string;
  name: string;
  farmPlots: number;
  greenness: number;
  rain: number;
  effect: number;
}

function simulate(): { districts: District[]; plots: string[] } {
  const uniform = mulberry32(TRUTH.seed);
  const normal = normalFrom(uniform);
  const districts: District[] = NAMES.map((name, i) => {
    const greenness = i === OUTLYING ? 0.83 : 0.38 + 0.26 * uniform();
    return {
      id: `T${String(i + 1).padStart(2, '0')}`,
      name,
      farmPlots: 800 + Math.floor(4200 * uniform()),
      greenness,
      rain: 520 + 260 * uniform() + 200 * (greenness - 0.5),
      effect: TRUTH.districtSd * normal(),
    };
  });
  const plots = ['district,plot,greenness,rain_mm,yield_t_ha'];
  districts.forEach((d, i) => {
    for (let j = 0; j < SAMPLE_SIZES[i]; j++) {
      // A plot's own greenness and rainfall scatter around its district's means.
      const greenness = Math.min(0.95, Math.max(0.05, d.greenness + 0.08 * normal()));
      const rain = d.rain + 45 * normal();
      const mean = TRUTH.beta.intercept + TRUTH.beta.greenness * greenness + TRUTH.beta.rain * rain + d.effect;
      const y = Math.max(0.05, mean + TRUTH.plotSd * normal());
      plots.push(`${d.id},${d.id}-${String(j + 1).padStart(2, '0')},${greenness.toFixed(3)},${rain.toFixed(0)},${y.toFixed(2)}`);
    }
  });
  return { districts, plots };
}

function districtsCsv(districts: District[]): string {
  const lines = ['district,name,farm_plots,greenness,rain_mm'];
  for (const d of districts) lines.push(`${d.id},${d.name},${d.farmPlots},${d.greenness.toFixed(3)},${d.rain.toFixed(0)}`);
  return lines.join('\n') + '\n';
}

const CONFIG = `# Demo: an invented region and invented districts; the crop-cut survey and the satellite layer
# are simulated (scripts/make-demo-unit.ts). Paths are relative to this file.
title: Sorghum yield per district, ${REGION}, 2026 main season
period: 2026 main season
measure: { name: Mean sorghum yield, unit: t/ha, decimals: 2 }
sites: { file: districts.csv, id: district, label: name }   # satellite-layer means for every district
units: { file: plots.csv, site: district }                  # one row per crop-cut plot
model:
  kind: unit
  response: yield_t_ha
  covariates: [greenness, rain_mm]     # plot values in plots.csv, district means in districts.csv
  population_size: farm_plots
  finite_population: true
  priors:
    coefficients: flat
    site_sd: { half_cauchy: { scale: 0.5 } }
    unit_sd: { uniform: {} }
sampling: { chains: 4, warmup: 1000, draws: 1000, seed: 20260417 }
reliability: { cv_caution: 0.15, cv_suppress: 0.30, min_sample: 3 }
interval: 0.95
`;

const outDir = process.argv[2] ?? join('data-demo', 'unit');
mkdirSync(outDir, { recursive: true });
const { districts, plots } = simulate();
writeFileSync(join(outDir, 'districts.csv'), districtsCsv(districts));
writeFileSync(join(outDir, 'plots.csv'), plots.join('\n') + '\n');
writeFileSync(join(outDir, 'config.yaml'), CONFIG);
console.log(`wrote ${outDir}: ${districts.length} districts, ${plots.length - 1} plots`);
