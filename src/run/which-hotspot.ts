/**
 * Which hotspot of a run a position falls in: the answer a survey app gets for a sighting it
 * posts. A position belongs to a hotspot when it lies within the run's eps of one of the
 * hotspot's core members (DBSCAN's reachability rule), the nearest such core member deciding
 * between hotspots; the answer also says whether it lies inside the hotspot's drawn hull (a
 * position can be reachable and just outside the hull, or inside a hull and too far from every
 * core member), the hotspot's size, and, for a position in no hotspot, the nearest one and how
 * far its nearest core member is.
 *
 * The core members go into the same indexes the clustering uses: the sphere grid for the
 * within-eps question and the k-d tree over unit vectors for the nearest hotspot, so the answer
 * is exact at the poles and across ±180° and costs a few cells, not a scan of every member.
 */
import { booleanPointInPolygon } from '@turf/boolean-point-in-polygon';
import { ChordTree } from '../core/chord-tree.js';
import { metersForChord2, unitVectors } from '../core/haversine.js';
import { SphereIndex } from '../core/sphere-index.js';
import { pointSet } from '../core/types.js';
import type { HullGeometry } from '../geometry/hull.js';

/** One hotspot of a run as the lookup needs it. */
export interface LookupHotspot {
  hotspotId: number;
  trackId: string | null;
  /** the hull as written in the run's hotspots layer */
  hull: HullGeometry;
  /** observations in the hotspot */
  count: number;
  /** hull area, km², or null when the run did not record it */
  areaKm2: number | null;
  /** positions of the core members, degrees */
  coreLon: ArrayLike<number>;
  coreLat: ArrayLike<number>;
}

/** A hotspot as named in an answer. */
export interface HotspotRef {
  hotspot_id: number;
  track_id: string | null;
  count: number;
  area_km2: number | null;
}

/** Where a position stands against a run's hotspots. */
export interface Placement {
  /** the hotspot the position belongs to (within eps of one of its core members), or null */
  hotspot: (HotspotRef & { nearest_core_m: number; inside_hull: boolean }) | null;
  /** for a position in no hotspot: the hotspot whose core members come nearest, and how near; null when the run has none */
  nearest_hotspot: (HotspotRef & { distance_m: number }) | null;
}

const round1 = (x: number): number => Math.round(x * 10) / 10;

export class WhichHotspot {
  private readonly grid: SphereIndex | null;
  private readonly tree: ChordTree | null;
  /** hotspot (index into `hotspots`) of each core member */
  private readonly owner: Int32Array;

  /**
   * @param hotspots the run's hotspots
   * @param epsMeters the run's eps, metres (> 0)
   */
  constructor(
    private readonly hotspots: readonly LookupHotspot[],
    private readonly epsMeters: number,
  ) {
    if (!(epsMeters > 0)) throw new RangeError(`eps must be a positive number of metres, got ${epsMeters}`);
    let n = 0;
    for (const h of hotspots) n += h.coreLon.length;
    const lon = new Float64Array(n);
    const lat = new Float64Array(n);
    this.owner = new Int32Array(n);
    let k = 0;
    hotspots.forEach((h, at) => {
      for (let i = 0; i < h.coreLon.length; i++, k++) {
        lon[k] = h.coreLon[i]!;
        lat[k] = h.coreLat[i]!;
        this.owner[k] = at;
      }
    });
    this.grid = n > 0 ? new SphereIndex(pointSet(lon, lat), epsMeters) : null;
    this.tree = n > 0 ? new ChordTree(unitVectors(lon, lat)) : null;
  }

  /** The placement of one position (degrees). */
  place(lon: number, lat: number): Placement {
    if (this.grid === null || this.tree === null) return { hotspot: null, nearest_hotspot: null };
    let best = -1;
    let best2 = Infinity;
    this.grid.forEachNear(lon, lat, (j, chord2) => {
      // ties go to the lower-numbered hotspot, as border points do in the clustering
      if (chord2 < best2 || (chord2 === best2 && this.owner[j]! < this.owner[best]!)) {
        best2 = chord2;
        best = j;
      }
    });
    if (best >= 0) {
      const h = this.hotspots[this.owner[best]!]!;
      return {
        hotspot: { ...this.ref(h), nearest_core_m: round1(metersForChord2(best2)), inside_hull: booleanPointInPolygon([lon, lat], h.hull) },
        nearest_hotspot: null,
      };
    }
    const v = unitVectors(Float64Array.of(lon), Float64Array.of(lat));
    const near = this.tree.nearestTo(v[0]!, v[1]!, v[2]!);
    const h = this.hotspots[this.owner[near.index]!]!;
    return { hotspot: null, nearest_hotspot: { ...this.ref(h), distance_m: round1(metersForChord2(near.chord2)) } };
  }

  private ref(h: LookupHotspot): HotspotRef {
    return { hotspot_id: h.hotspotId, track_id: h.trackId, count: h.count, area_km2: h.areaKm2 };
  }
}
