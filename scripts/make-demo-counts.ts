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

/** Simulation settings: the "truth" the demo is drawn from (logit scale). */
const TRUTH = {
  seed: 20260417,
  /** Intercept, effect of the share of households with piped water, per km to the nearest clinic. */
  beta: { intercept: -0.55, water: -1.6, clinicKm: 0.045 },
  /** Between-district sd of the true logit prevalence. */
  siteSd: 0.35,
};

const REGION = 'Vaskareth Coast';

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

// ---------------------------------------------------------------------------------------------
// A tiny seeded generator (mulberry32) and normal variates (Box–Muller). Demo-only: the tool's
// own sampler uses src/sampler.

function mulberry32(seed: number): () => number {
  let a = seed >>> 0;
  return () => {
    a = (a + 0x6d2b79f5) >>> 0;
    let t = a;
    t = Math.imul(t ^ (t >>> 15), t | 1);
    t ^= t + Math.imul(t ^ (t >>> 7), t | 61);
    return ((t ^ (t >>> 14)) >>> 0) / 4294967296;
  };
}

function normalFrom(uniform: () => number): () => number {
  return () => {
    const u1 = 1 - uniform(); // in (0, 1]
    const u2 = uniform();
    return Math.sqrt(-2 * Math.log(u1)) * Math.cos(2 * Math.PI * u2);
  };
}

/** Binomial(n, p) as a sum of n Bernoulli trials (n is small here). */
function binomialFrom(uniform: () => number): (n: number, p: number) => number {
  return (n, p) => {
    let cases = 0;
    for (let j = 0; j < n; j++) if (uniform() < p) cases++;
    return cases;
  };
}

/** FNV-1a hash of a string, for per-vertex jitter that does not depend on visiting order. */
function hashString(text: string): number {
  let h = 0x811c9dc5;
  for (let i = 0; i < text.length; i++) {
    h ^= text.charCodeAt(i);
    h = Math.imul(h, 0x01000193) >>> 0;
  }
  return h;
}

// ---------------------------------------------------------------------------------------------
// Geometry: a jittered hexagon tessellation; shared corners and edge midpoints are jittered by a
// hash of their exact position, so neighbouring districts share boundaries exactly.

interface Cell {
  cx: number;
  cy: number;
  ring: Array<[number, number]>;
}

function hexCells(): Cell[] {
  const width = Math.sqrt(3); // pointy-top hexagon of circumradius 1
  const maxLen = Math.max(...ROW_LENGTHS);
  const jitterPoint = (x: number, y: number, amount: number): [number, number] => {
    const rng = mulberry32(hashString(`${x.toFixed(5)},${y.toFixed(5)}`) ^ TRUTH.seed);
    const angle = 2 * Math.PI * rng();
    const radius = amount * Math.sqrt(rng());
    return [x + radius * Math.cos(angle), y + radius * Math.sin(angle)];
  };
  const cells: Cell[] = [];
  ROW_LENGTHS.forEach((len, row) => {
    const offset = ((maxLen - len) / 2) * width + (row % 2 === 1 ? width / 2 : 0);
    for (let col = 0; col < len; col++) {
      const cx = offset + col * width;
      const cy = -row * 1.5; // north is up: rows go south
      const corners: Array<[number, number]> = [];
      for (let k = 0; k < 6; k++) {
        const angle = (Math.PI / 180) * (90 + 60 * k); // counter-clockwise from the top
        corners.push([cx + Math.cos(angle), cy + Math.sin(angle)]);
      }
      const ring: Array<[number, number]> = [];
      for (let k = 0; k < 6; k++) {
        const [ax, ay] = corners[k];
        const [bx, by] = corners[(k + 1) % 6];
        ring.push(jitterPoint(ax, ay, 0.22));
        ring.push(jitterPoint((ax + bx) / 2, (ay + by) / 2, 0.12));
      }
      ring.push(ring[0]);
      cells.push({ cx, cy, ring });
    }
  });
  return cells;
}

/** Plane units (hexagon circumradius ≈ 9 km) to lon/lat in an empty stretch of ocean. */
function toLonLat([x, y]: [number, number]): [number, number] {
  const lon0 = -21.4;
  const lat0 = -47.6;
  const kmPerUnit = 9;
  const kmPerDegLat = 111.2;
  const kmPerDegLon = kmPerDegLat * Math.cos((lat0 * Math.PI) / 180);
  return [Number((lon0 + (x * kmPerUnit) / kmPerDegLon).toFixed(5)), Number((lat0 + (y * kmPerUnit) / kmPerDegLat).toFixed(5))];
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
    geometry: { type: 'Polygon', coordinates: [cell.ring.map(toLonLat)] },
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
  const cells = hexCells();
  if (cells.length !== NAMES.length) throw new Error(`${cells.length} cells for ${NAMES.length} names`);
  const districts = simulate(cells);
  writeFileSync(join(outDir, 'districts.csv'), districtsCsv(districts));
  writeFileSync(join(outDir, 'districts.geojson'), geojson(cells, districts));
  writeFileSync(join(outDir, 'config.yaml'), configYaml());
  process.stdout.write(`wrote ${districts.length} districts to ${outDir}\n`);
}

main();
