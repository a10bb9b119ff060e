/**
 * The listing of a dataset's tracks, shared by both engines: one statement (written for either
 * dialect), its cursor, and the mapping of its rows.
 *
 * A track is listed when a succeeded run of the dataset stored a hotspot with its id. Tracks are in
 * the order of their ids, shorter first (t000002 before t000010, t999999 before t1000000), which
 * is the order they were first given out; the cursor is the last track id of the page, so a page
 * never repeats or skips a track while later runs add new ones (they sort after it).
 */
import { formatRunId } from './runs.js';
import { checkLimit, plainText } from './validation.js';
import { StoreError, type ListTracksOptions, type TrackSummary } from './store.js';

/** Largest page of tracks. */
const MAX_TRACK_PAGE = 1000;

/** Opaque cursor after one track id (base64url of a small JSON object). */
function encodeTrackCursor(trackId: string): string {
  return Buffer.from(JSON.stringify({ t: trackId })).toString('base64url');
}

/** @throws StoreError 'invalid' when the cursor was not made by `encodeTrackCursor` */
function decodeTrackCursor(cursor: string): string {
  try {
    const v = JSON.parse(Buffer.from(cursor, 'base64url').toString('utf8')) as { t?: unknown };
    if (typeof v.t === 'string' && v.t !== '' && plainText(v.t)) return v.t;
  } catch {
    // fall through to the error below
  }
  throw new StoreError('invalid', 'cursor is not one this service issued; start again without a cursor');
}

/**
 * The listing statement. `add` writes a parameter and returns its placeholder; it is called in the
 * order the placeholders appear in the text (as SQLite's `?` needs). PostgreSQL compares ids byte
 * by byte (COLLATE "C"), as SQLite does, so both engines page in the same order.
 * @throws StoreError 'invalid' for a bad limit or cursor
 */
export function trackListSql(dialect: 'sqlite' | 'postgres', add: (v: unknown) => string, datasetId: string, options: ListTracksOptions): string {
  checkLimit(options.limit, MAX_TRACK_PAGE);
  const after = options.cursor === undefined ? null : decodeTrackCursor(options.cursor);
  const id = dialect === 'postgres' ? 't.track_id COLLATE "C"' : 't.track_id';
  const active = '(t.last_seq = latest.seq)';
  const text = [
    'WITH t AS (',
    '  SELECT h.track_id, COUNT(DISTINCT h.run_seq) AS runs, MIN(h.run_seq) AS first_seq, MAX(h.run_seq) AS last_seq',
    '  FROM run_hotspots h JOIN runs r ON r.seq = h.run_seq',
    `  WHERE r.dataset_id = ${add(datasetId)} AND r.status = 'succeeded' AND h.track_id IS NOT NULL`,
    '  GROUP BY h.track_id',
    `), latest AS (SELECT MAX(seq) AS seq FROM runs WHERE dataset_id = ${add(datasetId)} AND status = 'succeeded')`,
    'SELECT t.track_id, t.runs, t.first_seq, t.last_seq,',
    '  f.created_at AS first_created_at, f.finished_at AS first_finished_at,',
    '  l.created_at AS last_created_at, l.finished_at AS last_finished_at,',
    `  ${active} AS active, lh.hotspot_id, lh.member_count, lh.figures`,
    'FROM t CROSS JOIN latest',
    'JOIN runs f ON f.seq = t.first_seq',
    'JOIN runs l ON l.seq = t.last_seq',
    'JOIN run_hotspots lh ON lh.run_seq = t.last_seq',
    '  AND lh.hotspot_id = (SELECT MIN(x.hotspot_id) FROM run_hotspots x WHERE x.run_seq = t.last_seq AND x.track_id = t.track_id)',
    'WHERE 1 = 1',
  ];
  if (after !== null) {
    const len = [...after].length;
    text.push(`  AND (length(t.track_id) > ${add(len)} OR (length(t.track_id) = ${add(len)} AND ${id} > ${add(after)}))`);
  }
  if (options.active === true) text.push(`  AND ${active}`);
  if (options.active === false) text.push(`  AND NOT ${active}`);
  text.push(`ORDER BY length(t.track_id), ${id}`, `LIMIT ${add(options.limit + 1)}`);
  return text.join('\n');
}

/** One row of the listing statement, as either driver hands it over. */
export type TrackRow = Record<string, unknown>;

/**
 * The page from the rows (one more than the limit when a next page exists). `time` turns the
 * engine's timestamps into RFC 3339 text, `figures` its figures column into an object.
 */
export function trackPage(rows: TrackRow[], limit: number, time: (v: unknown) => string | null, figures: (v: unknown) => Record<string, unknown> | null) {
  const more = rows.length > limit;
  const kept = more ? rows.slice(0, limit) : rows;
  const tracks: TrackSummary[] = kept.map((r) => ({
    trackId: r.track_id as string,
    runCount: Number(r.runs),
    firstRun: { id: formatRunId(Number(r.first_seq)), createdAt: time(r.first_created_at) as string, finishedAt: time(r.first_finished_at) },
    lastRun: { id: formatRunId(Number(r.last_seq)), createdAt: time(r.last_created_at) as string, finishedAt: time(r.last_finished_at) },
    active: r.active === true || r.active === 1,
    hotspotId: Number(r.hotspot_id),
    memberCount: Number(r.member_count),
    figures: figures(r.figures),
  }));
  const last = tracks[tracks.length - 1];
  return { tracks, nextCursor: more && last !== undefined ? encodeTrackCursor(last.trackId) : null };
}
