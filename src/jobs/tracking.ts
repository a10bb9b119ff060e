/**
 * Track ids for a stored run's hotspots: the run's hotspots are matched against the previous
 * successful run of the same dataset (MONIC transitions, src/tracks/match.ts) before the result is
 * saved, so every hotspot feature carries its `track_id` from the start.
 *
 * - The previous run is the newest succeeded run created before this one (`latestRun(…, before)`),
 *   so a run re-executed after a crash compares against the same run as the first attempt did.
 * - New track ids are `t` + a number reserved from the dataset's counter in the store
 *   (`reserveTrackNumbers`), so an id is never given to a second track, not even after its track
 *   ended many runs ago, and not by two instances at once. A run that fails after reserving leaves
 *   a gap in the numbers, which is harmless.
 * - A first run (no previous succeeded run, or one whose hotspots have no track ids) gives every
 *   hotspot a new track and reports no changes (null).
 * - The thresholds are DEFAULT_TRACK_SETTINGS unless the caller passes others (see
 *   src/tracks/settings.ts for why the defaults are what they are).
 *
 * The transitions are also written out in the API's snake_case form here, for the run summary
 * (`changes`), the changes endpoint and the notice of change.
 */
import type { HullGeometry } from '../geometry/hull.js';
import { roundDecimals, roundMeters, roundSignificant } from '../geometry/rounding.js';
import type { RunHotspot as StoredHotspot, Store } from '../storage/store.js';
import { formatTrackId, matchRuns, type RunHotspot, type TrackSettings, type Transition, type TransitionKind } from '../tracks/match.js';
import type { FinishedHotspot, RunContext, TrackAssignment } from './hooks.js';

/** The transition kinds in the order summaries list them. */
export const TRANSITION_KINDS: readonly TransitionKind[] = ['emergence', 'survival', 'split', 'absorption', 'disappearance'];

/** One end of a transition as the API writes it. */
export interface TransitionEndJson {
  hotspot_id: number;
  /** null only for a hotspot stored before tracks were assigned */
  track_id: string | null;
  /** a hotspot of a run with a Monte Carlo test: whether its p-value is at most the run's level */
  significant?: boolean;
}

/** A survival's change as the API writes it (new minus, or over, old). */
export interface SurvivalChangeJson {
  count_delta: number;
  /** null when the old count is 0 */
  count_ratio: number | null;
  area_delta_km2: number;
  /** null when the old density is 0 */
  density_ratio: number | null;
  /** great-circle distance between the old and the new centre, metres */
  moved_m: number;
}

/** A transition as the API writes it. */
export interface TransitionJson {
  kind: TransitionKind;
  from: TransitionEndJson[];
  to: TransitionEndJson[];
  /** overlap per pair (see src/tracks/match.ts), rounded to 6 decimals */
  overlap: number[];
  basis: 'members' | 'hull';
  /** split only: share of the old hotspot covered by all parts */
  covered?: number;
  /** survival only */
  change?: SurvivalChangeJson;
  /** survival only, when the shrink rule judged it (see src/tracks/match.ts) */
  shrink?: true;
}

/** How the tracks changed between two runs, as stored in a run summary's `changes`. */
export interface ChangesJson {
  previous_run: string;
  /** transitions per kind, every kind present */
  counts: Record<TransitionKind, number>;
  /** share of the previous run's hotspot members found in this run's hotspots; null without members */
  member_share: number | null;
  transitions: TransitionJson[];
}

const round = roundDecimals;
const sigOrNull = (x: number | null): number | null => (x === null ? null : roundSignificant(x));
const roundOrNull = (x: number | null, decimals: number): number | null => (x === null ? null : round(x, decimals));

/** Transitions per kind, with a zero for every kind that does not occur. */
export function countKinds(transitions: readonly { kind: TransitionKind }[]): Record<TransitionKind, number> {
  const counts = Object.fromEntries(TRANSITION_KINDS.map((k) => [k, 0])) as Record<TransitionKind, number>;
  for (const t of transitions) counts[t.kind]++;
  return counts;
}

/** A transition in the API's form; `trackOf` may replace the track ids (for example by stored ones). */
export function transitionJson(t: Transition, trackOf?: { from?: (hotspotId: number) => string | null; to?: (hotspotId: number) => string | null }): TransitionJson {
  const out: TransitionJson = {
    kind: t.kind,
    from: t.from.map((e) => ({ hotspot_id: e.hotspotId, track_id: trackOf?.from ? trackOf.from(e.hotspotId) : e.trackId })),
    to: t.to.map((e) => ({ hotspot_id: e.hotspotId, track_id: trackOf?.to ? trackOf.to(e.hotspotId) : e.trackId })),
    overlap: t.overlap.map((o) => round(o, 6)),
    basis: t.basis,
  };
  if (t.covered !== undefined) out.covered = round(t.covered, 6);
  if (t.change) {
    out.change = {
      count_delta: round(t.change.countDelta, 6),
      count_ratio: sigOrNull(t.change.countRatio),
      area_delta_km2: roundSignificant(t.change.areaDeltaKm2),
      density_ratio: sigOrNull(t.change.densityRatio),
      moved_m: roundMeters(t.change.movedMeters),
    };
  }
  if (t.shrink) out.shrink = true;
  return out;
}

function num(figures: Record<string, unknown>, name: string): number | undefined {
  const v = figures[name];
  return typeof v === 'number' && Number.isFinite(v) ? v : undefined;
}

/**
 * A hotspot in the form tracking needs, from the figures written on its features (the stored
 * `figures` are those same properties: `count`, `area_km2`, `density_per_km2`, `centre`, rounded
 * as published). A new run's hotspots are read from the same rounded figures, so that the same
 * data gives a survival with exactly zero change. Density is count ÷ area (recomputed rather than
 * read, so that it carries no second rounding), or the published one when the rounded
 * area is 0. `count` falls back to the number of members.
 * @throws Error naming the hotspot when the figures have no centre or area
 */
function forTracking(hotspotId: number, trackId: string | null, members: readonly string[], hull: HullGeometry, figures: Record<string, unknown>, where: string): RunHotspot {
  const centre = figures['centre'];
  const areaKm2 = num(figures, 'area_km2');
  if (!Array.isArray(centre) || centre.length !== 2 || !centre.every((c) => typeof c === 'number' && Number.isFinite(c)) || areaKm2 === undefined) {
    throw new Error(`${where} hotspot ${hotspotId} has no centre and area figures; run the dataset again to store them.`);
  }
  const count = num(figures, 'count') ?? members.length;
  return {
    hotspotId,
    trackId,
    members,
    hull,
    centre: [centre[0] as number, centre[1] as number],
    count,
    areaKm2,
    densityPerKm2: areaKm2 > 0 ? count / areaKm2 : (num(figures, 'density_per_km2') ?? 0),
  };
}

/** A stored hotspot for tracking; `placeholder` stands in for a track id that was not stored. */
export function storedForTracking(h: StoredHotspot, where: string, placeholder: string | null = null): RunHotspot {
  return forTracking(h.hotspotId, h.trackId ?? placeholder, h.members, JSON.parse(h.hull) as HullGeometry, h.figures ?? {}, where);
}

/** A finished (not yet stored) hotspot for tracking. */
export function finishedForTracking(f: FinishedHotspot): RunHotspot {
  return forTracking(f.hotspot.hotspotId, null, f.memberIds, f.hotspot.hull, f.hotspot.properties, 'the new run\'s');
}

/** Marks new tracks during a match; replaced by reserved numbers once their count is known. */
const PENDING = '\u0000new:';

/**
 * Matches `current` against `previous` with temporary ids for new tracks and returns how many new
 * tracks the match needs; `resolve(first)` then gives the final ids t<first>, t<first+1>, … .
 */
function matchPending(previous: RunHotspot[], current: RunHotspot[], settings: Partial<TrackSettings>) {
  let needed = 0;
  const match = matchRuns(previous, current, settings, (seq) => {
    needed = Math.max(needed, seq);
    return PENDING + seq;
  });
  return { match, needed };
}

/**
 * Gives every hotspot of the run a track id and says how the tracks changed against the previous
 * successful run (null for a first run). The `assignTracks` hook of the run executor.
 *
 * @param settings tracking thresholds; default DEFAULT_TRACK_SETTINGS
 * @returns one track id per hotspot in the order given, and the changes for the run summary
 */
export async function assignTracks(ctx: RunContext, hotspots: FinishedHotspot[], settings: Partial<TrackSettings> = {}): Promise<TrackAssignment> {
  const { store, dataset, run } = ctx;
  const previousRun = await store.latestRun(dataset.id, 'succeeded', run.id);
  const stored = previousRun ? await store.getRunHotspots(previousRun.id) : [];
  // Hotspots stored before tracks existed have no track ids: nothing to continue, a first run.
  const tracked = previousRun !== null && stored.every((h) => h.trackId !== null);
  const previous = tracked ? stored.map((h) => storedForTracking(h, `run ${previousRun.id}`)) : [];
  const current = hotspots.map(finishedForTracking);

  const { match, needed } = matchPending(previous, current, settings);
  const first = needed > 0 ? await store.reserveTrackNumbers(dataset.id, needed) : 0;
  const final = (id: string): string => (id.startsWith(PENDING) ? formatTrackId(first + Number(id.slice(PENDING.length)) - 1) : id);

  const byHotspot = new Map(match.tracks.map((t) => [t.hotspotId, final(t.trackId)]));
  const trackIds = hotspots.map((h) => byHotspot.get(h.hotspot.hotspotId)!);
  if (!tracked) return { trackIds, changes: null };
  const transitions = match.transitions.map((t) => transitionJson(t, { to: (id) => byHotspot.get(id)! }));
  const changes: ChangesJson = {
    previous_run: previousRun.id,
    counts: countKinds(transitions),
    member_share: roundOrNull(match.memberShare, 6),
    transitions,
  };
  return { trackIds, changes: changes as unknown as Record<string, unknown> };
}

/**
 * The transitions between two stored runs of a dataset (any pair, `from` older than `to`), with the
 * track ids both runs were stored with. For the default pair (a run and the previous successful
 * one) this is what the later run's summary recorded, computed again with `settings`.
 */
export async function compareStoredRuns(store: Store, fromRunId: string, toRunId: string, settings: Partial<TrackSettings> = {}): Promise<{
  from: StoredHotspot[];
  to: StoredHotspot[];
  counts: Record<TransitionKind, number>;
  memberShare: number | null;
  transitions: TransitionJson[];
}> {
  const from = await store.getRunHotspots(fromRunId);
  const to = await store.getRunHotspots(toRunId);
  const fromTrack = new Map(from.map((h) => [h.hotspotId, h.trackId]));
  const toTrack = new Map(to.map((h) => [h.hotspotId, h.trackId]));
  // matchRuns wants a track on every old hotspot; stand-ins for ones stored without, reported as null
  const previous = from.map((h) => storedForTracking(h, `run ${fromRunId}`, `${PENDING}old:${h.hotspotId}`));
  const current = to.map((h) => storedForTracking(h, `run ${toRunId}`));
  const { match } = matchPending(previous, current, settings);
  const transitions = match.transitions.map((t) => transitionJson(t, { from: (id) => fromTrack.get(id) ?? null, to: (id) => toTrack.get(id) ?? null }));
  return { from, to, counts: countKinds(transitions), memberShare: roundOrNull(match.memberShare, 6), transitions };
}
