/**
 * Writes the counts-model demo: an invented region, the "Vaskareth Coast", with 60 invented
 * districts, a simulated household survey of anaemia among young children (children tested and
 * children found anaemic per district), two district covariates from an invented census, the
 * demo config and invented district boundaries.
 *
 *   npx tsc -p tsconfig.json && node dist/scripts/make-demo-counts.js [outDir]
 *
 * Everything is simulated and deterministic (fixed seed, own tiny generator), so rerunning the
 * script reproduces the committed files byte for byte. The data follow the model the tool fits:
 * logit p_i = x_iᵀβ + u_i, u_i ~ N(0, σ_u²), cases ~ Binomial(tested, p_i). Four districts were
 * not reached by the survey (0 tested) and one was reached with only 3 children, none anaemic.
 *
 * The region, the district names and the coordinates are invented. The boundaries sit in open
 * ocean in the South Atlantic so that they cannot be mistaken for a real populated place.
 */
import { mkdirSync, writeFileSync } from 'node:fs';
import { join } from 'node:path';
import { hexCells, mulberry32, normalFrom, toLonLat, type Cell } from './demo-kit.js';

/** Simulation settings: the "truth" the demo is drawn from (logit scale). */
const TRUTH = {
  seed: 20260417,
  /** Intercept, effect of the share of households with piped water, per km to the nearest clinic. */
  beta: { intercept: -0.55, water: -1.6, clinicKm: 0.045 },
  /** Between-district sd of the true logit prevalence. */
  siteSd: 0.35,
};

const REGION = 'Vaskareth Coast';

/** Where the invented map sits: open ocean, hexagon circumradius ≈ 9 km. */
const ORIGIN = { lon: -21.4, lat: -47.6, kmPerUnit: 9 };

/** Invented district names (no real places intended). */
const NAMES = [
  'Abrethune', 'Belvasko', 'Corrimaddi', 'Drevallen', 'Emmaruske', 'Fennidorra', 'Galvethi', 'Hossavrin',
  'Illumbreth', 'Jessadorn', 'Kavrentil', 'Lomasqua', 'Mirrovelde', 'Nostrallin', 'Ombrevasse', 'Pravellon',
  'Quendrimar', 'Rossivane', 'Sallomaure', 'Tavrennick', 'Umbrassi', 'Vellandro', 'Wistremmel', 'Xandrevik',
  'Yssolvard', 'Zarrendaw', 'Arrosquel', 'Brindovar', 'Caskemere', 'Dulvarrin', 'Esselbrun', 'Farrowquin',
  'Grevallis', 'Hennomarr', 'Istelvaine', 'Jorvaskel', 'Kelmadrin', 'Lavastrow', 'Morrindel', 'Nevaquill',
  'Orsavenne', 'Pallomire', 'Quistaval', 'Rennadow', 'Sorvellin', 'Trassimund', 'Uvellorra', 'Varnissa',
  'Wellovarde', 'Xemmarrow', 'Yarrovane', 'Zessimbar', 'Albrevonne', 'Bastrellow', 'Cindravel', 'Dorrasquin',
  'Ellavorne', 'Fissamund', 'Gorvallen', 'Hastrelle',
];

/** Hexagons per row, north to south: 60 districts in a rounded block. */
const ROW_LENGTHS = [6, 9, 10, 11, 10, 8, 6];

/** Binomial(n, p) as a sum of n Bernoulli trials (n is small here). */
function binomialFrom(uniform: () => number): (n: number, p: number) => number {
  return (n, p) => {
    let cases = 0;
    for (let j = 0; j < n; j++) if (uniform() < p) cases++;
    return cases;
  };
}

// ---------------------------------------------------------------------------------------------
// The survey.

interface District {
  id: string;
  name: string;
  children: number;
  water: number;
  clinicKm: number;
  tested: number;
  anaemic: number;
  prevalence: number;
}

const round = (x: number, digits: number): number => Number(x.toFixed(digits));
const expit = (x: number): number => 1 / (1 + Math.exp(-x));

function simulate(cells: Cell[]): District[] {
  const uniform = mulberry32(TRUTH.seed);
  const normal = normalFrom(uniform);
  const binomial = binomialFrom(uniform);
  const xs = cells.map((c) => c.cx);
  const ys = cells.map((c) => c.cy);
  const [xMin, xMax] = [Math.min(...xs), Math.max(...xs)];
  const [yMin, yMax] = [Math.min(...ys), Math.max(...ys)];

  const districts: District[] = cells.map((cell, i) => {
    const east = (cell.cx - xMin) / (xMax - xMin); // 0 west … 1 east
    const north = (cell.cy - yMin) / (yMax - yMin); // 0 south … 1 north
    // Piped water is common in the towns of the north-west coast, rare in the south-east.
    const water = Math.min(0.95, Math.max(0.05, 0.75 - 0.45 * east + 0.15 * north + 0.1 * normal()));
    const clinicKm = Math.max(1, 6 + 14 * east - 4 * north + 3.5 * normal());
    const children = Math.round(Math.exp(8.1 + 0.6 * normal()));
    return {
      id: `V${String(i + 1).padStart(2, '0')}`,
      name: NAMES[i],
      children,
      water: round(water, 2),
      clinicKm: round(clinicKm, 1),
      tested: 0,
      anaemic: 0,
      prevalence: 0,
    };
  });

  // Children tested: roughly in proportion to the number of young children, 8 to 150.
  for (const d of districts) {
    d.tested = Math.max(8, Math.min(150, Math.round((d.children / 3300) * 40 * Math.exp(0.4 * normal()))));
  }
  // Four districts not reached by the survey, and one reached with only 3 children.
  for (const i of [4, 23, 41, 57]) districts[i].tested = 0;
  const tiny = 50;

  const { intercept, water, clinicKm } = TRUTH.beta;
  for (const d of districts) {
    d.prevalence = expit(intercept + water * d.water + clinicKm * d.clinicKm + TRUTH.siteSd * normal());
    d.anaemic = binomial(d.tested, d.prevalence);
  }
  // The tiny sample: 3 children tested, none anaemic (as in the scenario: a district visited
  // on the survey's last day).
  districts[tiny].tested = 3;
  districts[tiny].anaemic = 0;
  return districts;
}

// ---------------------------------------------------------------------------------------------
// Writers.

function districtsCsv(districts: District[]): string {
  // Districts not reached have no count of anaemic children: left blank.
  const header = 'district,name,children_under5,water,clinic_km,tested,anaemic';
  const rows = districts.map((d) =>
    [d.id, d.name, d.children, d.water.toFixed(2), d.clinicKm.toFixed(1), d.tested, d.tested === 0 ? '' : d.anaemic].join(','),
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
  const name = `Districts of the ${REGION} (invented boundaries)`;
  const head = `{"type":"FeatureCollection","name":${JSON.stringify(name)},"features":[\n`;
  return head + features.map((f) => JSON.stringify(f)).join(',\n') + '\n]}\n';
}

function configYaml(): string {
  return `# Demo: an invented region and invented districts; the survey is simulated
# (scripts/make-demo-counts.ts). Paths are relative to this file.
title: Anaemia among children aged 6–59 months, ${REGION}, 2026 household survey
period: 2026 household survey
measure: { name: Share of children with anaemia, unit: share, decimals: 3 }
sites: { file: districts.csv, id: district, label: name }
model:
  kind: counts
  cases: anaemic
  trials: tested
  covariates: [water, clinic_km]
  priors:
    coefficients: flat
    site_sd: { half_cauchy: { scale: 1 } }
sampling: { chains: 4, warmup: 1000, draws: 1000, seed: 20261201 }
reliability: { cv_caution: 0.15, cv_suppress: 0.30, min_sample: 10 }
interval: 0.95
# For shrinkwell compare: lower prevalence ranks first; the chance that each district exceeds 40%,
# the level at which anaemia is classed a severe public-health problem (WHO 2011, recalled).
compare: { target: 0.4, lower_is_better: true, top: 5 }
report:
  map: { file: districts.geojson, id_property: district }
`;
}

function main(): void {
  const outDir = process.argv[2] ?? join('data-demo', 'counts');
  mkdirSync(outDir, { recursive: true });
  const cells = hexCells(ROW_LENGTHS, TRUTH.seed);
  if (cells.length !== NAMES.length) throw new Error(`${cells.length} cells for ${NAMES.length} names`);
  const districts = simulate(cells);
  writeFileSync(join(outDir, 'districts.csv'), districtsCsv(districts));
  writeFileSync(join(outDir, 'districts.geojson'), geojson(cells, districts));
  writeFileSync(join(outDir, 'config.yaml'), configYaml());
  process.stdout.write(`wrote ${districts.length} districts to ${outDir}\n`);
}

main();
