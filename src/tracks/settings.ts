/**
 * Settings of hotspot tracking across runs, their defaults and their checks.
 *
 * Overlap of an old hotspot X with a new hotspot Y is the share of X found in Y (see match.ts).
 *
 * Defaults and why:
 * - survivalThreshold τ = 0.5 (our choice; MONIC calls it τ, the paper's own experimental values were
 *   not at hand): Y must hold at least half of X. With member overlap and disjoint hotspots in one
 *   run, at most two new hotspots can reach a half, and only both at exactly 0.5, so "the" match of X
 *   is a majority successor, which is how a coordinator reads "the same hotspot".
 * - splitThreshold τ_split = 0.25 (our choice): a split part must hold at least a quarter of X, so a
 *   few members drifting off into a neighbouring hotspot is not called a split; with τ = 0.5 for the
 *   covered share, a split has 2 to 4 parts.
 * - hullOverlapFallback = true: with a sliding time window the observation ids of two runs may not
 *   overlap at all, and only the outlines can say which hotspot is which.
 * - minMemberOverlapShare = 0.5 (our choice, tied to τ): when fewer than half of the previous run's
 *   hotspot members are found in the new run's hotspots, even an unchanged hotspot would on average
 *   score an overlap below τ by members, so members are no longer evidence and hulls decide.
 * - shrinkSurvival = true (our choice): a hotspot that lost most of its members but whose remains
 *   gather in one smaller hotspot in its place survives as that hotspot (a survival with a shrink,
 *   MONIC's size transition) instead of disappearing while a new hotspot emerges on the same spot.
 *   The rule uses τ and no threshold of its own (see match.ts).
 */

/** Thresholds of hotspot tracking; every share is a fraction in [0, 1]. */
export interface TrackSettings {
  /**
   * τ: X survives as (or is absorbed into) Y when overlap(X, Y) ≥ τ; also the share of X that the
   * parts of a split must cover together. In (0, 1]; default 0.5.
   */
  survivalThreshold: number;
  /** τ_split: each part Yi of a split needs overlap(X, Yi) ≥ τ_split. In (0, τ]; default 0.25. */
  splitThreshold: number;
  /** Whether hull overlap replaces member overlap when membership changed; default true. */
  hullOverlapFallback: boolean;
  /**
   * Share of the previous run's hotspot members that must be found in the new run's hotspots for
   * member overlap to be used for the whole pair of runs; below it, hull overlap is used
   * (when hullOverlapFallback). In [0, 1]; default 0.5.
   */
  minMemberOverlapShare: number;
  /**
   * Hull overlaps are areas computed in floating point; a hull overlap within this much below a
   * threshold still reaches it, so that a hull covering exactly half of another counts as half.
   * In [0, 0.01]; default 1e-9. Member overlaps are exact ratios of integers and need no tolerance.
   */
  hullTolerance: number;
  /**
   * Whether a hotspot that would disappear survives as a smaller hotspot in its place that would
   * otherwise emerge (the shrink rule in match.ts); default true.
   */
  shrinkSurvival: boolean;
}

/** Default tracking settings; see the module header for the reasons behind each value. */
export const DEFAULT_TRACK_SETTINGS: Readonly<TrackSettings> = Object.freeze({
  survivalThreshold: 0.5,
  splitThreshold: 0.25,
  hullOverlapFallback: true,
  minMemberOverlapShare: 0.5,
  hullTolerance: 1e-9,
  shrinkSurvival: true,
});

function share(name: string, value: unknown, low: number, lowOpen: boolean, high: number): number {
  const ok = typeof value === 'number' && Number.isFinite(value) && (lowOpen ? value > low : value >= low) && value <= high;
  if (!ok) {
    throw new RangeError(
      `Track setting ${name} must be a number ${lowOpen ? '>' : '≥'} ${low} and ≤ ${high}, got ${String(value)}; ` +
        `leave it out to use the default ${String(DEFAULT_TRACK_SETTINGS[name as keyof TrackSettings])}.`,
    );
  }
  return value as number;
}

/**
 * Defaults merged with the given settings, checked. Throws a RangeError naming the setting when a
 * value is out of range (for example splitThreshold above survivalThreshold).
 */
export function resolveTrackSettings(settings: Partial<TrackSettings> = {}): TrackSettings {
  const merged: TrackSettings = { ...DEFAULT_TRACK_SETTINGS };
  for (const [key, value] of Object.entries(settings)) {
    if (value === undefined) continue;
    if (!(key in DEFAULT_TRACK_SETTINGS)) {
      throw new RangeError(`Unknown track setting ${key}; known: ${Object.keys(DEFAULT_TRACK_SETTINGS).join(', ')}.`);
    }
    (merged as unknown as Record<string, unknown>)[key] = value;
  }
  share('survivalThreshold', merged.survivalThreshold, 0, true, 1);
  share('splitThreshold', merged.splitThreshold, 0, true, merged.survivalThreshold);
  share('minMemberOverlapShare', merged.minMemberOverlapShare, 0, false, 1);
  share('hullTolerance', merged.hullTolerance, 0, false, 0.01);
  for (const flag of ['hullOverlapFallback', 'shrinkSurvival'] as const) {
    if (typeof merged[flag] !== 'boolean') throw new RangeError(`Track setting ${flag} must be true or false, got ${String(merged[flag])}.`);
  }
  return merged;
}
