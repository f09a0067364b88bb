/**
 * Writes the area-model demo: an invented region, the "Ondralis Plateau", with 40 invented
 * districts, a simulated maize-yield survey, the demo config and invented district boundaries.
 *
 *   npx tsc -p tsconfig.json && node dist/scripts/make-demo-area.js [outDir]
 *
 * Everything is simulated and deterministic (fixed seed, own tiny generator), so rerunning the
 * script reproduces the committed files byte for byte. The data follow the area model the tool
 * fits (Fay & Herriot 1979): a true district mean θ_i = x_iᵀβ + u_i, u_i ~ N(0, σ_u²), observed
 * through a survey mean of n_i plots with plot-level noise.
 *
 * The region, the district names and the coordinates are invented. The boundaries sit in open
 * ocean in the South Pacific so that they cannot be mistaken for a real populated place.
 */
import { mkdirSync, writeFileSync } from 'node:fs';
import { join } from 'node:path';
import { hexCells, mulberry32, normalFrom, toLonLat, type Cell } from './demo-kit.js';

/** Simulation settings: the "truth" the demo is drawn from. */
const TRUTH = {
  seed: 20260301,
  /** Intercept, per-mm rainfall and per-unit vegetation-index effects on yield (t/ha). */
  beta: { intercept: 0.55, rain: 0.0016, veg: 1.9 },
  /** Between-district sd of the true mean yield (t/ha). */
  siteSd: 0.3,
  /** Plot-to-plot sd of yield within a district (t/ha). */
  plotSd: 1.2,
};

const REGION = 'Ondralis Plateau';

/** Where the invented map sits: open ocean, hexagon circumradius ≈ 11 km. */
const ORIGIN = { lon: -128.2, lat: -40.3, kmPerUnit: 11 };

/** Invented district names (no real places intended). */
const NAMES = [
  'Arvessa', 'Belomiro', 'Caddrinor', 'Dunmaret', 'Eskelowa', 'Falvarre', 'Genneti', 'Holvesca',
  'Istradon', 'Jorrimbe', 'Kestavel', 'Lurrowen', 'Mavandu', 'Nethrune', 'Oskavar', 'Pellimor',
  'Quorrindi', 'Rastuvel', 'Selvonne', 'Tarquessa', 'Ulmavir', 'Veskadro', 'Wennolin', 'Xaltemar',
  'Yorvessin', 'Zandrolo', 'Brisselune', 'Corvanti', 'Delmaruk', 'Emvarrow', 'Fiskaldo', 'Garrowind',
  'Hennilaq', 'Ivrossa', 'Jastemund', 'Kolvarin', 'Lissendrow', 'Morvakka', 'Nandrelle', 'Ostravine',
];

/** Hexagons per row, north to south: 40 districts in a rounded block. */
const ROW_LENGTHS = [6, 8, 9, 9, 8];

// ---------------------------------------------------------------------------------------------
// The survey.

interface District {
  id: string;
  name: string;
  households: number;
  rain: number;
  veg: number;
  soil: number;
  n: number;
  theta: number;
  mean?: number;
  sd?: number;
  varMean?: number;
}

const round = (x: number, digits: number): number => Number(x.toFixed(digits));

function simulate(cells: Cell[]): District[] {
  const uniform = mulberry32(TRUTH.seed);
  const normal = normalFrom(uniform);
  const xs = cells.map((c) => c.cx);
  const ys = cells.map((c) => c.cy);
  const [xMin, xMax] = [Math.min(...xs), Math.max(...xs)];
  const [yMin, yMax] = [Math.min(...ys), Math.max(...ys)];

  const districts: District[] = cells.map((cell, i) => {
    const east = (cell.cx - xMin) / (xMax - xMin); // 0 west … 1 east
    const north = (cell.cy - yMin) / (yMax - yMin); // 0 south … 1 north
    // Wetter in the north-west highlands, drier towards the south-east lowlands.
    const rain = 980 - 330 * east + 120 * north + 45 * normal();
    const veg = Math.min(0.9, Math.max(0.1, 0.12 + 0.00055 * rain + 0.06 * normal()));
    const soil = Math.min(10, Math.max(1, 5.5 + 1.6 * normal()));
    const households = Math.round(Math.exp(9.3 + 0.55 * normal()));
    return {
      id: `D${String(i + 1).padStart(2, '0')}`,
      name: NAMES[i],
      households,
      rain: round(rain, 0),
      veg: round(veg, 2),
      soil: round(soil, 1),
      n: 0,
      theta: 0,
    };
  });

  // Sample sizes: roughly in proportion to the number of households, capped at 40.
  for (const d of districts) {
    d.n = Math.max(4, Math.min(40, Math.round((d.households / 11000) * 12 * Math.exp(0.35 * normal()))));
  }
  // Four districts not reached by the survey; two of them lie outside the covariate range of
  // the sampled districts (a wet highland pocket and a dry lowland corner).
  const unsampled = { wetOutlier: 0, dryOutlier: 39, plain: [13, 29] };
  for (const i of [unsampled.wetOutlier, unsampled.dryOutlier, ...unsampled.plain]) districts[i].n = 0;
  // A few with only one to three plots.
  districts[7].n = 1;
  districts[21].n = 2;
  districts[33].n = 3;
  districts[18].n = 2;

  const sampled = districts.filter((d) => d.n > 0);
  const rainMin = Math.min(...sampled.map((d) => d.rain));
  const rainMax = Math.max(...sampled.map((d) => d.rain));
  const vegMin = Math.min(...sampled.map((d) => d.veg));
  const vegMax = Math.max(...sampled.map((d) => d.veg));
  districts[unsampled.wetOutlier].rain = rainMax + 95;
  districts[unsampled.wetOutlier].veg = round(Math.min(0.9, vegMax + 0.06), 2);
  districts[unsampled.dryOutlier].rain = rainMin - 80;
  districts[unsampled.dryOutlier].veg = round(Math.max(0.1, vegMin - 0.05), 2);

  // True means and the survey. Plot yields are normal around θ_i (the model's assumption).
  for (const d of districts) {
    const { intercept, rain, veg } = TRUTH.beta;
    d.theta = intercept + rain * d.rain + veg * d.veg + TRUTH.siteSd * normal();
    if (d.n === 0) continue;
    let sum = 0;
    let sumSq = 0;
    for (let j = 0; j < d.n; j++) {
      const y = d.theta + TRUTH.plotSd * normal();
      sum += y;
      sumSq += y * y;
    }
    d.mean = sum / d.n;
    if (d.n >= 2) d.sd = Math.sqrt(Math.max(0, (sumSq - d.n * d.mean * d.mean) / (d.n - 1)));
  }

  // Pooled within-district variance, for the one-plot district's var_mean.
  let pooledSs = 0;
  let pooledDf = 0;
  for (const d of districts) {
    if (d.sd === undefined) continue;
    pooledSs += (d.n - 1) * d.sd * d.sd;
    pooledDf += d.n - 1;
  }
  const pooledVar = pooledSs / pooledDf;
  for (const d of districts) {
    if (d.n === 0) continue;
    d.varMean = d.sd !== undefined ? (d.sd * d.sd) / d.n : pooledVar / d.n;
  }
  return districts;
}

// ---------------------------------------------------------------------------------------------
// Writers.

const sig = (x: number, digits: number): string => String(Number(x.toPrecision(digits)));

function districtsCsv(districts: District[]): string {
  const header = 'district,name,households,rain,veg,soil,n,mean_yield,sd_yield,var_mean';
  const rows = districts.map((d) =>
    [
      d.id,
      d.name,
      d.households,
      d.rain,
      d.veg.toFixed(2),
      d.soil.toFixed(1),
      d.n,
      d.mean === undefined ? '' : d.mean.toFixed(3),
      d.sd === undefined ? '' : d.sd.toFixed(3),
      d.varMean === undefined ? '' : sig(d.varMean, 5),
    ].join(','),
  );
  return [header, ...rows].join('\n') + '\n';
}

function geojson(cells: Cell[], districts: District[]): string {
  const features = cells.map((cell, i) => ({
    type: 'Feature',
    properties: { district: districts[i].id, name: districts[i].name },
    // Exterior ring counter-clockwise (RFC 7946 right-hand rule).
    geometry: { type: 'Polygon', coordinates: [cell.ring.map((point) => toLonLat(point, ORIGIN))] },
  }));
  const collection = {
    type: 'FeatureCollection',
    name: `Districts of the ${REGION} (invented boundaries)`,
    features,
  };
  // One feature per line keeps diffs readable.
  const head = `{"type":"FeatureCollection","name":${JSON.stringify(collection.name)},"features":[\n`;
  return head + features.map((f) => JSON.stringify(f)).join(',\n') + '\n]}\n';
}

function configYaml(): string {
  return `# Demo: an invented region and invented districts; the survey is simulated
# (scripts/make-demo-area.ts). Paths are relative to this file.
title: Maize yield per district, ${REGION}, 2026 long rains
period: 2026 long rains
measure: { name: Mean maize yield, unit: t/ha, decimals: 2 }
sites: { file: districts.csv, id: district, label: name }
model:
  kind: area
  direct: mean_yield
  variance: var_mean
  sample_size: n
  covariates: [rain, veg]
  priors:
    coefficients: flat
    site_sd: { half_cauchy: { scale: 1 } }
sampling: { chains: 4, warmup: 1000, draws: 1000, seed: 20261201 }
reliability: { cv_caution: 0.15, cv_suppress: 0.30, min_sample: 3 }
interval: 0.95
report:
  map: { file: districts.geojson, id_property: district }
`;
}

function main(): void {
  const outDir = process.argv[2] ?? join('data-demo', 'area');
  mkdirSync(outDir, { recursive: true });
  const cells = hexCells(ROW_LENGTHS, TRUTH.seed);
  const districts = simulate(cells);
  writeFileSync(join(outDir, 'districts.csv'), districtsCsv(districts));
  writeFileSync(join(outDir, 'districts.geojson'), geojson(cells, districts));
  writeFileSync(join(outDir, 'config.yaml'), configYaml());
  process.stdout.write(`wrote ${districts.length} districts to ${outDir}\n`);
}

main();
