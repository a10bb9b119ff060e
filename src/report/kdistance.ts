/**
 * The k-distance answer for the map page and the report: the curve and its knee (as
 * `POST /v1/k-distance` and `roost suggest-eps` give them) and, for a chosen eps, what DBSCAN
 * would make of the same observations at that eps: hotspots, noise, core points.
 */
import { dbscan } from '../core/dbscan.js';
import { suggestEps } from '../core/kdistance.js';
import type { PointSet } from '../core/types.js';
import { ROLE_CORE } from '../core/types.js';
import { clusteringWarnings } from '../core/warnings.js';
import { roundSignificant } from '../geometry/rounding.js';

export interface EpsPreview {
  eps_m: number;
  min_points: number;
  observations: number;
  hotspots: number;
  clustered: number;
  noise: number;
  core: number;
}

/** What DBSCAN gives at `epsMeters` and `minPoints` (weights as in a run). */
export function previewAt(points: PointSet, minPoints: number, epsMeters: number): EpsPreview {
  const c = dbscan(points, { epsMeters, minPoints });
  let noise = 0;
  let core = 0;
  for (let i = 0; i < points.n; i++) {
    if (c.labels[i] < 0) noise++;
    if (c.roles[i] === ROLE_CORE) core++;
  }
  return { eps_m: epsMeters, min_points: minPoints, observations: points.n, hotspots: c.count, clustered: points.n - noise, noise, core };
}

/**
 * The k-distance curve (k = min_points − 1) with its knee and, when `epsMeters` is given, the
 * preview at that eps. @param minPoints ≥ 2
 */
export function kDistancePreview(points: PointSet, minPoints: number, epsMeters: number | null): Record<string, unknown> {
  const mp = Math.max(2, minPoints);
  const s = suggestEps(points, mp);
  const warnings = s.epsMeters === null ? [] : clusteringWarnings(dbscan(points, { epsMeters: s.epsMeters, minPoints: mp }));
  return {
    min_points: mp,
    k: s.k,
    observations: s.total,
    sampled: s.sampled,
    eps_m: s.epsMeters === null ? null : roundSignificant(s.epsMeters, 4),
    knee_index: s.kneeIndex,
    message: s.message,
    warnings,
    curve: { rank: s.curve.rank, meters: s.curve.meters.map((m) => roundSignificant(m, 4)) },
    preview: epsMeters === null || points.n === 0 ? null : previewAt(points, mp, epsMeters),
  };
}
