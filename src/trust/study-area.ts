/**
 * The study area of the `csr` null model and the uniform placement of points within it.
 *
 * The area is a polygon with straight longitude/latitude edges (as Roost's hulls are written:
 * their great-circle edges are already broken into pieces that stay within 0.05 m of the arc,
 * src/geometry/hull.ts), or several, possibly with holes; a point is inside by the even–odd rule
 * over all rings. Points are placed uniformly on the sphere (not uniformly in degrees): longitude
 * uniform over the area's longitude span and the sine of latitude uniform over its latitude span,
 * which is uniform by area on the sphere (Archimedes' hat-box theorem), then kept only when inside
 * the polygon (rejection sampling).
 */
import { geometryAreaKm2 } from '../geometry/area.js';
import type { HullGeometry } from '../geometry/hull.js';
import { SettingsError } from '../run/settings.js';
import type { Random } from './random.js';

/** A study area as flat rings, ready for many point-in-polygon questions (and for a worker thread). */
export interface StudyArea {
  /** where each ring starts in `lon`/`lat`, with one extra entry at the end */
  ringStart: Int32Array;
  /** ring vertices, longitude in degrees, rings closed (last vertex = first) */
  lon: Float64Array;
  /** ring vertices, latitude in degrees */
  lat: Float64Array;
  /** how the area was given, for the summary */
  kind: 'convex hull of all observations' | 'polygon given';
  /** the area on the sphere, km² */
  areaKm2: number;
}

const RAD = Math.PI / 180;

/** The flat form of a Polygon or MultiPolygon. */
export function studyArea(geometry: HullGeometry, kind: StudyArea['kind']): StudyArea {
  const polygons = geometry.type === 'Polygon' ? [geometry.coordinates] : geometry.coordinates;
  const rings = polygons.flat();
  const total = rings.reduce((s, r) => s + r.length, 0);
  const ringStart = new Int32Array(rings.length + 1);
  const lon = new Float64Array(total);
  const lat = new Float64Array(total);
  let at = 0;
  rings.forEach((ring, r) => {
    ringStart[r] = at;
    for (const p of ring) {
      lon[at] = p[0];
      lat[at++] = p[1];
    }
  });
  ringStart[rings.length] = at;
  return { ringStart, lon, lat, kind, areaKm2: geometryAreaKm2(geometry) };
}

/** Whether (x, y) in degrees lies inside the area (even–odd rule, straight lon/lat edges). */
export function insideArea(area: StudyArea, x: number, y: number): boolean {
  const { ringStart, lon, lat } = area;
  let inside = false;
  for (let r = 0; r + 1 < ringStart.length; r++) {
    const a = ringStart[r];
    const b = ringStart[r + 1];
    for (let i = a, j = b - 1; i < b; j = i++) {
      const yi = lat[i];
      const yj = lat[j];
      if (yi > y !== yj > y && x < ((lon[j] - lon[i]) * (y - yi)) / (yj - yi) + lon[i]) inside = !inside;
    }
  }
  return inside;
}

/**
 * The area's edges sorted into latitude bands, so that a point-in-polygon question tests only the
 * edges of its band instead of every edge. A hull drawn as Roost draws it (edges broken into
 * pieces within 0.05 m of the arc, buffered corners) has thousands of vertices over a region of
 * some hundred kilometres, and testing them all for each of 100,000 points made placing a
 * simulation's points cost more than clustering them.
 *
 * An edge counts for the even–odd rule at latitude y only when y lies in [its lower end, its upper
 * end); such an edge is filed in every band from its lower end's to its upper end's, and a band is
 * found by the same monotone formula, so the edges a question tests include all that count. The
 * test itself is insideArea's expression, edge for edge, and the parity does not depend on the
 * order of the edges: the answer is the same bit as insideArea's for every point.
 */
interface BandIndex {
  south: number;
  /** band height, degrees */
  height: number;
  bands: number;
  /** where each band's edges start in `from`/`to`, with one extra entry at the end */
  start: Int32Array;
  /** each filed edge as its two vertex numbers (insideArea's i and j) */
  from: Int32Array;
  to: Int32Array;
}

const bandIndexes = new WeakMap<StudyArea, BandIndex>();

function bandOf(index: BandIndex, y: number): number {
  const b = Math.floor((y - index.south) / index.height);
  return b < 0 ? 0 : b >= index.bands ? index.bands - 1 : b;
}

/** The band index of an area (built once per area object and kept). */
function bandIndex(area: StudyArea): BandIndex {
  const known = bandIndexes.get(area);
  if (known !== undefined) return known;
  const { ringStart, lat } = area;
  let south = Infinity;
  let north = -Infinity;
  for (let i = 0; i < lat.length; i++) {
    south = Math.min(south, lat[i]);
    north = Math.max(north, lat[i]);
  }
  const edges = lat.length;
  const bands = Math.max(1, Math.min(edges, 1 << 16));
  const index: BandIndex = { south, height: north > south ? (north - south) / bands : 1, bands, start: new Int32Array(bands + 1), from: new Int32Array(0), to: new Int32Array(0) };
  const eachEdge = (visit: (i: number, j: number, lo: number, hi: number) => void): void => {
    for (let r = 0; r + 1 < ringStart.length; r++) {
      const a = ringStart[r];
      const b = ringStart[r + 1];
      for (let i = a, j = b - 1; i < b; j = i++) visit(i, j, bandOf(index, Math.min(lat[i], lat[j])), bandOf(index, Math.max(lat[i], lat[j])));
    }
  };
  const count = new Int32Array(bands + 1);
  eachEdge((_i, _j, lo, hi) => {
    for (let k = lo; k <= hi; k++) count[k + 1]++;
  });
  for (let k = 0; k < bands; k++) count[k + 1] += count[k];
  index.start = Int32Array.from(count);
  index.from = new Int32Array(count[bands]);
  index.to = new Int32Array(count[bands]);
  const fill = count.subarray(0, bands);
  eachEdge((i, j, lo, hi) => {
    for (let k = lo; k <= hi; k++) {
      index.from[fill[k]] = i;
      index.to[fill[k]++] = j;
    }
  });
  bandIndexes.set(area, index);
  return index;
}

/** insideArea's answer, found by testing only the edges of the point's latitude band. */
export function insideAreaFast(area: StudyArea, x: number, y: number): boolean {
  const index = bandIndex(area);
  const { lon, lat } = area;
  const b = bandOf(index, y);
  let inside = false;
  for (let e = index.start[b], end = index.start[b + 1]; e < end; e++) {
    const i = index.from[e];
    const j = index.to[e];
    const yi = lat[i];
    const yj = lat[j];
    if (yi > y !== yj > y && x < ((lon[j] - lon[i]) * (y - yi)) / (yj - yi) + lon[i]) inside = !inside;
  }
  return inside;
}

/** The smallest longitude/latitude box around the area, degrees. */
function boxOf(area: StudyArea): { west: number; east: number; south: number; north: number } {
  let west = Infinity;
  let east = -Infinity;
  let south = Infinity;
  let north = -Infinity;
  for (let i = 0; i < area.lon.length; i++) {
    west = Math.min(west, area.lon[i]);
    east = Math.max(east, area.lon[i]);
    south = Math.min(south, area.lat[i]);
    north = Math.max(north, area.lat[i]);
  }
  return { west, east, south, north };
}

/**
 * Places `n` points uniformly on the sphere within the area, writing them into `lon`/`lat`.
 * `inside` answers the point-in-polygon questions (insideArea, testing every edge, gives the very
 * same points; the benchmark uses it to measure what the band index saves).
 * Throws when the area is so small a share of its box that placing them would take too long
 * (fewer than one try in 10,000 lands inside).
 */
export function placeUniform(area: StudyArea, n: number, random: Random, lon: Float64Array, lat: Float64Array, inside: (area: StudyArea, x: number, y: number) => boolean = insideAreaFast): void {
  const { west, east, south, north } = boxOf(area);
  const z0 = Math.sin(south * RAD);
  const z1 = Math.sin(north * RAD);
  let tries = 0;
  for (let k = 0; k < n; ) {
    const x = west + (east - west) * random.next();
    const y = Math.asin(z0 + (z1 - z0) * random.next()) / RAD;
    if (++tries > 10_000 * (k + 1) + 1_000_000) throw new SettingsError('study_area', 'almost no point placed in its bounding box falls inside it; give a polygon with some area');
    if (!inside(area, x, y)) continue;
    lon[k] = x;
    lat[k++] = y;
  }
}

function ringOk(ring: unknown): ring is number[][] {
  if (!Array.isArray(ring) || ring.length < 4) return false;
  for (const p of ring) {
    if (!Array.isArray(p) || p.length < 2 || !Number.isFinite(p[0]) || !Number.isFinite(p[1])) return false;
    if (Math.abs(p[0] as number) > 180 || Math.abs(p[1] as number) > 90) return false;
  }
  const a = ring[0] as number[];
  const z = ring[ring.length - 1] as number[];
  return a[0] === z[0] && a[1] === z[1];
}

/**
 * Reads a study area given by the user: GeoJSON text of a Polygon or MultiPolygon, a Feature
 * holding one, or a FeatureCollection of them (their union by the even–odd rule, so they should
 * not overlap). Throws SettingsError (parameter `study_area`) saying what is wrong.
 */
export function readStudyArea(text: string): StudyArea {
  let doc: unknown;
  try {
    doc = JSON.parse(text);
  } catch (err) {
    throw new SettingsError('study_area', `is not JSON (${(err as Error).message})`);
  }
  const polygons: number[][][][] = [];
  const take = (g: unknown, where: string): void => {
    const geom = g as { type?: unknown; coordinates?: unknown } | null;
    if (geom?.type === 'Polygon') polygons.push(geom.coordinates as number[][][]);
    else if (geom?.type === 'MultiPolygon' && Array.isArray(geom.coordinates)) polygons.push(...(geom.coordinates as number[][][][]));
    else throw new SettingsError('study_area', `${where} must be a Polygon or MultiPolygon, got ${JSON.stringify(geom?.type ?? null)}`);
  };
  const d = doc as { type?: unknown; geometry?: unknown; features?: unknown } | null;
  if (d?.type === 'FeatureCollection' && Array.isArray(d.features)) d.features.forEach((f, i) => take((f as { geometry?: unknown })?.geometry, `feature ${i}'s geometry`));
  else if (d?.type === 'Feature') take(d.geometry, "the feature's geometry");
  else take(d, 'the study area');
  if (polygons.length === 0) throw new SettingsError('study_area', 'holds no polygon');
  polygons.forEach((rings, p) => {
    if (!Array.isArray(rings) || rings.length === 0) throw new SettingsError('study_area', `polygon ${p} has no rings`);
    rings.forEach((ring, r) => {
      if (!ringOk(ring)) {
        throw new SettingsError('study_area', `polygon ${p}, ring ${r}: a ring needs at least 4 [longitude, latitude] positions within ±180/±90, the last equal to the first`);
      }
    });
  });
  const area = studyArea({ type: 'MultiPolygon', coordinates: polygons }, 'polygon given');
  if (!(area.areaKm2 > 0)) throw new SettingsError('study_area', 'encloses no area');
  return area;
}
