/**
 * Overlap of old hotspots with new ones, by shared members or by shared hull area.
 *
 * Both measures are MONIC's overlap without its ageing weights: the share of the OLD hotspot X that
 * lies in the new hotspot Y, |X ∩ Y| / |X| (members) or area(X ∩ Y) / area(X) (hulls). It is not
 * symmetric on purpose: it asks "where did X go".
 *
 * Hull areas come from Turf (@turf/area, @turf/intersect, @turf/union: spherical area of the
 * vertices, polygon clipping in the longitude/latitude plane). Only ratios of areas are used, so turf's Earth radius cancels; for
 * hotspot-sized hulls the planar clipping of straight lon/lat edges is what the hulls themselves
 * draw (they are written with edges densified to lon/lat straight lines).
 */
import { area as turfArea } from '@turf/area';
import { feature, featureCollection } from '@turf/helpers';
import { intersect as turfIntersect } from '@turf/intersect';
import { union as turfUnion } from '@turf/union';
import type { Feature, MultiPolygon, Polygon } from 'geojson';
import type { HullGeometry } from '../geometry/hull.js';

/** One old→new pair with a positive overlap. */
export interface OverlapPair {
  /** index of the new hotspot in the caller's (hotspotId-sorted) array */
  cur: number;
  /** share of the old hotspot found in the new one, in [0, 1] */
  overlap: number;
  /** shared members (member basis) or overlap × member count of the old hotspot (hull basis) */
  shared: number;
}

/**
 * Every member id of the new run, each with its slot (its place in the run's member lists taken
 * one after another) and the index of its hotspot; the previous run's members are looked up in it
 * (memberPairs) and checked there for ids listed twice, so that only one map of member ids is built
 * per match. A new-run id listed twice is kept as `duplicate` (the first one met) and reported by
 * checkMembers after the previous run's members were checked, in the order a check of the previous
 * run and then of the new one would report them.
 */
export interface MemberOwners {
  /** member id → slot */
  slot: IdSlots;
  /** slot → index of its hotspot in the new run */
  hotspotOf: Int32Array;
  /** per slot: 1 + index of the previous hotspot that listed the id, 0 before any did */
  prevSeen: Int32Array;
  /** previous members that are in no new hotspot → 1 + index of the previous hotspot that listed them */
  prevOutside: Map<string, number>;
  /** the first member id the new run lists twice, with its message */
  duplicate: string | null;
}

function twiceMessage(id: string, which: string, firstId: number, secondId: number): string {
  return firstId === secondId
    ? `Observation ${id} is listed twice among the members of ${which} hotspot ${secondId}; pass each member once.`
    : `Observation ${id} is a member of ${which} hotspots ${firstId} and ${secondId}; ` +
      'a run gives every observation to at most one hotspot, pass each hotspot with its own members.';
}

/**
 * Member ids to their slots: an open-addressing hash table over an Int32Array, sized once for
 * the members it will hold. A Map of a million ids grows by rehashing into ever larger tables,
 * most of a stored run's tracks stage (about 0.8 µs per id against 0.1 µs here, measured on
 * 1,000,000 ids); ids are short, so hashing their characters here costs little.
 */
export class IdSlots {
  /** per table position: 1 + the slot of the id there, 0 for none */
  private readonly table: Int32Array;
  /** per table position: the hash of the id there, so that most misses need not read the id */
  private readonly hashes: Int32Array;
  private readonly mask: number;
  /** the id of each slot */
  private readonly ids: string[] = [];
  size = 0;

  /** @param capacity the most ids that will be set (each set may use a slot) */
  constructor(capacity: number) {
    let cap = 16;
    while (cap < 2 * capacity) cap *= 2;
    this.table = new Int32Array(cap);
    this.hashes = new Int32Array(cap);
    this.mask = cap - 1;
  }

  /** FNV-1a over the UTF-16 units, with the high bits folded in. */
  private static hash(id: string): number {
    let h = 0x811c9dc5;
    for (let i = 0; i < id.length; i++) h = Math.imul(h ^ id.charCodeAt(i), 0x01000193);
    return h ^ (h >>> 15);
  }

  /** The table position of `id` (hash `h`), or of the empty place where it would go. */
  private find(id: string, h: number): number {
    const { table, hashes, ids, mask } = this;
    for (let p = h & mask; ; p = (p + 1) & mask) {
      const e = table[p]!;
      if (e === 0 || (hashes[p] === h && ids[e - 1] === id)) return p;
    }
  }

  /** Gives `id` slot `slot`; @returns false when the id had a slot already (it now has this one) */
  set(id: string, slot: number): boolean {
    const h = IdSlots.hash(id);
    const p = this.find(id, h);
    const had = this.table[p] !== 0;
    this.table[p] = slot + 1;
    this.hashes[p] = h;
    this.ids[slot] = id;
    if (!had) this.size++;
    return !had;
  }

  /** The slot of `id`, or -1. */
  get(id: string): number {
    return this.table[this.find(id, IdSlots.hash(id))]! - 1;
  }
}

/**
 * Indexes the members of the new run (see MemberOwners). One hash insertion per member: a set that
 * finds the id already there met it before (with a million members the hash work is most of a
 * stored run's tracks stage). Every member takes one slot, so the slots never outnumber the members.
 */
export function memberOwners(runs: readonly { hotspotId: number; members: readonly string[] }[], which: string): MemberOwners {
  let total = 0;
  for (const r of runs) total += r.members.length;
  const slot = new IdSlots(total);
  const hotspotOf = new Int32Array(total);
  let duplicate: string | null = null;
  let next = 0;
  for (let h = 0; h < runs.length; h++) {
    const members = runs[h].members;
    for (let k = 0; k < members.length; k++) {
      const id = members[k];
      if (!slot.set(id, next) && duplicate === null) {
        // met before (rare: the match will throw); the id now has the new slot, given its first hotspot
        const first = runs.findIndex((r, j) => j <= h && r.members.includes(id));
        duplicate = twiceMessage(id, which, runs[first].hotspotId, runs[h].hotspotId);
        hotspotOf[next++] = first;
        continue;
      }
      hotspotOf[next++] = h;
    }
  }
  return { slot, hotspotOf, prevSeen: new Int32Array(total), prevOutside: new Map(), duplicate };
}

/**
 * Throws the new run's first duplicate member (see MemberOwners) once every previous hotspot has
 * been through memberPairs.
 */
export function checkMembers(owners: MemberOwners): void {
  if (owners.duplicate !== null) throw new Error(owners.duplicate);
}

/**
 * Shared-member counts of one old hotspot (index `x`, id `xId`, of the previous run) with every new
 * hotspot, as sparse pairs in ascending new-hotspot order. `counts` is a scratch array of the new
 * run's length, all zero on entry and left all zero on return. Throws when a member id of the
 * previous run is listed twice, in one hotspot or in two (a run's hotspots partition their
 * members), so that member counts need no de-duplication; `prevIds` gives the hotspotId of a
 * previous index for that message.
 */
export function memberPairs(
  members: readonly string[], x: number, owners: MemberOwners, counts: Int32Array, prevIds: (i: number) => number,
): { pairs: OverlapPair[]; sharedTotal: number; size: number } {
  const { slot, hotspotOf, prevSeen, prevOutside } = owners;
  const touched: number[] = [];
  const size = members.length;
  const mark = x + 1;
  let sharedTotal = 0;
  for (let k = 0; k < size; k++) {
    const id = members[k];
    const s = slot.get(id);
    if (s < 0) {
      const before = prevOutside.get(id);
      if (before !== undefined) throw new Error(twiceMessage(id, 'previous', prevIds(before - 1), prevIds(x)));
      prevOutside.set(id, mark);
      continue;
    }
    if (prevSeen[s] !== 0) throw new Error(twiceMessage(id, 'previous', prevIds(prevSeen[s] - 1), prevIds(x)));
    prevSeen[s] = mark;
    const h = hotspotOf[s];
    if (counts[h] === 0) touched.push(h);
    counts[h]++;
    sharedTotal++;
  }
  touched.sort((a, b) => a - b);
  const pairs: OverlapPair[] = [];
  for (const h of touched) {
    pairs.push({ cur: h, overlap: counts[h] / size, shared: counts[h] });
    counts[h] = 0;
  }
  return { pairs, sharedTotal, size };
}

/** Bounding boxes of each polygon part, [minLon, minLat, maxLon, maxLat] per part (stride 4). */
export function partBoxes(hull: HullGeometry): Float64Array {
  const parts = hull.type === 'Polygon' ? [hull.coordinates] : hull.coordinates;
  const boxes = new Float64Array(parts.length * 4);
  for (let p = 0; p < parts.length; p++) {
    let minX = Infinity, minY = Infinity, maxX = -Infinity, maxY = -Infinity;
    // The exterior ring bounds the part; holes lie inside it.
    for (const pos of parts[p][0] ?? []) {
      const x = pos[0], y = pos[1];
      if (x < minX) minX = x;
      if (x > maxX) maxX = x;
      if (y < minY) minY = y;
      if (y > maxY) maxY = y;
    }
    boxes.set([minX, minY, maxX, maxY], p * 4);
  }
  return boxes;
}

/** Whether any part box of a meets any part box of b (touching counts; it costs nothing to check). */
export function boxesMeet(a: Float64Array, b: Float64Array): boolean {
  for (let i = 0; i < a.length; i += 4) {
    for (let j = 0; j < b.length; j += 4) {
      if (a[i] <= b[j + 2] && b[j] <= a[i + 2] && a[i + 1] <= b[j + 3] && b[j + 1] <= a[i + 3]) return true;
    }
  }
  return false;
}

function asFeature(hull: HullGeometry): Feature<Polygon | MultiPolygon> {
  return feature(hull as Polygon | MultiPolygon);
}

/** Area of a hull in m² as turf measures it (its radius cancels in every ratio taken here). */
export function hullAreaM2(hull: HullGeometry): number {
  return turfArea(asFeature(hull));
}

/** Area in m² (turf's measure) of the intersection of two hulls; 0 when they do not overlap. */
export function intersectionAreaM2(a: HullGeometry, b: HullGeometry, what: string): number {
  let shared: Feature<Polygon | MultiPolygon> | null;
  try {
    shared = turfIntersect(featureCollection([asFeature(a), asFeature(b)]));
  } catch (err) {
    throw new Error(`Could not intersect the hulls of ${what}: ${(err as Error).message}. Check that both are valid RFC 7946 polygons (closed rings, no self-crossing).`);
  }
  return shared === null ? 0 : turfArea(shared);
}

/**
 * Share in [0, 1] of hull `x` covered by the union of `parts` (area(x ∩ ∪ parts) / area(x)), used
 * for the covered share of a split where new hulls may overlap one another.
 */
export function coveredShare(x: HullGeometry, xAreaM2: number, parts: readonly HullGeometry[], what: string): number {
  if (!(xAreaM2 > 0) || parts.length === 0) return 0;
  let joined: HullGeometry;
  try {
    const u = parts.length === 1 ? asFeature(parts[0]) : turfUnion(featureCollection(parts.map(asFeature)));
    if (u === null) return 0;
    joined = u.geometry as HullGeometry;
  } catch (err) {
    throw new Error(`Could not join the hulls of ${what}: ${(err as Error).message}. Check that they are valid RFC 7946 polygons.`);
  }
  return Math.min(1, intersectionAreaM2(x, joined, what) / xAreaM2);
}

/**
 * Hull overlap of one old hotspot with every new hotspot whose box meets its box, as sparse pairs
 * in ascending new-hotspot order. `memberCount` scales the overlap into an estimate of shared
 * members so that hull and member contributions compare.
 */
export function hullPairs(
  x: HullGeometry, xBoxes: Float64Array, xAreaM2: number, memberCount: number,
  current: readonly { hull: HullGeometry; hotspotId: number }[], curBoxes: readonly Float64Array[], label: string,
): OverlapPair[] {
  const pairs: OverlapPair[] = [];
  if (!(xAreaM2 > 0)) return pairs;
  for (let h = 0; h < current.length; h++) {
    if (!boxesMeet(xBoxes, curBoxes[h])) continue;
    const a = intersectionAreaM2(x, current[h].hull, `${label} and new hotspot ${current[h].hotspotId}`);
    if (!(a > 0)) continue;
    const overlap = Math.min(1, a / xAreaM2);
    pairs.push({ cur: h, overlap, shared: overlap * memberCount });
  }
  return pairs;
}
