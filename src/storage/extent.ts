/**
 * The longitude range of a set of points on the circle: the smallest interval that holds them
 * all, which is the circle less its widest empty gap. For points on both sides of ±180 (Fiji,
 * the Aleutians, a Pacific survey) that interval crosses the antimeridian and is written west >
 * east, as GeoJSON (RFC 7946 §5.2) and OGC API bboxes do; elsewhere it is plain [least, greatest].
 *
 * The stores give the points grouped into bins of BIN_DEGREES of longitude, with each bin's least
 * and greatest longitude (one GROUP BY, at most 3,600 rows). Gaps between bins are then exact;
 * a gap inside a bin is narrower than a bin, so when no gap between bins is at least that wide
 * the points leave nothing wider than BIN_DEGREES empty and the plain range is given (its width
 * then within BIN_DEGREES of the smallest).
 */

export const BIN_DEGREES = 0.1;

/** SQLite's bin of a longitude column (lon + 180 ≥ 0, so the cast's truncation is floor). */
export const LON_BIN_SQL = `CAST((lon + 180) * ${1 / BIN_DEGREES} AS INTEGER)`;

/**
 * West and east of the smallest longitude interval holding every point, from bins sorted by
 * longitude, each `[least, greatest]`. Ties go to the plain range.
 */
export function lonRange(bins: readonly (readonly [number, number])[]): [number, number] {
  if (bins.length === 0) throw new Error('lonRange: no points');
  const first = bins[0]![0];
  const last = bins[bins.length - 1]![1];
  // the gap across ±180, from the greatest longitude round to the least
  let best = first + 360 - last;
  let at = -1;
  for (let i = 0; i + 1 < bins.length; i++) {
    const gap = bins[i + 1]![0] - bins[i]![1];
    if (gap > best) {
      best = gap;
      at = i;
    }
  }
  // a range starting at +180 is the plain one that starts at -180, the same meridian
  if (at < 0 || best < BIN_DEGREES || bins[at + 1]![0] === 180) return [first, last];
  return [bins[at + 1]![0], bins[at]![1]];
}
