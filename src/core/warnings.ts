/**
 * Warning signs in a clustering that usually mean eps or min_points do not fit the data. Each
 * warning has a stable plain-word code and a message that says what to try. The thresholds are
 * rules of thumb (common practice, no source), exported so the documentation can quote them.
 */
import { ROLE_CORE } from './types.js';
import type { Clustering } from './types.js';

export interface ClusteringWarning {
  /** stable code: few-core-points, nearly-all-core, one-giant-hotspot, no-hotspots */
  code: string;
  /** one or two plain sentences: what was seen and what to try */
  message: string;
}

/** Below this share of core points, eps is probably too small or min_points too large (common practice, no source). */
export const FEW_CORE_SHARE = 0.01;
/** Above this share of core points, eps is probably too large (common practice, no source). */
export const NEARLY_ALL_CORE_SHARE = 0.95;
/** A hotspot holding more than this share of all points is suspect of merging separate groups (common practice, no source). */
export const GIANT_HOTSPOT_SHARE = 0.9;
/**
 * Share-based warnings need at least this many points: in a handful of points, "all core" or
 * "one hotspot holds everything" is often simply true (common practice, no source).
 */
export const MIN_POINTS_FOR_SHARES = 20;

const pct = (x: number): string => `${(100 * x).toFixed(x < 0.1 ? 1 : 0)} %`;

/**
 * Checks a clustering for the usual signs of badly fitting parameters:
 * - `no-hotspots`: no hotspot at all (any non-empty set);
 * - `few-core-points`: hotspots exist but fewer than 1 % of the points are core;
 * - `nearly-all-core`: more than 95 % of the points are core (at least 20 points);
 * - `one-giant-hotspot`: one hotspot holds more than 90 % of all points, noise included
 *   (at least 20 points).
 *
 * @param c a clustering (labels, roles, count)
 * @returns the warnings, in the order above; empty when nothing looks wrong
 */
export function clusteringWarnings(c: Clustering): ClusteringWarning[] {
  const n = c.labels.length;
  const out: ClusteringWarning[] = [];
  if (n === 0) return out;
  let core = 0;
  const sizes = new Int32Array(Math.max(0, c.count));
  for (let i = 0; i < n; i++) {
    if (c.roles[i] === ROLE_CORE) core++;
    const l = c.labels[i];
    if (l >= 0 && l < sizes.length) sizes[l]++;
  }
  const coreShare = core / n;

  if (c.count === 0) {
    out.push({
      code: 'no-hotspots',
      message:
        'No hotspot was found: every point is noise. Try a larger eps or a smaller min_points; the k-distance curve suggests an eps for your min_points.',
    });
  } else if (coreShare < FEW_CORE_SHARE) {
    out.push({
      code: 'few-core-points',
      message: `Only ${core} of ${n} points (${pct(coreShare)}) are core points, so hotspots rest on very few points. eps is probably too small or min_points too large: try a larger eps or a smaller min_points.`,
    });
  }
  if (n >= MIN_POINTS_FOR_SHARES && coreShare > NEARLY_ALL_CORE_SHARE) {
    out.push({
      code: 'nearly-all-core',
      message: `${pct(coreShare)} of the points are core points, so nearly everything counts as dense. eps is probably too large: try a smaller eps or a larger min_points.`,
    });
  }
  if (n >= MIN_POINTS_FOR_SHARES && c.count > 0) {
    let largest = 0;
    for (let h = 1; h < sizes.length; h++) if (sizes[h] > sizes[largest]) largest = h;
    const share = sizes[largest] / n;
    if (share > GIANT_HOTSPOT_SHARE) {
      out.push({
        code: 'one-giant-hotspot',
        message: `Hotspot ${largest + 1} holds ${pct(share)} of all points. Separate groups may have been chained together: try a smaller eps or a larger min_points, or OPTICS with ξ extraction to see nested hotspots.`,
      });
    }
  }
  return out;
}
