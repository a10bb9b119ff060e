/**
 * Figures per hotspot (size, weight, centre, spread, density, time span, category counts) and
 * for the whole result (shares of clustered and noise observations, Clark–Evans index).
 *
 * Per-hotspot figures take two passes over the observations, whatever the number of hotspots:
 * the first sums into typed arrays indexed by hotspot, the second measures distances to the
 * centres found by the first. No per-hotspot member lists are built.
 */
import { haversineMeters, toRadians } from '../core/haversine.js';
import { ROLE_BORDER, ROLE_CORE, type Clustering, type PointSet } from '../core/types.js';
import { meanFromSums } from './centre.js';
import { clarkEvans, distinctIndices, distinctNearestMeters, nearestNeighbourMeters, type ClarkEvans } from './clark-evans.js';

/** Figures of one hotspot. */
export interface HotspotFigures {
  /** hotspot number, 0-based (the label in the clustering) */
  hotspot: number;
  /** observations in the hotspot */
  count: number;
  /** of which core observations */
  coreCount: number;
  /** of which border observations */
  borderCount: number;
  /** summed weight of the observations (their count when unweighted) */
  weight: number;
  /** weighted mean position on the sphere, [longitude, latitude] degrees (see `sphericalMean`) */
  centre: [number, number];
  /** input index of the member nearest to the centre; ties to the lowest index */
  medoid: number;
  /** standard distance: weighted root-mean-square great-circle distance of the members from the centre, metres */
  radiusMeters: number;
  /** hull area, km², as passed in */
  areaKm2: number;
  /** observations per km² of hull */
  densityPerKm2: number;
  /** weight per km² of hull */
  weightDensityPerKm2: number;
  /** earliest observed_at among the members, ISO 8601 UTC, or null when none has one */
  firstObservedAt: string | null;
  /** latest observed_at among the members, ISO 8601 UTC, or null when none has one */
  lastObservedAt: string | null;
  /**
   * Members per value of the chosen category property, keys in code-unit order (JavaScript
   * itself lists integer-like keys such as "2" first, in numeric order). Members without a value
   * are not counted here: `count` minus the sum of these is the number without one. Null when no
   * category property was chosen.
   */
  categories: Record<string, number> | null;
}

/** Options of `hotspotFigures`. */
export interface HotspotFigureOptions {
  /** hull area per hotspot, km², > 0 (from the hotspot hulls) */
  areaKm2: Float64Array;
  /** observed_at per observation, epoch milliseconds, NaN when absent; null/omitted when no observation has one */
  observedAt?: Float64Array | null;
  /** value of the chosen category property per observation, null when absent; null/omitted for no category counts */
  category?: (string | null)[] | null;
}

/**
 * Figures for every hotspot of a clustering, in hotspot order.
 *
 * The radius is the standard distance, the spatial counterpart of the standard deviation:
 * sqrt(Σ wᵢ dᵢ² / Σ wᵢ) with dᵢ the great-circle distance of member i from the centre and wᵢ
 * its weight (1 each when unweighted; also 1 each if a hotspot's weights sum to 0) — Bachi, R.
 * (1963), Standard distance measures and related methods for spatial analysis, Papers of the
 * Regional Science Association 10: 83–132; the usual definition in spatial statistics texts.
 *
 * @param points observations (degrees, optional weights)
 * @param clustering labels (−1 noise) and roles
 * @param options per-hotspot hull areas, optional times and category values
 * @throws RangeError when array lengths disagree, a label is out of range, or an area is not positive
 */
export function hotspotFigures(points: PointSet, clustering: Clustering, options: HotspotFigureOptions): HotspotFigures[] {
  const n = points.n;
  const h = clustering.count;
  const { labels, roles } = clustering;
  const weight = points.weight;
  const observedAt = options.observedAt ?? null;
  const category = options.category ?? null;
  const areaKm2 = options.areaKm2;
  if (labels.length !== n || roles.length !== n) {
    throw new RangeError(`the clustering covers ${labels.length} observations but the point set has ${n}`);
  }
  if (areaKm2.length !== h) throw new RangeError(`areaKm2 has ${areaKm2.length} values for ${h} hotspots; pass one hull area per hotspot`);
  for (let c = 0; c < h; c++) {
    if (!(areaKm2[c] > 0) || !Number.isFinite(areaKm2[c])) {
      throw new RangeError(`hotspot ${c} has area ${areaKm2[c]} km²; pass the area of its hull, which must be positive (buffer degenerate hulls)`);
    }
  }
  if (observedAt && observedAt.length !== n) throw new RangeError(`observedAt has ${observedAt.length} values for ${n} observations`);
  if (category && category.length !== n) throw new RangeError(`category has ${category.length} values for ${n} observations`);

  // Pass 1: counts, weights, summed unit vectors, time span, category tallies.
  const count = new Int32Array(h);
  const core = new Int32Array(h);
  const border = new Int32Array(h);
  const sumW = new Float64Array(h);
  const sx = new Float64Array(h);
  const sy = new Float64Array(h);
  const sz = new Float64Array(h);
  const heaviest = new Int32Array(h).fill(-1); // fallback centre when the summed vector vanishes
  const first = new Float64Array(h).fill(Infinity);
  const last = new Float64Array(h).fill(-Infinity);
  const categoryId = new Map<string, number>();
  const categoryNames: string[] = [];
  const tally = new Map<number, number>(); // key hotspot * 2^32 + category id: exact in a double below 2^53
  for (let i = 0; i < n; i++) {
    const l = labels[i];
    if (l < 0) continue;
    if (l >= h) throw new RangeError(`observation ${i} has label ${l} but the clustering has ${h} hotspots`);
    count[l]++;
    if (roles[i] === ROLE_CORE) core[l]++;
    else if (roles[i] === ROLE_BORDER) border[l]++;
    const w = weight ? weight[i] : 1;
    sumW[l] += w;
    const la = toRadians(points.lat[i]);
    const lo = toRadians(points.lon[i]);
    const cw = Math.cos(la) * w;
    sx[l] += cw * Math.cos(lo);
    sy[l] += cw * Math.sin(lo);
    sz[l] += Math.sin(la) * w;
    if (heaviest[l] < 0 || w > (weight ? weight[heaviest[l]] : 1)) heaviest[l] = i;
    if (observedAt) {
      const t = observedAt[i];
      if (t < first[l]) first[l] = t; // NaN compares false: absent times are skipped
      if (t > last[l]) last[l] = t;
    }
    if (category) {
      const v = category[i];
      if (v !== null && v !== undefined) {
        let id = categoryId.get(v);
        if (id === undefined) {
          id = categoryNames.length;
          categoryId.set(v, id);
          categoryNames.push(v);
        }
        const key = l * 4294967296 + id;
        tally.set(key, (tally.get(key) ?? 0) + 1);
      }
    }
  }

  const centreLon = new Float64Array(h);
  const centreLat = new Float64Array(h);
  for (let c = 0; c < h; c++) {
    if (count[c] === 0) continue;
    const f = heaviest[c];
    const m = meanFromSums(sx[c], sy[c], sz[c], sumW[c], points.lon[f], points.lat[f]);
    centreLon[c] = m.lon;
    centreLat[c] = m.lat;
  }

  // Pass 2: spread around the centre and the medoid. Ascending i with a strict comparison
  // keeps the lowest index on ties.
  const sumWd2 = new Float64Array(h);
  const sumD2 = new Float64Array(h);
  const medoid = new Int32Array(h).fill(-1);
  const medoidMeters = new Float64Array(h).fill(Infinity);
  for (let i = 0; i < n; i++) {
    const l = labels[i];
    if (l < 0) continue;
    const d = haversineMeters(centreLon[l], centreLat[l], points.lon[i], points.lat[i]);
    const d2 = d * d;
    sumD2[l] += d2;
    sumWd2[l] += (weight ? weight[i] : 1) * d2;
    if (d < medoidMeters[l]) {
      medoidMeters[l] = d;
      medoid[l] = i;
    }
  }

  const categories = category ? categoriesByHotspot(tally, categoryNames, h) : null;
  const out: HotspotFigures[] = new Array(h);
  for (let c = 0; c < h; c++) {
    const radiusMeters =
      count[c] === 0 ? 0 : sumW[c] > 0 ? Math.sqrt(sumWd2[c] / sumW[c]) : Math.sqrt(sumD2[c] / count[c]);
    out[c] = {
      hotspot: c,
      count: count[c],
      coreCount: core[c],
      borderCount: border[c],
      weight: sumW[c],
      centre: [centreLon[c], centreLat[c]],
      medoid: medoid[c],
      radiusMeters,
      areaKm2: areaKm2[c],
      densityPerKm2: count[c] / areaKm2[c],
      weightDensityPerKm2: sumW[c] / areaKm2[c],
      firstObservedAt: Number.isFinite(first[c]) ? new Date(first[c]).toISOString() : null,
      lastObservedAt: Number.isFinite(last[c]) ? new Date(last[c]).toISOString() : null,
      categories: categories ? categories[c] : null,
    };
  }
  return out;
}

/** Turns the (hotspot, category) tallies into one object per hotspot with sorted keys. */
function categoriesByHotspot(tally: Map<number, number>, names: string[], h: number): Record<string, number>[] {
  const entries: [string, number][][] = Array.from({ length: h }, () => []);
  for (const [key, value] of tally) {
    const l = Math.floor(key / 4294967296);
    entries[l].push([names[key - l * 4294967296], value]);
  }
  // Object.fromEntries defines own properties, so even a value like "__proto__" is an ordinary key.
  return entries.map((list) => Object.fromEntries(list.sort((a, b) => (a[0] < b[0] ? -1 : a[0] > b[0] ? 1 : 0))));
}

/** Figures of a whole result. */
export interface ResultFigures {
  /** observations clustered */
  observations: number;
  /** hotspots found */
  hotspots: number;
  /** observations in some hotspot */
  clustered: number;
  /** observations in none */
  noise: number;
  /** clustered / observations, 0..1 (0 when there are no observations) */
  clusteredShare: number;
  /** noise / observations, 0..1 (0 when there are no observations) */
  noiseShare: number;
  /** summed weight of all observations (their count when unweighted) */
  totalWeight: number;
  /** Clark–Evans test over all observations, or null without a study area or with fewer than 2 observations */
  clarkEvans: ClarkEvans | null;
  /** why the Clark–Evans test was not computed, in plain words; null when it was */
  clarkEvansNotComputed: string | null;
  /** observations that share their exact position with another one (nearest-neighbour distance 0); 0 when not computed */
  sharedPositions: number;
  /** distinct positions among the observations (equal to `observations` when none is shared) */
  distinctPositions: number;
  /** the Clark–Evans test over distinct positions only, in the same study area; null when no position is shared or the test was not computed */
  clarkEvansDistinct: ClarkEvans | null;
}

/** The observations at the given input positions, without weights. */
function positionsAt(points: PointSet, at: Int32Array): PointSet {
  const lon = new Float64Array(at.length);
  const lat = new Float64Array(at.length);
  for (let k = 0; k < at.length; k++) {
    lon[k] = points.lon[at[k]];
    lat[k] = points.lat[at[k]];
  }
  return { n: at.length, lon, lat, weight: null };
}

/**
 * Figures of a whole result. The Clark–Evans test looks at all observations, noise included:
 * it asks whether the observations as a whole are more clustered than chance in the study area.
 * Observations at exactly the same position pull R down whatever the places' pattern is, so when
 * some share a position the test is also run over the distinct positions, in the same area.
 *
 * @param points observations
 * @param clustering labels (−1 noise)
 * @param options.studyAreaKm2 study area for Clark–Evans, km² (> 0), or null to skip the test
 * @param options.studyAreaProblem why there is no study area (reported when studyAreaKm2 is null)
 * @param options.nearest nearest-neighbour distance per observation, metres, when already computed;
 *   computed with `nearestNeighbourMeters` otherwise
 * @param options.xyz the observations' unit vectors when already computed (a SphereIndex's), for
 *   the distances over distinct positions
 * @throws RangeError when array lengths disagree or the study area is not positive
 */
export function resultFigures(
  points: PointSet,
  clustering: Clustering,
  options: { studyAreaKm2: number | null; studyAreaProblem?: string; nearest?: Float64Array; xyz?: Float64Array },
): ResultFigures {
  const n = points.n;
  const labels = clustering.labels;
  if (labels.length !== n) throw new RangeError(`the clustering covers ${labels.length} observations but the point set has ${n}`);
  let clustered = 0;
  for (let i = 0; i < n; i++) if (labels[i] >= 0) clustered++;
  let totalWeight = n;
  if (points.weight) {
    totalWeight = 0;
    for (let i = 0; i < n; i++) totalWeight += points.weight[i];
  }
  let ce: ClarkEvans | null = null;
  let notComputed: string | null = null;
  let shared = 0;
  let distinct = n;
  let ceDistinct: ClarkEvans | null = null;
  if (n < 2) notComputed = `it needs at least 2 observations, and there ${n === 1 ? 'is 1' : `are ${n}`}`;
  else if (options.studyAreaKm2 === null) notComputed = `there is no study area: ${options.studyAreaProblem ?? 'none was given'}`;
  else {
    const nearest = options.nearest ?? nearestNeighbourMeters(points);
    if (nearest.length !== n) throw new RangeError(`nearest has ${nearest.length} distances for ${n} observations`);
    ce = clarkEvans(nearest, options.studyAreaKm2);
    for (let i = 0; i < n; i++) if (nearest[i] === 0) shared++;
    if (shared > 0) {
      const keep = distinctIndices(points);
      if (keep.length < n) {
        distinct = keep.length;
        if (keep.length >= 2) {
          // mostly the distances already found; a whole search of the distinct positions only when many share one
          const nearestDistinct = distinctNearestMeters(points, nearest, keep, options.xyz) ?? nearestNeighbourMeters(positionsAt(points, keep));
          ceDistinct = clarkEvans(nearestDistinct, options.studyAreaKm2);
        }
      }
    }
  }
  const noise = n - clustered;
  return {
    observations: n,
    hotspots: clustering.count,
    clustered,
    noise,
    clusteredShare: n > 0 ? clustered / n : 0,
    noiseShare: n > 0 ? noise / n : 0,
    totalWeight,
    clarkEvans: ce,
    clarkEvansNotComputed: notComputed,
    sharedPositions: shared,
    distinctPositions: distinct,
    clarkEvansDistinct: ceDistinct,
  };
}
