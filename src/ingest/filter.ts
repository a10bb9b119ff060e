/**
 * Restricting observations to a time window and to property values before clustering. The kept
 * features are the original objects (so outputs still name them) and `kept` maps each kept
 * observation back to its input position.
 *
 * Rules:
 * - `since` is inclusive and `until` exclusive: [since, until). Consecutive windows such as
 *   one per day therefore never count an observation twice.
 * - When a window is set, observations without `observed_at` are left out (their time is
 *   unknown, so they cannot be shown to fall inside) and counted in `info.left_out_untimed`.
 * - `since`/`until` are RFC 3339 date-times; a bare date means 00:00 UTC that day, missing
 *   seconds mean :00, and a missing offset means UTC.
 * - `where` conditions must all hold. A condition holds when the property's value written as
 *   text equals the given text exactly (`count=3` matches 3 and "3"; `seen=true` matches true;
 *   `note=null` matches null). Objects and arrays never match; a missing property never matches.
 * - A `where` property that no observation has is an error (`unknown-property`), since it is
 *   almost always a typo that would otherwise silently leave nothing.
 */
import type { InputFeature, Observations } from './types.js';
import { InputError } from './types.js';
import { fail, parseTimestamp } from './checks.js';
import { propertyListMessage } from './geojson.js';

export interface WhereCondition {
  property: string;
  value: string;
}

export interface ObservationFilter {
  /** keep observations at or after this instant (RFC 3339); null or absent: no lower bound */
  since?: string | null;
  /** keep observations strictly before this instant (RFC 3339); null or absent: no upper bound */
  until?: string | null;
  /** property=value conditions, all of which must hold */
  where?: WhereCondition[];
}

/** How many observations each rule left out (summary fields). */
export interface FilterInfo {
  /** left out because a time window was set and they have no `observed_at` */
  left_out_untimed: number;
  /** left out because their `observed_at` lies outside [since, until) */
  left_out_by_time: number;
  /** left out by a `where` condition (counted only among those inside the time window) */
  left_out_by_where: number;
}

export interface FilterResult {
  observations: Observations;
  /** input index of each kept observation, ascending */
  kept: Int32Array;
  info: FilterInfo;
}

/**
 * Parses `property=value` (the command line's `--where`). Splits at the first `=`; spaces around
 * both parts are dropped.
 * @throws InputError `bad-filter` when there is no `=` or no property name.
 */
export function parseWhere(expr: string): WhereCondition {
  const eq = expr.indexOf('=');
  if (eq < 0) fail('bad-filter', `the condition ${JSON.stringify(expr)} has no "="; write it as property=value, for example species=heron`);
  const property = expr.slice(0, eq).trim();
  if (property === '') fail('bad-filter', `the condition ${JSON.stringify(expr)} names no property before "="; write it as property=value`);
  return { property, value: expr.slice(eq + 1).trim() };
}

/**
 * Parses a `since`/`until` bound to epoch milliseconds: an RFC 3339 date-time, or a bare date
 * (00:00 UTC), with seconds and offset optional (missing offset = UTC).
 * @throws InputError `bad-filter` naming the bound.
 */
export function parseBound(name: string, s: string): number {
  const m = /^(\d{4}-\d{2}-\d{2})(?:[Tt ](\d{2}:\d{2})(:\d{2}(?:\.\d+)?)?([Zz]|[+-]\d{2}:\d{2})?)?$/.exec(s.trim());
  const ms = m === null ? NaN : m[2] === undefined ? parseTimestamp(m[1] as string, true) : parseTimestamp(`${m[1]}T${m[2]}${m[3] ?? ':00'}${m[4] ?? 'Z'}`);
  if (ms !== ms) fail('bad-filter', `${name} ${JSON.stringify(s)} is not a date-time; write RFC 3339, for example 2024-05-01T00:00:00Z or 2024-05-01`);
  return ms;
}

/**
 * Keeps the observations inside the time window and matching every `where` condition, in input
 * order. Without any condition the input is returned as is (with `kept` = 0..n−1).
 * The result may hold no observation; deciding whether that is an error is the caller's.
 * @throws InputError `bad-filter` for unreadable or empty windows, `unknown-property` for a
 *   `where` property no observation has.
 */
export function applyFilter(obs: Observations, filter: ObservationFilter): FilterResult {
  const n = obs.points.n;
  const info: FilterInfo = { left_out_untimed: 0, left_out_by_time: 0, left_out_by_where: 0 };
  const since = filter.since == null ? -Infinity : parseBound('since', filter.since);
  const until = filter.until == null ? Infinity : parseBound('until', filter.until);
  if (since >= until) fail('bad-filter', `the window since ${filter.since} until ${filter.until} is empty; "until" must be later than "since" (since is inclusive, until exclusive)`);
  const where = filter.where ?? [];
  const windowed = filter.since != null || filter.until != null;
  if (!windowed && where.length === 0) return { observations: obs, kept: identity(n), info };

  for (const c of where) checkPropertyExists(obs.features, c.property);

  const keep = new Uint8Array(n);
  let count = 0;
  const times = obs.observedAt;
  for (let i = 0; i < n; i++) {
    if (windowed) {
      const t = times === null ? NaN : (times[i] as number);
      if (t !== t) {
        info.left_out_untimed++;
        continue;
      }
      if (t < since || t >= until) {
        info.left_out_by_time++;
        continue;
      }
    }
    if (where.length > 0 && !matchesAll(obs.features[i] as InputFeature, where)) {
      info.left_out_by_where++;
      continue;
    }
    keep[i] = 1;
    count++;
  }

  const kept = new Int32Array(count);
  for (let i = 0, k = 0; i < n; i++) if (keep[i] === 1) kept[k++] = i;
  return { observations: subset(obs, kept), kept, info };
}

function identity(n: number): Int32Array {
  const a = new Int32Array(n);
  for (let i = 0; i < n; i++) a[i] = i;
  return a;
}

function matchesAll(f: InputFeature, where: WhereCondition[]): boolean {
  const p = f.properties;
  if (p === null || p === undefined) return false;
  for (const c of where) {
    if (!Object.hasOwn(p, c.property)) return false;
    const v = p[c.property];
    const text = typeof v === 'string' ? v : typeof v === 'number' || typeof v === 'boolean' || v === null ? String(v) : undefined;
    if (text !== c.value) return false;
  }
  return true;
}

function checkPropertyExists(features: InputFeature[], property: string): void {
  for (const f of features) {
    const p = f.properties;
    if (p !== null && p !== undefined && Object.hasOwn(p, property)) return;
  }
  const found = new Set<string>();
  for (let i = 0; i < features.length && i < 1000 && found.size < 50; i++) {
    const p = (features[i] as InputFeature).properties;
    if (p !== null && p !== undefined) for (const k of Object.keys(p)) found.add(k);
  }
  throw new InputError([{ index: null, code: 'unknown-property', message: `where: ${propertyListMessage(property, 'observation', [...found])}` }]);
}

/** The observations at the given input indices, sharing the feature objects. */
function subset(obs: Observations, kept: Int32Array): Observations {
  const m = kept.length;
  const { lon, lat, weight } = obs.points;
  const sLon = new Float64Array(m);
  const sLat = new Float64Array(m);
  const sWeight = weight === null ? null : new Float64Array(m);
  const times = obs.observedAt;
  const sTimes = times === null ? null : new Float64Array(m);
  const features: InputFeature[] = new Array(m);
  let timed = 0;
  for (let k = 0; k < m; k++) {
    const i = kept[k] as number;
    sLon[k] = lon[i] as number;
    sLat[k] = lat[i] as number;
    if (sWeight !== null) sWeight[k] = (weight as Float64Array)[i] as number;
    if (sTimes !== null) {
      const t = (times as Float64Array)[i] as number;
      sTimes[k] = t;
      if (t === t) timed++;
    }
    features[k] = obs.features[i] as InputFeature;
  }
  return {
    points: { n: m, lon: sLon, lat: sLat, weight: sWeight },
    features,
    observedAt: timed > 0 ? sTimes : null,
  };
}
