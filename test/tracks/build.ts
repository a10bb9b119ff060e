/**
 * Hand-built hotspots for tracking tests: rectangular hulls bounded by meridians and parallels,
 * members as ranges of observation ids, figures derived from both.
 */
import { EARTH_RADIUS_M } from '../../src/core/haversine.js';
import type { RunHotspot, MatchResult } from '../../src/tracks/match.js';

const RAD = Math.PI / 180;

/** Observation ids prefix1..prefixN (inclusive range). */
export function ids(prefix: string, from: number, to: number): string[] {
  const out: string[] = [];
  for (let k = from; k <= to; k++) out.push(`${prefix}${k}`);
  return out;
}

/** A counter-clockwise closed rectangle [west, south] – [east, north], degrees. */
export function rect(west: number, south: number, east: number, north: number): RunHotspot['hull'] {
  return { type: 'Polygon', coordinates: [[[west, south], [east, south], [east, north], [west, north], [west, south]]] };
}

/**
 * Area in km² of a rectangle bounded by two meridians and two parallels on the sphere:
 * R² Δλ (sin φ2 − sin φ1). source: area of a latitude–longitude cell on a sphere (Archimedes' hat-box theorem)
 */
export function rectKm2(west: number, south: number, east: number, north: number): number {
  return (EARTH_RADIUS_M ** 2 * (east - west) * RAD * (Math.sin(north * RAD) - Math.sin(south * RAD))) / 1e6;
}

/** A hotspot with a rectangular hull; centre is the rectangle's middle, figures follow from members and area. */
export function spot(hotspotId: number, members: string[], box: [number, number, number, number], trackId: string | null = null): RunHotspot {
  const [w, s, e, n] = box;
  const areaKm2 = rectKm2(w, s, e, n);
  return {
    hotspotId, trackId, members, hull: rect(w, s, e, n), centre: [(w + e) / 2, (s + n) / 2],
    count: members.length, areaKm2, densityPerKm2: members.length / areaKm2,
  };
}

/** The new run as the next night's previous run: every hotspot carries the track it was given. */
export function carry(run: RunHotspot[], result: MatchResult): RunHotspot[] {
  const track = new Map(result.tracks.map((t) => [t.hotspotId, t.trackId]));
  return run.map((h) => ({ ...h, trackId: track.get(h.hotspotId) ?? null }));
}

/** The track of one new hotspot in a result. */
export function trackOf(result: MatchResult, hotspotId: number): string | undefined {
  return result.tracks.find((t) => t.hotspotId === hotspotId)?.trackId;
}

/** Transition kinds in result order, for compact assertions. */
export function kinds(result: MatchResult): string[] {
  return result.transitions.map((t) => t.kind);
}
