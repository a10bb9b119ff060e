/**
 * Benchmark data: the seeded realistic point sets every benchmark uses, and a writer that saves
 * one as a GeoJSON FeatureCollection (for measuring the whole command on a file).
 */
import { createWriteStream } from 'node:fs';
import { once } from 'node:events';
import type { PointSet } from '../../src/core/types.js';
import { realisticSet } from '../reference/seeded.js';

/** Seed of every benchmark set, so all runs and all implementations see the same points. */
export const BENCH_SEED = 20_240_601;

/** Benchmark parameters: eps in metres and min_points. */
export const BENCH_EPS_METERS = 250;
export const BENCH_MIN_POINTS = 5;

/**
 * The benchmark set of `n` points: gaussian patches of varied size over a region 400 km across
 * (centred at 10° E, 51° N) plus 15 % uniform background.
 */
export function benchPoints(n: number): PointSet {
  return realisticSet(n, BENCH_SEED);
}

/**
 * Writes points as a GeoJSON FeatureCollection of Point features (coordinates with 7 decimals,
 * about 1 cm), streaming, so a million points need no giant string.
 * @param path output file
 * @param withRecord when true, each feature carries an id, an `observed_at` and a count, as survey
 *   apps send them; otherwise empty properties
 */
export async function writeGeoJSON(path: string, points: PointSet, withRecord = false): Promise<void> {
  const out = createWriteStream(path);
  const write = async (s: string): Promise<void> => {
    if (!out.write(s)) await once(out, 'drain');
  };
  await write('{"type":"FeatureCollection","features":[\n');
  let chunk = '';
  for (let i = 0; i < points.n; i++) {
    const record = withRecord
      ? `"id":"b${i}","properties":{"observed_at":"2026-05-${String(1 + (i % 28)).padStart(2, '0')}T12:00:00Z","count":${1 + (i % 4)}}`
      : '"properties":{}';
    chunk += `${i ? ',\n' : ''}{"type":"Feature",${record},"geometry":{"type":"Point","coordinates":[${points.lon[i].toFixed(7)},${points.lat[i].toFixed(7)}]}}`;
    if (chunk.length > 1 << 16) {
      await write(chunk);
      chunk = '';
    }
  }
  await write(`${chunk}\n]}\n`);
  out.end();
  await once(out, 'finish');
}

/**
 * Writes the same points and records as writeGeoJSON(…, true) as CSV with a header row
 * (`id,longitude,latitude,observed_at,count`), streaming.
 */
export async function writeCSV(path: string, points: PointSet): Promise<void> {
  const out = createWriteStream(path);
  const write = async (s: string): Promise<void> => {
    if (!out.write(s)) await once(out, 'drain');
  };
  let chunk = 'id,longitude,latitude,observed_at,count\n';
  for (let i = 0; i < points.n; i++) {
    chunk += `b${i},${points.lon[i].toFixed(7)},${points.lat[i].toFixed(7)},2026-05-${String(1 + (i % 28)).padStart(2, '0')}T12:00:00Z,${1 + (i % 4)}\n`;
    if (chunk.length > 1 << 16) {
      await write(chunk);
      chunk = '';
    }
  }
  await write(chunk);
  out.end();
  await once(out, 'finish');
}
