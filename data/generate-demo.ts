/**
 * Generates the demo data set: volunteers reporting invasive plants along the Tessel, an invented
 * river in an invented valley ("Marrow Vale"). The positions sit at an arbitrary mid-latitude spot;
 * nothing here describes a real survey. Seeded, so the files are the same on every run.
 *
 *   npx tsx data/generate-demo.ts        # rewrites data/demo/observations.geojson and .csv
 *
 * The scene: tight patches where a plant has taken hold (a few dozen to a few hundred reports within
 * ~100 m), elongated stretches along the river bank, and scattered one-off reports across the valley.
 */
import { mkdirSync, writeFileSync } from 'node:fs';
import { dirname, join } from 'node:path';
import { fileURLToPath } from 'node:url';

const SEED = 20260401;
const HERE = dirname(fileURLToPath(import.meta.url));
const OUT = join(HERE, 'demo');

/** mulberry32: small, fast, seeded. */
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
const rnd = mulberry32(SEED);
const gauss = (): number => {
  const u = 1 - rnd();
  const v = rnd();
  return Math.sqrt(-2 * Math.log(u)) * Math.cos(2 * Math.PI * v);
};

const ORIGIN = { lon: 8.62, lat: 47.18 };
const M_PER_DEG_LAT = 111_195;
const M_PER_DEG_LON = M_PER_DEG_LAT * Math.cos((ORIGIN.lat * Math.PI) / 180);
/** Local metres east/north of the valley origin to [lon, lat] (fine at valley scale). */
const toLonLat = (east: number, north: number): [number, number] => [
  Math.round((ORIGIN.lon + east / M_PER_DEG_LON) * 1e7) / 1e7,
  Math.round((ORIGIN.lat + north / M_PER_DEG_LAT) * 1e7) / 1e7,
];

/** The river: 24 km west to east, meandering. Position at fraction t, in local metres. */
const river = (t: number): [number, number] => [t * 24_000, 1_800 * Math.sin(t * 5.3) + 600 * Math.sin(t * 17)];

const PLANTS = ['knotweed', 'balsam', 'hogweed'] as const;
const SEASON_START = Date.parse('2026-04-01T06:00:00Z');
const SEASON_DAYS = 180;

interface Row {
  east: number;
  north: number;
  plant: string;
  stems: number;
  day: number;
}
const rows: Row[] = [];
const pickPlant = (bias: number): string => (rnd() < 0.75 ? PLANTS[bias % 3] : PLANTS[Math.floor(rnd() * 3)]);

// Tight patches: established stands, reported again and again.
for (let p = 0; p < 9; p++) {
  const [ex, ny] = river(0.05 + p * 0.105 + rnd() * 0.03);
  const cx = ex + gauss() * 300;
  const cy = ny + gauss() * 300;
  const sigma = 35 + rnd() * 70;
  const size = 60 + Math.floor(rnd() * 260);
  const firstDay = Math.floor(rnd() * 60);
  for (let i = 0; i < size; i++) {
    rows.push({ east: cx + gauss() * sigma, north: cy + gauss() * sigma, plant: pickPlant(p), stems: 1 + Math.floor(rnd() * rnd() * 40), day: firstDay + Math.floor(rnd() * (SEASON_DAYS - firstDay)) });
  }
}
// Elongated stretches along the bank: seeds carried downstream.
for (let s = 0; s < 3; s++) {
  const t0 = 0.1 + s * 0.3 + rnd() * 0.05;
  const len = 0.04 + rnd() * 0.04;
  const size = 250 + Math.floor(rnd() * 200);
  for (let i = 0; i < size; i++) {
    const [ex, ny] = river(t0 + rnd() * len);
    rows.push({ east: ex + gauss() * 25, north: ny + gauss() * 25, plant: 'balsam', stems: 1 + Math.floor(rnd() * 15), day: 30 + Math.floor(rnd() * (SEASON_DAYS - 30)) });
  }
}
// Scattered one-off reports across the valley floor.
for (let i = 0; i < 700; i++) {
  const [ex, ny] = river(rnd());
  rows.push({ east: ex + gauss() * 2_500, north: ny + gauss() * 2_500, plant: PLANTS[Math.floor(rnd() * 3)], stems: 1 + Math.floor(rnd() * 5), day: Math.floor(rnd() * SEASON_DAYS) });
}
// Reports arrive in time order, as phones post them.
rows.sort((a, b) => a.day - b.day || a.east - b.east);

const features = rows.map((r, i) => {
  const at = new Date(SEASON_START + r.day * 86_400_000 + Math.floor(rnd() * 12 * 3_600) * 1_000).toISOString().replace('.000Z', 'Z');
  return {
    type: 'Feature' as const,
    id: `mv-${String(i + 1).padStart(5, '0')}`,
    geometry: { type: 'Point' as const, coordinates: toLonLat(r.east, r.north) },
    properties: { observed_at: at, plant: r.plant, stems: r.stems, observer: `volunteer-${1 + Math.floor(rnd() * 40)}` },
  };
});

mkdirSync(OUT, { recursive: true });
writeFileSync(
  join(OUT, 'observations.geojson'),
  `{"type":"FeatureCollection","features":[\n${features.map((f) => JSON.stringify(f)).join(',\n')}\n]}\n`,
);
const csv = ['id,longitude,latitude,observed_at,plant,stems,observer'];
for (const f of features) {
  const p = f.properties;
  csv.push([f.id, ...f.geometry.coordinates, p.observed_at, p.plant, p.stems, p.observer].join(','));
}
writeFileSync(join(OUT, 'observations.csv'), csv.join('\n') + '\n');
process.stdout.write(`wrote ${features.length} observations to ${OUT}\n`);
