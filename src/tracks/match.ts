/**
 * Hotspot identity from one run to the next: which new hotspot continues which track, and how each
 * track changed.
 *
 * Method: the external transitions of MONIC (Spiliopoulou, Ntoutsi, Theodoridis, Schult,
 * "MONIC – Modeling and Monitoring Cluster Transitions", KDD 2006), with the paper's overlap of an
 * old hotspot X with a new hotspot Y, overlap(X, Y) = |X ∩ Y| / |X|, but WITHOUT the paper's ageing
 * weights: every observation counts 1 (a run already decides, through its time window, which
 * observations take part). τ = survivalThreshold, τ_split = splitThreshold (see settings.ts).
 *
 * Rules, for each old hotspot X in hotspotId order:
 * - match: Y is X's match when Y is the only new hotspot with overlap(X, Y) ≥ τ.
 * - survival: X survives as Y when Y is X's match and no other old hotspot has Y as its match.
 * - absorption: X1..Xk (k ≥ 2) are absorbed into Y when Y is the match of each of them.
 * - split: X splits into Y1..Yp (p ≥ 2) when these are all new hotspots with overlap(X, Yi) ≥ τ_split,
 *   together they cover ≥ τ of X, and X has no match. MONIC asks that no single Yi reach τ; when two
 *   or more reach τ (possible only at exactly τ = 0.5 by members, or with overlapping hulls) none of
 *   them is "the only" match, and we call it a split, since the split conditions all hold.
 * - survival with a shrink (our addition, on by default: shrinkSurvival): X, which none of the rules
 *   above continues, survives as a new hotspot Y that none of them uses when Y is X's only
 *   new hotspot such that
 *     1. Y has fewer members than X,
 *     2. at least τ of Y's hull area lies inside X's hull (Y is in X's place), and
 *     3. by members: Y holds at least one member of X and at least τ of X's members that are in
 *        any new hotspot (X's remains gather in Y); by hulls no further condition.
 *   MONIC counts only members (or, with its ageing weights, fresh members) towards overlap, so a
 *   hotspot of 8 whose 6 members were retracted or left a sliding window, and whose other 2 are in
 *   a hotspot on the same spot, scores 2/8 < τ and would be a disappearance and an emergence in the
 *   same place. MONIC's internal transitions name what happened to it, a survival that shrank;
 *   this rule reports that. Such a transition carries `shrink: true` and its overlap is still
 *   overlap(X, Y), below τ. When two hotspots X want the same Y, the one sharing more members
 *   (hulls: the larger overlap × member count) has it, ties to the lower old hotspotId.
 * - disappearance: none of the above.
 * - emergence: a new hotspot that is in no survival, absorption or split.
 * Exactly τ (and exactly τ_split) counts as reaching it.
 *
 * Identity (track ids):
 * - survival keeps X's track id.
 * - absorption: Y continues the track of the absorbed hotspot that contributed the most shared
 *   members (ties: lower old hotspotId); the other absorbed tracks end.
 * - split: the part with the most shared members continues X's track (ties: lower new hotspotId),
 *   the other parts get new track ids. A part that already continues a track through a survival or
 *   absorption keeps that one; X's track then passes to its next-largest free part (and ends when no
 *   part is free). When two splitting hotspots want the same part, the larger contribution wins
 *   (ties: lower old, then lower new hotspotId).
 * - emergence: a new track id. New ids are drawn in ascending new hotspotId order.
 * Everything is deterministic: inputs are sorted by hotspotId first, so the order of the input
 * arrays does not matter, and every tie has a stated rule.
 *
 * Member overlap or hull overlap ("basis"): member ids are stable across runs, so by default X is
 * compared with Y by shared members. When the runs share too few members (a sliding time window drops
 * old observations), hull overlap area(X ∩ Y) / area(X) replaces it:
 * - for every X, when fewer than minMemberOverlapShare of all previous hotspot members are members of
 *   some new hotspot;
 * - for one X, when none of its members is a member of any new hotspot.
 * With hullOverlapFallback = false members are always used. Each transition says which basis judged it.
 * In hull terms "shared members" means overlap × the member count of X, an estimate on the same scale.
 */
import { haversineMeters } from '../core/haversine.js';
import type { HullGeometry } from '../geometry/hull.js';
import { boxesMeet, coveredShare, hullAreaM2, checkMembers, hullPairs, intersectionAreaM2, memberOwners, memberPairs, partBoxes, type OverlapPair } from './overlap.js';
import { resolveTrackSettings, type TrackSettings } from './settings.js';

export { DEFAULT_TRACK_SETTINGS, resolveTrackSettings, type TrackSettings } from './settings.js';

/** One hotspot of a run, as tracking needs it. */
export interface RunHotspot {
  /** 1-based number of the hotspot within its run */
  hotspotId: number;
  /** the track of a previous run's hotspot; ignored for the new run's hotspots (pass null) */
  trackId: string | null;
  /** observation ids of the members (stable across runs) */
  members: readonly string[];
  /** hull as an RFC 7946 geometry, positions [longitude, latitude] in degrees */
  hull: HullGeometry;
  /** centre [longitude, latitude] in degrees */
  centre: readonly [number, number];
  /** number of members (or summed weight) */
  count: number;
  /** hull area in km² */
  areaKm2: number;
  /** count per km² */
  densityPerKm2: number;
}

/** MONIC's external transitions. */
export type TransitionKind = 'emergence' | 'survival' | 'split' | 'absorption' | 'disappearance';

/** A hotspot named in a transition. */
export interface TransitionEnd {
  hotspotId: number;
  trackId: string;
}

/** How a surviving hotspot changed, new minus (or over) old. */
export interface SurvivalChange {
  /** new count − old count */
  countDelta: number;
  /** new count / old count; null when the old count is 0 */
  countRatio: number | null;
  /** new area − old area, km² */
  areaDeltaKm2: number;
  /** new density / old density; null when the old density is 0 */
  densityRatio: number | null;
  /** great-circle distance between the old and the new centre, metres */
  movedMeters: number;
}

/** How one or more tracks changed between two runs. */
export interface Transition {
  kind: TransitionKind;
  /** old hotspots: one for survival, split and disappearance, two or more for absorption, none for emergence */
  from: TransitionEnd[];
  /** new hotspots: one for survival, absorption and emergence, two or more for split, none for disappearance */
  to: TransitionEnd[];
  /**
   * overlap(X, Y) per pair, in [0, 1]: survival [X→Y]; absorption one per `from` (Xi→Y); split one
   * per `to` (X→Yi); empty for emergence and disappearance.
   */
  overlap: number[];
  /** what the overlap was measured on; 'hull' when any pair of the transition used hulls */
  basis: 'members' | 'hull';
  /** split only: share of X covered by all parts together */
  covered?: number;
  /** survival only */
  change?: SurvivalChange;
  /** survival only, and only when the shrink rule judged it (the overlap is then below τ) */
  shrink?: true;
}

/** Result of matching a run against the previous one. */
export interface MatchResult {
  /** the track of every new hotspot, in hotspotId order */
  tracks: { hotspotId: number; trackId: string }[];
  /** old hotspots' transitions in order of their first old hotspotId, then emergences in new hotspotId order */
  transitions: Transition[];
  /** share of the previous hotspots' members found in new hotspots; null without previous members */
  memberShare: number | null;
}

/** Track id for a sequence number: `t` and the number zero-padded to 6 digits (t000042). */
export function formatTrackId(seq: number): string {
  if (!Number.isSafeInteger(seq) || seq < 1) throw new RangeError(`Track sequence numbers are integers ≥ 1, got ${seq}.`);
  return `t${String(seq).padStart(6, '0')}`;
}

/**
 * The default generator of new track ids: formatTrackId of numbers following the largest `t<n>`
 * among the given track ids. It cannot know tracks that ended before the previous run, so a caller
 * that keeps history passes its own persisted counter instead.
 */
export function trackIdsAfter(trackIds: Iterable<string | null>): (seq: number) => string {
  let top = 0;
  for (const id of trackIds) {
    const m = id === null ? null : /^t(\d+)$/.exec(id);
    if (m) top = Math.max(top, Number(m[1]));
  }
  return (seq) => formatTrackId(top + seq);
}

function checkRun(run: readonly RunHotspot[], which: 'previous' | 'new'): RunHotspot[] {
  if (!Array.isArray(run)) throw new TypeError(`The ${which} run must be an array of hotspots.`);
  const seen = new Set<number>();
  for (const h of run) {
    if (!Number.isSafeInteger(h.hotspotId) || h.hotspotId < 1) {
      throw new RangeError(`A ${which} hotspot has hotspotId ${String(h.hotspotId)}; hotspot ids are integers ≥ 1.`);
    }
    if (seen.has(h.hotspotId)) throw new RangeError(`The ${which} run has hotspotId ${h.hotspotId} twice; number each hotspot once.`);
    seen.add(h.hotspotId);
    if (!Array.isArray(h.members)) throw new TypeError(`${which} hotspot ${h.hotspotId} has no members array; pass its observation ids.`);
    if (!h.hull || (h.hull.type !== 'Polygon' && h.hull.type !== 'MultiPolygon')) {
      throw new TypeError(`${which} hotspot ${h.hotspotId} needs a Polygon or MultiPolygon hull.`);
    }
    if (which === 'previous' && (typeof h.trackId !== 'string' || h.trackId === '')) {
      throw new TypeError(`previous hotspot ${h.hotspotId} has no trackId; previous hotspots carry the track they were given.`);
    }
  }
  return [...run].sort((a, b) => a.hotspotId - b.hotspotId);
}

const ratio = (a: number, b: number): number | null => (b === 0 ? null : a / b);

function survivalChange(x: RunHotspot, y: RunHotspot): SurvivalChange {
  return {
    countDelta: y.count - x.count,
    countRatio: ratio(y.count, x.count),
    areaDeltaKm2: y.areaKm2 - x.areaKm2,
    densityRatio: ratio(y.densityPerKm2, x.densityPerKm2),
    movedMeters: haversineMeters(x.centre[0], x.centre[1], y.centre[0], y.centre[1]),
  };
}

/**
 * Matches a new run's hotspots to the previous run's (MONIC external transitions, see the module
 * header) and gives every new hotspot a track id.
 *
 * @param previous hotspots of the previous successful run, each with its trackId
 * @param current hotspots of the new run (trackId ignored)
 * @param settings thresholds; defaults DEFAULT_TRACK_SETTINGS (τ 0.5, τ_split 0.25, hull fallback on,
 *   minMemberOverlapShare 0.5)
 * @param newTrackId generator of new track ids, called with 1, 2, 3 … for each new track of this
 *   match in ascending new hotspotId order; default trackIdsAfter(previous track ids). Every id it
 *   returns must be new (not a previous track id, not returned twice).
 * @throws RangeError/TypeError on malformed hotspots or settings, Error on a reused track id
 */
export function matchRuns(
  previous: readonly RunHotspot[],
  current: readonly RunHotspot[],
  settings: Partial<TrackSettings> = {},
  newTrackId?: (seq: number) => string,
): MatchResult {
  const s = resolveTrackSettings(settings);
  const prev = checkRun(previous, 'previous');
  const cur = checkRun(current, 'new');
  const prevTracks = new Set<string>();
  for (const x of prev) {
    if (prevTracks.has(x.trackId as string)) {
      throw new RangeError(`Track ${x.trackId} is on two previous hotspots; a track belongs to one hotspot per run.`);
    }
    prevTracks.add(x.trackId as string);
  }
  // Member overlaps for every old hotspot, and the run-level share that decides the basis. A member
  // listed twice is rejected (the previous run's while they are counted, then the new run's), so
  // the counts need no de-duplication.
  const owners = memberOwners(cur, 'new');
  const counts = new Int32Array(cur.length);
  const prevId = (i: number): number => prev[i].hotspotId;
  const byMembers = prev.map((x, i) => memberPairs(x.members, i, owners, counts, prevId));
  checkMembers(owners);
  let sizeSum = 0;
  let sharedSum = 0;
  for (const m of byMembers) {
    sizeSum += m.size;
    sharedSum += m.sharedTotal;
  }
  const memberShare = sizeSum === 0 ? null : sharedSum / sizeSum;
  const runOnHulls = s.hullOverlapFallback && prev.length > 0 && (memberShare === null || memberShare < s.minMemberOverlapShare);

  const curBoxes: Float64Array[] = [];
  const xArea: number[] = new Array(prev.length).fill(0);
  const onHull: boolean[] = prev.map((_, i) => s.hullOverlapFallback && (runOnHulls || byMembers[i].sharedTotal === 0));
  if (onHull.some(Boolean)) for (const y of cur) curBoxes.push(partBoxes(y.hull));
  const pairs: OverlapPair[][] = prev.map((x, i) => {
    if (!onHull[i]) return byMembers[i].pairs;
    xArea[i] = hullAreaM2(x.hull);
    return hullPairs(x.hull, partBoxes(x.hull), xArea[i], byMembers[i].size, cur, curBoxes, `previous hotspot ${x.hotspotId}`);
  });
  const tol = (i: number): number => (onHull[i] ? s.hullTolerance : 0);

  // MONIC per old hotspot: a unique match (survival/absorption), a split, or nothing.
  const matchOf = new Int32Array(prev.length).fill(-1);
  const splitParts: (OverlapPair[] | null)[] = new Array(prev.length).fill(null);
  const splitCovered = new Float64Array(prev.length);
  for (let i = 0; i < prev.length; i++) {
    const t = tol(i);
    const strong = pairs[i].filter((p) => p.overlap >= s.survivalThreshold - t);
    if (strong.length === 1) {
      matchOf[i] = strong[0].cur;
      continue;
    }
    const parts = pairs[i].filter((p) => p.overlap >= s.splitThreshold - t);
    if (parts.length < 2) continue;
    const covered = onHull[i]
      ? coveredShare(prev[i].hull, xArea[i], parts.map((p) => cur[p.cur].hull), `previous hotspot ${prev[i].hotspotId} and its parts`)
      : parts.reduce((sum, p) => sum + p.shared, 0) / byMembers[i].size; // exact: a sum of integers over an integer
    if (covered >= s.survivalThreshold - t) {
      splitParts[i] = parts;
      splitCovered[i] = covered;
    }
  }

  // Old hotspots grouped by their match: one is a survival, several an absorption.
  const matchedBy: number[][] = cur.map(() => []);
  for (let i = 0; i < prev.length; i++) if (matchOf[i] >= 0) matchedBy[matchOf[i]].push(i);

  const trackOf: (string | null)[] = new Array(cur.length).fill(null);
  const sharedWith = (i: number, c: number): OverlapPair => pairs[i].find((p) => p.cur === c) as OverlapPair;
  for (let c = 0; c < cur.length; c++) {
    const xs = matchedBy[c];
    if (xs.length === 0) continue;
    let best = xs[0];
    for (const i of xs) if (sharedWith(i, c).shared > sharedWith(best, c).shared) best = i; // xs ascends: ties keep the lower id
    trackOf[c] = prev[best].trackId;
  }

  // Splits: the largest free part continues the track; the largest contributions choose first.
  const wishes: { i: number; p: OverlapPair }[] = [];
  for (let i = 0; i < prev.length; i++) for (const p of splitParts[i] ?? []) wishes.push({ i, p });
  wishes.sort((a, b) => b.p.shared - a.p.shared || a.i - b.i || a.p.cur - b.p.cur);
  const continued = new Uint8Array(prev.length);
  for (const { i, p } of wishes) {
    if (continued[i] || trackOf[p.cur] !== null) continue;
    trackOf[p.cur] = prev[i].trackId;
    continued[i] = 1;
  }

  // Shrinks: an old hotspot no rule continued, into a smaller new hotspot in its place that no rule used.
  const shrinkInto = new Int32Array(prev.length).fill(-1);
  if (s.shrinkSurvival) {
    const used = new Uint8Array(cur.length);
    for (let c = 0; c < cur.length; c++) if (matchedBy[c].length > 0) used[c] = 1;
    for (const parts of splitParts) for (const p of parts ?? []) used[p.cur] = 1;
    const curArea = new Map<number, number>();
    const shrinks: { i: number; p: OverlapPair }[] = [];
    for (let i = 0; i < prev.length; i++) {
      if (matchOf[i] >= 0 || splitParts[i] !== null) continue;
      const x = prev[i];
      const xBoxes = partBoxes(x.hull);
      const fits = pairs[i].filter((p) => {
        const y = cur[p.cur];
        if (used[p.cur] || y.members.length >= x.members.length) return false;
        if (!onHull[i] && !(p.shared >= s.survivalThreshold * byMembers[i].sharedTotal)) return false;
        if (!curArea.has(p.cur)) curArea.set(p.cur, hullAreaM2(y.hull));
        const yArea = curArea.get(p.cur) as number;
        if (!(yArea > 0) || !boxesMeet(xBoxes, partBoxes(y.hull))) return false;
        const inside = intersectionAreaM2(x.hull, y.hull, `previous hotspot ${x.hotspotId} and new hotspot ${y.hotspotId}`) / yArea;
        return inside >= s.survivalThreshold - s.hullTolerance;
      });
      if (fits.length === 1) shrinks.push({ i, p: fits[0] });
    }
    shrinks.sort((a, b) => b.p.shared - a.p.shared || a.i - b.i);
    for (const { i, p } of shrinks) {
      if (trackOf[p.cur] !== null) continue;
      trackOf[p.cur] = prev[i].trackId;
      shrinkInto[i] = p.cur;
    }
  }

  // New tracks for split parts left over and for emergences, in new hotspotId order.
  const gen = newTrackId ?? trackIdsAfter(prevTracks);
  const issued = new Set<string>();
  let seq = 0;
  for (let c = 0; c < cur.length; c++) {
    if (trackOf[c] !== null) continue;
    const id = gen(++seq);
    if (typeof id !== 'string' || id === '' || prevTracks.has(id) || issued.has(id)) {
      throw new Error(
        `newTrackId(${seq}) returned ${JSON.stringify(id)}, which is ${typeof id !== 'string' || id === '' ? 'not a track id' : 'already in use'}; ` +
          'pass a generator that continues the stored track counter.',
      );
    }
    issued.add(id);
    trackOf[c] = id;
  }

  const end = (h: RunHotspot, trackId: string): TransitionEnd => ({ hotspotId: h.hotspotId, trackId });
  const toEnd = (c: number): TransitionEnd => end(cur[c], trackOf[c] as string);
  const fromEnd = (i: number): TransitionEnd => end(prev[i], prev[i].trackId as string);
  const transitions: Transition[] = [];
  const inTransition = new Uint8Array(cur.length);
  for (let i = 0; i < prev.length; i++) {
    const basis = onHull[i] ? 'hull' : 'members';
    const c = matchOf[i];
    if (c >= 0) {
      const xs = matchedBy[c];
      inTransition[c] = 1;
      if (xs.length === 1) {
        transitions.push({
          kind: 'survival', from: [fromEnd(i)], to: [toEnd(c)], overlap: [sharedWith(i, c).overlap], basis,
          change: survivalChange(prev[i], cur[c]),
        });
      } else if (xs[0] === i) {
        transitions.push({
          kind: 'absorption', from: xs.map(fromEnd), to: [toEnd(c)], overlap: xs.map((k) => sharedWith(k, c).overlap),
          basis: xs.some((k) => onHull[k]) ? 'hull' : 'members',
        });
      }
      continue;
    }
    const parts = splitParts[i];
    if (parts) {
      for (const p of parts) inTransition[p.cur] = 1;
      transitions.push({
        kind: 'split', from: [fromEnd(i)], to: parts.map((p) => toEnd(p.cur)), overlap: parts.map((p) => p.overlap), basis,
        covered: splitCovered[i],
      });
      continue;
    }
    const into = shrinkInto[i];
    if (into >= 0) {
      inTransition[into] = 1;
      transitions.push({
        kind: 'survival', from: [fromEnd(i)], to: [toEnd(into)], overlap: [sharedWith(i, into).overlap], basis,
        change: survivalChange(prev[i], cur[into]), shrink: true,
      });
      continue;
    }
    transitions.push({ kind: 'disappearance', from: [fromEnd(i)], to: [], overlap: [], basis });
  }
  for (let c = 0; c < cur.length; c++) {
    if (inTransition[c]) continue;
    transitions.push({ kind: 'emergence', from: [], to: [toEnd(c)], overlap: [], basis: runOnHulls ? 'hull' : 'members' });
  }

  return {
    tracks: cur.map((y, c) => ({ hotspotId: y.hotspotId, trackId: trackOf[c] as string })),
    transitions,
    memberShare,
  };
}
