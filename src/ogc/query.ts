/**
 * The query parameters of OGC API – Features items requests (OGC 17-069r4 §7.15) and of the
 * result-layer addresses: `limit`, `bbox` (with boxes across the antimeridian), `datetime`
 * (instants and intervals with open ends), the Part 2 `crs` and `bbox-crs` (CRS84 only), `f`
 * and the opaque `cursor` of the next page. Unknown parameters are refused (400), as the
 * standard requires (/req/core/query-param-unknown).
 */
import { HttpProblem } from '../http/errors.js';

/** OGC CRS84: WGS 84 longitude/latitude, the only CRS served (RFC 7946 positions). */
export const CRS84 = 'http://www.opengis.net/def/crs/OGC/1.3/CRS84';

/** Items per page when `limit` is not given (OGC 17-069r4 §7.15.3 leaves it to the server). */
export const DEFAULT_LIMIT = 100;
/** The largest `limit` served; larger values are answered with this many (§7.15.3 permits it). */
export const MAX_LIMIT = 10_000;

/** [west, south, east, north] in degrees; west > east crosses the antimeridian. */
export type Bbox = [number, number, number, number];

/** A time interval [from, to) in epoch ms; an open end is undefined. */
export interface TimeInterval {
  from?: number;
  to?: number;
}

export interface ItemsQuery {
  limit: number;
  bbox: Bbox | null;
  datetime: TimeInterval | null;
  cursor: string | null;
  format: 'json' | 'html' | null;
}

const RFC3339 = /^\d{4}-\d{2}-\d{2}T\d{2}:\d{2}:\d{2}(\.\d+)?(Z|[+-]\d{2}:\d{2})$/i;
const DATE = /^\d{4}-\d{2}-\d{2}$/;

function one(query: Record<string, unknown>, name: string): string | undefined {
  const v = query[name];
  if (v === undefined) return undefined;
  if (Array.isArray(v)) throw new HttpProblem('invalid-parameter', `${name} is given ${v.length} times; give it once`, { parameter: name });
  return String(v);
}

/**
 * `limit`: a whole number of at least 1; above MAX_LIMIT the page holds MAX_LIMIT items.
 * source: OGC 17-069r4 /req/core/fc-limit-response-1 (a larger limit may be answered with fewer).
 */
export function parseLimit(text: string | undefined): number {
  if (text === undefined || text === '') return DEFAULT_LIMIT;
  const n = /^\d{1,12}$/.test(text) ? Number(text) : NaN;
  if (!(n >= 1)) throw new HttpProblem('invalid-parameter', `limit must be a whole number of at least 1 (at most ${MAX_LIMIT} are returned), got ${JSON.stringify(text)}`, { parameter: 'limit' });
  return Math.min(n, MAX_LIMIT);
}

/**
 * `bbox`: west,south,east,north in degrees (four numbers; six with heights, which are ignored).
 * west > east is a box across the antimeridian. source: OGC 17-069r4 §7.15.4, RFC 7946 §5.2.
 */
export function parseBbox(text: string): Bbox {
  const parts = text.split(',').map((s) => (s.trim() === '' ? NaN : Number(s)));
  const four = parts.length === 6 ? [parts[0], parts[1], parts[3], parts[4]] : parts;
  const [w, s, e, n] = four as Bbox;
  if ((parts.length !== 4 && parts.length !== 6) || !parts.every(Number.isFinite) || Math.abs(w) > 180 || Math.abs(e) > 180 || s < -90 || n > 90 || s > n) {
    throw new HttpProblem(
      'invalid-parameter',
      `bbox must be west,south,east,north in degrees with south ≤ north (west > east crosses the antimeridian), got ${JSON.stringify(text)}`,
      { parameter: 'bbox' },
    );
  }
  return [w, s, e, n];
}

function instant(s: string, end: boolean): number {
  let t = NaN;
  if (RFC3339.test(s)) t = Date.parse(s);
  // a whole day, which the standard's examples use (`2018-02-12/..`): from its start, to its end
  else if (DATE.test(s)) t = Date.parse(s + 'T00:00:00Z') + (end ? 86_400_000 - 1 : 0);
  if (!Number.isFinite(t)) throw new HttpProblem('invalid-parameter', `datetime: ${JSON.stringify(s)} is not an RFC 3339 date-time such as 2026-04-01T00:00:00Z (or a date)`, { parameter: 'datetime' });
  return t;
}

/**
 * `datetime`: an instant, or an interval start/end where either end may be `..` or empty (open);
 * both ends inclusive, returned as [from, to) in epoch ms. source: OGC 17-069r4 §7.15.5.
 */
export function parseDatetime(text: string): TimeInterval {
  const parts = text.split('/');
  if (parts.length === 1) {
    if (DATE.test(text)) return { from: instant(text, false), to: instant(text, true) + 1 };
    const t = instant(text, false);
    return { from: t, to: t + 1 };
  }
  const open = (p: string): boolean => p === '..' || p === '';
  if (parts.length !== 2 || (open(parts[0]!) && open(parts[1]!))) {
    throw new HttpProblem('invalid-parameter', 'datetime: give an instant, or an interval start/end where one end may be ".."', { parameter: 'datetime' });
  }
  const out: TimeInterval = {};
  if (!open(parts[0]!)) out.from = instant(parts[0]!, false);
  if (!open(parts[1]!)) out.to = instant(parts[1]!, true) + 1;
  if (out.from !== undefined && out.to !== undefined && out.from >= out.to) {
    throw new HttpProblem('invalid-parameter', 'datetime: the interval ends before it starts', { parameter: 'datetime' });
  }
  return out;
}

/** `f`: json or html (the representation), or null to negotiate by Accept. */
export function parseFormat(text: string | undefined, allowed: readonly string[] = ['json', 'html']): 'json' | 'html' | null {
  if (text === undefined) return null;
  if (!allowed.includes(text)) throw new HttpProblem('invalid-parameter', `f must be one of ${allowed.join(', ')}, got ${JSON.stringify(text)}`, { parameter: 'f' });
  return text as 'json' | 'html';
}

/** Refuses parameters outside `allowed`, naming them and the allowed ones. */
export function onlyParams(query: Record<string, unknown>, allowed: readonly string[]): void {
  for (const k of Object.keys(query)) {
    if (!allowed.includes(k)) throw new HttpProblem('invalid-parameter', `${k}: unknown parameter; this address takes ${allowed.length ? allowed.join(', ') : 'none'}`, { parameter: k });
  }
}

/** Part 2: `crs` and `bbox-crs` may only name CRS84, the one CRS served. */
function checkCrs(query: Record<string, unknown>, name: string): void {
  const v = one(query, name);
  if (v === undefined) return;
  if (v !== CRS84 && v !== `[${CRS84}]`) {
    throw new HttpProblem('invalid-parameter', `${name}: only ${CRS84} (WGS 84 longitude, latitude) is served, got ${JSON.stringify(v)}`, { parameter: name });
  }
}

export const ITEMS_PARAMS = ['limit', 'bbox', 'bbox-crs', 'crs', 'datetime', 'cursor', 'f'] as const;

/** The items query, after refusing unknown parameters. */
export function parseItemsQuery(query: Record<string, unknown>, allowed: readonly string[] = ITEMS_PARAMS): ItemsQuery {
  onlyParams(query, allowed);
  checkCrs(query, 'crs');
  checkCrs(query, 'bbox-crs');
  const bbox = one(query, 'bbox');
  const datetime = one(query, 'datetime');
  const cursor = one(query, 'cursor');
  return {
    limit: parseLimit(one(query, 'limit')),
    bbox: bbox === undefined ? null : parseBbox(bbox),
    datetime: datetime === undefined ? null : parseDatetime(datetime),
    cursor: cursor === undefined || cursor === '' ? null : cursor,
    format: parseFormat(one(query, 'f')),
  };
}

/** Longitude intervals of a box, split at the antimeridian when it crosses it. */
function lonIntervals(west: number, east: number): [number, number][] {
  return west <= east ? [[west, east]] : [[west, 180], [-180, east]];
}

/**
 * Whether two boxes share a point; either may cross the antimeridian (west > east). A box
 * touching ±180 on one side meets one touching it on the other (the same meridian).
 */
export function bboxesIntersect(a: Bbox, b: Bbox): boolean {
  if (a[1] > b[3] || b[1] > a[3]) return false;
  const norm = (x: number): number => (x === -180 ? 180 : x);
  for (const [a0, a1] of lonIntervals(a[0], a[2])) {
    for (const [b0, b1] of lonIntervals(b[0], b[2])) {
      if (a0 <= b1 && b0 <= a1) return true;
      if ((Math.abs(a0) === 180 || Math.abs(a1) === 180) && (Math.abs(b0) === 180 || Math.abs(b1) === 180)) {
        const ea = [norm(a0), norm(a1)];
        const eb = [norm(b0), norm(b1)];
        if (ea.some((x) => x === 180) && eb.some((x) => x === 180)) return true;
      }
    }
  }
  return false;
}

/** Whether a time span [first, last] (epoch ms, inclusive) meets the interval [from, to). */
export function timeIntersects(first: number, last: number, q: TimeInterval): boolean {
  if (!Number.isFinite(first) || !Number.isFinite(last)) return false;
  return (q.to === undefined || first < q.to) && (q.from === undefined || last >= q.from);
}
