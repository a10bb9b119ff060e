/**
 * Observation records for the store tests: seeded positions, times and properties, with the
 * feature text and its SHA-256 made the way the ingest layer makes them.
 */
import { createHash } from 'node:crypto';
import type { ObservationRecord } from '../../src/storage/store.js';
import { rng } from '../reference/seeded.js';

/** A record for a Point feature with the given properties (feature text = JSON.stringify). */
export function record(id: string, lon: number, lat: number, properties: Record<string, unknown> = {}, observedAt: number | null = null, weight: number | null = null): ObservationRecord {
  const feature = JSON.stringify({ type: 'Feature', id, geometry: { type: 'Point', coordinates: [lon, lat] }, properties });
  return fromText(id, lon, lat, feature, observedAt, weight);
}

/** A record whose feature text is given as is (to check byte-for-byte storage). */
export function fromText(id: string, lon: number, lat: number, feature: string, observedAt: number | null = null, weight: number | null = null): ObservationRecord {
  return { id, lon, lat, observedAt, weight, feature, contentHash: createHash('sha256').update(feature).digest('hex') };
}

export const SPECIES = ['heron', 'egret', 'ibis', 'stork'];
/** 2024-05-01T00:00:00Z */
export const T0 = Date.UTC(2024, 4, 1);
export const DAY_MS = 86_400_000;

/**
 * `n` records spread over the whole globe (so both sides of the antimeridian are populated), ids
 * `${prefix}${i}`, times over 30 days (every 7th without a time), weights on every 3rd, and
 * properties of several JSON types for the `where` rules.
 */
export function seededRecords(seed: number, n: number, prefix = 'o'): ObservationRecord[] {
  const r = rng(seed);
  const out: ObservationRecord[] = [];
  for (let i = 0; i < n; i++) {
    const lon = Math.round((r.next() * 360 - 180) * 1e6) / 1e6;
    const lat = Math.round((r.next() * 170 - 85) * 1e6) / 1e6;
    const t = i % 7 === 3 ? null : T0 + Math.floor(r.next() * 30 * DAY_MS);
    const w = i % 3 === 0 ? 1 + r.int(9) : null;
    const props: Record<string, unknown> = { species: SPECIES[r.int(SPECIES.length)], count: r.int(4), seen: r.next() < 0.5, note: i % 5 === 0 ? null : 'ok' };
    if (i % 11 === 0) props['count'] = String(props['count']); // the same value as text
    if (i % 13 === 0) props['count'] = 2.5;
    if (i % 17 === 0) delete props['note'];
    out.push(record(`${prefix}${i}`, lon, lat, props, t, w));
  }
  return out;
}

/** The file filter's rule (src/ingest/filter.ts): the value written as text equals the condition's text. */
export function propertyMatches(feature: string, property: string, value: string): boolean {
  const p = (JSON.parse(feature) as { properties: Record<string, unknown> | null }).properties;
  if (p === null || !Object.hasOwn(p, property)) return false;
  const v = p[property];
  const text = typeof v === 'string' ? v : typeof v === 'number' || typeof v === 'boolean' || v === null ? String(v) : undefined;
  return text === value;
}
