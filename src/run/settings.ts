/**
 * Clustering settings: one defaults object, one validator. The HTTP API, the command line and
 * stored datasets all name settings the same way (snake_case, as in the API) and pass them
 * through `resolveSettings`, so a setting means the same thing everywhere.
 */
import { textFault } from '../ingest/limits.js';

import { compileTimeFormat } from '../ingest/checks.js';

export type Method = 'dbscan' | 'optics';
export type HullKindSetting = 'convex' | 'concave';
export type OpticsExtraction = 'eps' | 'xi';

export interface ClusterSettings {
  /** clustering method */
  method: Method;
  /** neighbourhood radius in metres (inclusive); for OPTICS the radius of the flat cut when extraction is 'eps'. null only while unresolved ('auto') */
  epsMeters: number;
  /** true when eps was chosen by the k-distance knee (eps=auto) */
  epsAuto: boolean;
  /** observations (or summed weight) within eps, the point itself included, that make a core point */
  minPoints: number;
  /** property holding each observation's weight (for example the number of animals seen) */
  weightProperty: string | null;
  /** hull shape */
  hull: HullKindSetting;
  /** concave hull tightness (concaveman's concavity: smaller is tighter), used when hull is concave */
  concavity: number;
  /** keep observations observed at or after this instant (RFC 3339) */
  since: string | null;
  /** keep observations observed before this instant (RFC 3339) */
  until: string | null;
  /** keep observations whose property equals the value (all conditions must hold) */
  where: { property: string; value: string }[];
  /** property whose values are counted per hotspot */
  countBy: string | null;
  /** OPTICS: the largest radius searched, metres; default 3 × eps */
  opticsMaxEpsMeters: number | null;
  /** OPTICS: how hotspots are cut from the ordering */
  opticsExtraction: OpticsExtraction;
  /** OPTICS ξ: the relative drop in reachability that bounds a hotspot, 0 < ξ < 1 */
  xi: number;
  /** OPTICS ξ: the fewest observations a hotspot may have; default the larger of min_points and 0.5 % of the observations */
  minClusterSize: number | null;
  /** CSV: longitude column name (found by common header names when null) */
  lonColumn: string | null;
  /** CSV: latitude column name (found by common header names when null) */
  latColumn: string | null;
  /** property (CSV: column) holding each observation's time; `observed_at` when null */
  timeColumn: string | null;
  /** how that time is written, as a pattern of YYYY, MM, DD, hh, mm, ss (for example DD.MM.YYYY); RFC 3339 when null */
  timeFormat: string | null;
  /** property holding known groups; hotspots are scored against it (purity, ARI, NMI) and given their majority value */
  referenceProperty: string | null;
  /** whether the summary gives the internal validation figures (silhouette, DBCV) */
  validation: boolean;
}

/**
 * Defaults. min_points 5 and ξ 0.05 are common practice (no source); eps has no sensible
 * universal default, so it must be given (or `auto`, the k-distance knee).
 */
export const DEFAULT_SETTINGS: Readonly<ClusterSettings> = Object.freeze({
  method: 'dbscan',
  epsMeters: NaN,
  epsAuto: false,
  minPoints: 5,
  weightProperty: null,
  hull: 'convex',
  concavity: 2,
  since: null,
  until: null,
  where: [],
  countBy: null,
  opticsMaxEpsMeters: null,
  opticsExtraction: 'eps',
  xi: 0.05,
  minClusterSize: null,
  lonColumn: null,
  latColumn: null,
  timeColumn: null,
  timeFormat: null,
  referenceProperty: null,
  validation: false,
});

/** Setting names as the API, the command line (as --kebab-case) and stored datasets spell them. */
export const SETTING_NAMES = [
  'method',
  'eps',
  'min_points',
  'weight',
  'hull',
  'concavity',
  'since',
  'until',
  'where',
  'count_by',
  'optics_max_eps',
  'optics_extraction',
  'xi',
  'min_cluster_size',
  'lon_column',
  'lat_column',
  'time_column',
  'time_format',
  'reference',
  'validation',
] as const;
export type SettingName = (typeof SETTING_NAMES)[number];

/** A setting that is unknown or has a value that cannot be used. */
export class SettingsError extends Error {
  readonly parameter: string;
  constructor(parameter: string, message: string) {
    super(`${parameter}: ${message}`);
    this.name = 'SettingsError';
    this.parameter = parameter;
  }
}

/**
 * Largest eps accepted, metres. A hotspot of one or two observations, or of observations in a
 * line, is outlined by a buffer of eps / 2 around them, and a buffer is drawn up to 1 000 km
 * (src/geometry/hull.ts); 2 000 km is also far beyond any survey's sense of "near".
 */
export const MAX_EPS_METERS = 2_000_000;
/** Largest OPTICS search radius, metres: a quarter of the Earth's circumference. */
export const MAX_OPTICS_EPS_METERS = 10_000_000;

function numberSetting(name: string, raw: unknown, opts: { min: number; max: number; integer?: boolean; exclusiveMin?: boolean }): number {
  const v = typeof raw === 'number' ? raw : typeof raw === 'string' && raw.trim() !== '' ? Number(raw) : NaN;
  if (!Number.isFinite(v)) throw new SettingsError(name, `must be a number, got ${JSON.stringify(raw)}`);
  if (opts.integer && !Number.isInteger(v)) throw new SettingsError(name, `must be a whole number, got ${v}`);
  if (opts.exclusiveMin ? v <= opts.min : v < opts.min) {
    throw new SettingsError(name, `must be ${opts.exclusiveMin ? 'greater than' : 'at least'} ${opts.min}, got ${v}`);
  }
  if (v > opts.max) throw new SettingsError(name, `must be at most ${opts.max}, got ${v}`);
  return v;
}

function choice<T extends string>(name: string, raw: unknown, allowed: readonly T[]): T {
  if (typeof raw === 'string' && (allowed as readonly string[]).includes(raw)) return raw as T;
  throw new SettingsError(name, `must be one of ${allowed.join(', ')}, got ${JSON.stringify(raw)}`);
}

function yesNo(name: string, raw: unknown): boolean {
  if (raw === true || raw === 'true') return true;
  if (raw === false || raw === 'false') return false;
  throw new SettingsError(name, `must be true or false, got ${JSON.stringify(raw)}`);
}

function text(name: string, raw: unknown): string {
  if (typeof raw !== 'string' || raw.trim() === '') throw new SettingsError(name, `must be a non-empty string, got ${JSON.stringify(raw)}`);
  return raw;
}

function instant(name: string, raw: unknown): string {
  const s = text(name, raw);
  // RFC 3339 date-time with its offset (a date alone is taken as midnight UTC). A time without
  // an offset is refused: it would mean the machine's local time, which differs between hosts.
  if (!/^\d{4}-\d{2}-\d{2}([Tt ]\d{2}:\d{2}(:\d{2}(\.\d+)?)?([Zz]|[+-]\d{2}:\d{2}))?$/.test(s) || !Number.isFinite(Date.parse(s))) {
    throw new SettingsError(name, `must be an RFC 3339 date-time with an offset such as 2026-05-01T00:00:00Z, got ${JSON.stringify(raw)}`);
  }
  return s;
}

/** Parses one `property=value` condition. */
export function parseCondition(raw: unknown): { property: string; value: string } {
  let c: { property: string; value: string };
  if (typeof raw === 'object' && raw !== null && 'property' in raw && 'value' in raw) {
    const { property, value } = raw as { property: unknown; value: unknown };
    c = { property: text('where', property), value: String(value) };
  } else {
    const s = text('where', raw);
    const eq = s.indexOf('=');
    if (eq <= 0) throw new SettingsError('where', `must look like property=value, got ${JSON.stringify(s)}`);
    c = { property: s.slice(0, eq), value: s.slice(eq + 1) };
  }
  // no stored observation can hold these (src/ingest/limits.ts), and PostgreSQL cannot be asked for them
  const fault = textFault(c.property) ?? textFault(c.value);
  if (fault !== null) throw new SettingsError('where', `holds ${fault}; no observation can match it — remove it`);
  return c;
}

/**
 * Validates and completes settings given as strings or numbers (query strings, JSON members,
 * command-line flags), named as in `SETTING_NAMES`. Unknown names are errors, not ignored, so a
 * misspelt setting never silently falls back to a default.
 *
 * @param input settings by API name; undefined, null and '' mean "use the default"
 * @param base settings to complete (defaults to DEFAULT_SETTINGS), for example a dataset's own
 */
export function resolveSettings(input: Record<string, unknown>, base: Readonly<ClusterSettings> = DEFAULT_SETTINGS): ClusterSettings {
  const s: ClusterSettings = { ...base, where: [...base.where] };
  for (const [name, raw] of Object.entries(input)) {
    if (!(SETTING_NAMES as readonly string[]).includes(name)) {
      throw new SettingsError(name, `unknown setting; known settings are ${SETTING_NAMES.join(', ')}`);
    }
    if (raw === undefined || raw === null || raw === '') continue;
    switch (name as SettingName) {
      case 'method':
        s.method = choice(name, raw, ['dbscan', 'optics'] as const);
        break;
      case 'eps':
        if (raw === 'auto') {
          s.epsAuto = true;
          s.epsMeters = NaN;
        } else {
          s.epsAuto = false;
          s.epsMeters = numberSetting(name, raw, { min: 0, max: MAX_EPS_METERS, exclusiveMin: true });
        }
        break;
      case 'min_points':
        s.minPoints = numberSetting(name, raw, { min: 1, max: 1_000_000, integer: true });
        break;
      case 'weight':
        s.weightProperty = text(name, raw);
        break;
      case 'hull':
        s.hull = choice(name, raw, ['convex', 'concave'] as const);
        break;
      case 'concavity':
        s.concavity = numberSetting(name, raw, { min: 0, max: 1e9, exclusiveMin: true });
        break;
      case 'since':
        s.since = instant(name, raw);
        break;
      case 'until':
        s.until = instant(name, raw);
        break;
      case 'where':
        s.where = (Array.isArray(raw) ? raw : [raw]).map(parseCondition);
        break;
      case 'count_by':
        s.countBy = text(name, raw);
        break;
      case 'optics_max_eps':
        s.opticsMaxEpsMeters = numberSetting(name, raw, { min: 0, max: MAX_OPTICS_EPS_METERS, exclusiveMin: true });
        break;
      case 'optics_extraction':
        s.opticsExtraction = choice(name, raw, ['eps', 'xi'] as const);
        break;
      case 'xi':
        s.xi = numberSetting(name, raw, { min: 0, max: 1, exclusiveMin: true });
        if (s.xi >= 1) throw new SettingsError(name, `must be below 1, got ${s.xi}`);
        break;
      case 'min_cluster_size':
        s.minClusterSize = numberSetting(name, raw, { min: 2, max: 1e9, integer: true });
        break;
      case 'lon_column':
        s.lonColumn = text(name, raw);
        break;
      case 'lat_column':
        s.latColumn = text(name, raw);
        break;
      case 'time_column':
        s.timeColumn = text(name, raw);
        break;
      case 'time_format': {
        const f = compileTimeFormat(text(name, raw));
        if (typeof f === 'string') throw new SettingsError(name, f.replace(/^time_format /, ''));
        s.timeFormat = f.pattern;
        break;
      }
      case 'reference':
        s.referenceProperty = text(name, raw);
        break;
      case 'validation':
        s.validation = yesNo(name, raw);
        break;
    }
  }
  if (!s.epsAuto && !(s.epsMeters > 0)) {
    throw new SettingsError('eps', 'is required: a radius in metres (for example 250), or auto to take the knee of the k-distance curve');
  }
  if (s.since && s.until && Date.parse(s.since) >= Date.parse(s.until)) {
    throw new SettingsError('until', `must be later than since (${s.since}), got ${s.until}`);
  }
  if (s.method === 'optics' && s.opticsMaxEpsMeters !== null && !s.epsAuto && s.opticsExtraction === 'eps' && s.epsMeters > s.opticsMaxEpsMeters) {
    throw new SettingsError('eps', `must not exceed optics_max_eps (${s.opticsMaxEpsMeters} m) when hotspots are cut at eps, got ${s.epsMeters}`);
  }
  return s;
}

/** Settings as plain API-named members, for summaries and stored datasets. */
export function settingsRecord(s: ClusterSettings): Record<SettingName, unknown> {
  return {
    method: s.method,
    eps: s.epsMeters,
    min_points: s.minPoints,
    weight: s.weightProperty,
    hull: s.hull,
    concavity: s.concavity,
    since: s.since,
    until: s.until,
    where: s.where,
    count_by: s.countBy,
    optics_max_eps: s.opticsMaxEpsMeters,
    optics_extraction: s.opticsExtraction,
    xi: s.xi,
    min_cluster_size: s.minClusterSize,
    lon_column: s.lonColumn,
    lat_column: s.latColumn,
    time_column: s.timeColumn,
    time_format: s.timeFormat,
    reference: s.referenceProperty,
    validation: s.validation,
  };
}
