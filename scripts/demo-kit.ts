/**
 * What the demo generators share: a tiny seeded generator (mulberry32) with Box–Muller normals,
 * and a jittered hexagon tessellation placed in an empty stretch of ocean, so invented districts
 * get boundaries for the maps. Demo-only: the tool's own sampler uses src/sampler.
 */

export function mulberry32(seed: number): () => number {
  let a = seed >>> 0;
  return () => {
    a = (a + 0x6d2b79f5) >>> 0;
    let t = a;
    t = Math.imul(t ^ (t >>> 15), t | 1);
    t ^= t + Math.imul(t ^ (t >>> 7), t | 61);
    return ((t ^ (t >>> 14)) >>> 0) / 4294967296;
  };
}

export function normalFrom(uniform: () => number): () => number {
  return () => {
    const u1 = 1 - uniform(); // in (0, 1]
    const u2 = uniform();
    return Math.sqrt(-2 * Math.log(u1)) * Math.cos(2 * Math.PI * u2);
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

export interface Cell {
  cx: number;
  cy: number;
  ring: Array<[number, number]>;
}

/**
 * A jittered hexagon tessellation, `rowLengths` hexagons per row from north to south. Shared
 * corners and edge midpoints are jittered by a hash of their exact position (and `seed`), so
 * neighbouring districts share boundaries exactly.
 */
export function hexCells(rowLengths: readonly number[], seed: number): Cell[] {
  const width = Math.sqrt(3); // pointy-top hexagon of circumradius 1
  const maxLen = Math.max(...rowLengths);
  const jitterPoint = (x: number, y: number, amount: number): [number, number] => {
    const rng = mulberry32(hashString(`${x.toFixed(5)},${y.toFixed(5)}`) ^ seed);
    const angle = 2 * Math.PI * rng();
    const radius = amount * Math.sqrt(rng());
    return [x + radius * Math.cos(angle), y + radius * Math.sin(angle)];
  };
  const cells: Cell[] = [];
  rowLengths.forEach((len, row) => {
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

/** Plane units (hexagon circumradius = `kmPerUnit` km) to lon/lat around an origin at sea. */
export function toLonLat(
  [x, y]: [number, number],
  origin: { lon: number; lat: number; kmPerUnit: number },
): [number, number] {
  const kmPerDegLat = 111.2;
  const kmPerDegLon = kmPerDegLat * Math.cos((origin.lat * Math.PI) / 180);
  const lon = origin.lon + (x * origin.kmPerUnit) / kmPerDegLon;
  const lat = origin.lat + (y * origin.kmPerUnit) / kmPerDegLat;
  return [Number(lon.toFixed(5)), Number(lat.toFixed(5))];
}
