/**
 * GeoJSON reader (RFC 7946): a FeatureCollection or a single Feature of Point geometries becomes
 * Observations. The text is parsed once with JSON.parse; the features are then checked in one
 * pass into typed arrays and kept as the very objects parsed (the `points` output re-emits them).
 *
 * Accepted, on purpose:
 * - a third coordinate (altitude or depth) is accepted and ignored; four or more is a problem;
 * - a Feature without a `properties` member is read as `properties: null` (set on the parsed object);
 * - `id: null` counts as no id;
 * - `observed_at: null` counts as no time.
 * Rejected, on purpose:
 * - a bare JSON array of Features (not GeoJSON; the message says how to wrap it);
 * - a weight written as a string (`"3"`): JSON has numbers, and a string usually means the
 *   producer's field holds text ("3 birds"), so the message asks for a number instead of guessing.
 */
import { createRequire } from 'node:module';
import type { InputFeature, Observations } from './types.js';
import {
  DEFAULT_TIME_RULE,
  ProblemList,
  TIME_PROPERTY,
  describe,
  fail,
  locate,
  malformedJsonMessage,
  rangeProblem,
  readTime,
  timeMessage,
  weightMessage,
  type TimeRule,
} from './checks.js';
import { contentProblem } from './limits.js';

/** The parts of the `geojson-validation` package used here (it ships no type declarations). */
interface GeoJsonValidation {
  isPoint(value: unknown, trace?: false): boolean;
  isBbox(value: unknown, trace?: false): boolean;
}
/** The package, loaded when first needed (the byte reader reads the usual inputs without it). */
let validator: GeoJsonValidation | null = null;
function gjv(): GeoJsonValidation {
  return (validator ??= createRequire(import.meta.url)('geojson-validation') as GeoJsonValidation);
}

const GEOMETRY_TYPES = new Set(['Point', 'MultiPoint', 'LineString', 'MultiLineString', 'Polygon', 'MultiPolygon', 'GeometryCollection']);

/** What every reader of feature lists needs to know. */
export interface FeatureListOptions {
  /** property holding each observation's weight, or null for weight 1 each */
  weightProperty: string | null;
  /** how messages name an item: `feature` (GeoJSON) or `record` (text sequences) */
  noun: string;
  /** 1-based line of each item, for messages (newline-delimited input), or null */
  lines: ArrayLike<number> | null;
  /** per item, the message for a record that could not be parsed (reported as `malformed-json` in index order); null for none */
  unparsed?: (string | undefined)[] | null;
  /** the observations are to be stored: string values must be storable text too (src/ingest/limits.ts) */
  storable?: boolean;
  /** where the time is and how it is written; `observed_at` in RFC 3339 by default */
  time?: TimeRule;
}

/** Reads a GeoJSON text (FeatureCollection or Feature). Throws InputError; never returns part of the input. */
export function readGeoJson(text: string, weightProperty: string | null, maxProblems: number, maxFeatures: number, time: TimeRule = DEFAULT_TIME_RULE, storable = false): Observations {
  let root: unknown;
  try {
    root = JSON.parse(text);
  } catch (err) {
    fail('malformed-json', malformedJsonMessage(text, err));
  }
  const items = rootFeatures(root);
  if (items.length === 0) fail('empty-input', 'the FeatureCollection has no features; send at least one Point feature');
  if (items.length > maxFeatures) {
    fail('too-many-features', `the input has ${items.length} features; at most ${maxFeatures} are accepted in one request — split it`);
  }
  const problems = new ProblemList(maxProblems);
  const obs = checkFeatureList(items, { weightProperty, noun: 'feature', lines: null, time, storable }, problems);
  problems.throwIfAny();
  return obs;
}

/** The feature array of a parsed GeoJSON root, or an InputError saying what the root is instead. */
function rootFeatures(root: unknown): unknown[] {
  if (Array.isArray(root)) {
    fail(
      'not-geojson',
      `the input is a bare JSON array of ${root.length} item${root.length === 1 ? '' : 's'}, which is not GeoJSON; wrap the features as {"type":"FeatureCollection","features":[…]}`,
    );
  }
  if (root === null || typeof root !== 'object') {
    fail('not-geojson', `the input is ${describe(root)}, not a GeoJSON object; send a FeatureCollection of Point features`);
  }
  const type = (root as { type?: unknown }).type;
  if (type === 'FeatureCollection') {
    const features = (root as { features?: unknown }).features;
    if (!Array.isArray(features)) {
      fail('not-geojson', `the FeatureCollection's "features" member is ${describe(features)}; it must be an array of features`);
    }
    return features;
  }
  if (type === 'Feature') return [root];
  if (typeof type === 'string' && GEOMETRY_TYPES.has(type)) {
    fail('not-geojson', `the input is a bare ${type} geometry; wrap each point in a Feature inside a FeatureCollection`);
  }
  fail('not-geojson', `the input has "type" ${describe(type)}; expected "FeatureCollection" or "Feature"`);
}

/**
 * Checks parsed features (FeatureCollection members or sequence records) into Observations,
 * recording every problem found in `problems`. The result is meaningful only when no problem
 * was recorded; the caller throws otherwise.
 */
export function checkFeatureList(items: unknown[], options: FeatureListOptions, problems: ProblemList): Observations {
  return new FeatureChecker(items, options, problems).run();
}

// Features are parsed JSON of unknown shape: read them through this loose view.
type Loose = { [key: string]: any };

class FeatureChecker {
  readonly n: number;
  readonly lon: Float64Array;
  readonly lat: Float64Array;
  readonly weight: Float64Array | null;
  readonly observedAt: Float64Array;
  timed = 0;
  /** positions out of range as given but in range swapped */
  swapped = 0;
  /** positions (numeric pairs) seen, and whether all of them would be in range swapped */
  positions = 0;
  allSwappable = true;

  constructor(
    readonly items: unknown[],
    readonly options: FeatureListOptions,
    readonly problems: ProblemList,
  ) {
    this.n = items.length;
    this.lon = new Float64Array(this.n);
    this.lat = new Float64Array(this.n);
    this.weight = options.weightProperty === null ? null : new Float64Array(this.n);
    this.observedAt = new Float64Array(this.n);
  }

  run(): Observations {
    const { items, n, lon, lat, weight, observedAt, problems } = this;
    const weightProperty = this.options.weightProperty;
    let checkWeight = weight !== null;
    if (weightProperty !== null && !anyHasProperty(items, weightProperty)) {
      problems.add(null, undefined, 'unknown-property', unknownPropertyMessage(items, weightProperty, this.options.noun));
      checkWeight = false;
    }
    const time = this.options.time ?? DEFAULT_TIME_RULE;
    if (time.property !== TIME_PROPERTY && !anyHasProperty(items, time.property)) {
      problems.add(null, undefined, 'unknown-property', `time_column: ${unknownPropertyMessage(items, time.property, this.options.noun)}`);
    }
    const unparsed = this.options.unparsed ?? null;
    const storable = this.options.storable ?? false;
    for (let i = 0; i < n; i++) {
      if (unparsed !== null && unparsed[i] !== undefined) {
        problems.add(i, undefined, 'malformed-json', unparsed[i] as string);
        continue;
      }
      const f = items[i] as Loose;
      // The common case, tested inline: a Feature with a Point of 2 (or 3) in-range numbers and no bbox.
      let good = false;
      if (typeof f === 'object' && f !== null && f.type === 'Feature' && f.bbox === undefined) {
        const g = f.geometry;
        if (typeof g === 'object' && g !== null && g.type === 'Point' && g.bbox === undefined) {
          const c = g.coordinates;
          if (Array.isArray(c)) {
            const x = c[0];
            const y = c[1];
            const len = c.length;
            if (
              typeof x === 'number' &&
              typeof y === 'number' &&
              x >= -180 &&
              x <= 180 &&
              y >= -90 &&
              y <= 90 &&
              (len === 2 || (len === 3 && typeof c[2] === 'number' && Number.isFinite(c[2])))
            ) {
              lon[i] = x;
              lat[i] = y;
              this.positions++;
              if (x < -90 || x > 90) this.allSwappable = false;
              good = true;
            }
          }
        }
      }
      if (!good && !this.slowFeature(f, i)) continue;

      const id = f.id;
      const content = contentProblem(f, storable);
      if (content !== null) {
        // nothing else is read from a feature that breaks a limit
        problems.add(i, typeof id === 'number' || (typeof id === 'string' && content.code !== 'bad-id') ? id : undefined, content.code, `${this.where(i, content.code === 'bad-id' ? undefined : id)}: ${content.message}`);
        observedAt[i] = NaN;
        continue;
      }
      if (id !== undefined && id !== null && typeof id !== 'string' && typeof id !== 'number') {
        problems.add(i, undefined, 'bad-id', `${this.where(i, undefined)}: id is ${describe(id)}; a feature id must be a string or a number`);
      }
      let p = f.properties;
      if (p === undefined) {
        f.properties = p = null;
      } else if (p !== null && (typeof p !== 'object' || Array.isArray(p))) {
        problems.add(i, id, 'bad-properties', `${this.where(i, id)}: properties is ${describe(p)}; it must be an object or null`);
        p = null;
      }
      if (checkWeight) {
        const w = p === null ? undefined : p[weightProperty as string];
        if (typeof w === 'number' && w >= 0 && w <= Number.MAX_VALUE) {
          (weight as Float64Array)[i] = w;
        } else {
          const own = p !== null && Object.hasOwn(p, weightProperty as string) ? w : undefined;
          problems.add(i, id, 'bad-weight', weightMessage(this.where(i, id), weightProperty as string, own));
        }
      }
      const t = p === null ? undefined : p[time.property];
      if (t === undefined || t === null || (time.format !== null && t === '')) {
        observedAt[i] = NaN;
      } else {
        const ms = readTime(t, time);
        if (ms === ms) {
          observedAt[i] = ms;
          this.timed++;
        } else {
          observedAt[i] = NaN;
          problems.add(i, id, 'bad-time', timeMessage(this.where(i, id), t, time));
        }
      }
    }
    this.swappedHint();
    return {
      points: { n, lon, lat, weight },
      features: items as InputFeature[],
      observedAt: this.timed > 0 ? observedAt : null,
    };
  }

  where(i: number, id: unknown): string {
    const lines = this.options.lines;
    return locate(this.options.noun, i, id, lines ? lines[i] : undefined);
  }

  /**
   * Says everything wrong with an item that failed the quick test, stores its position when
   * there is nothing wrong after all (a valid bbox), and returns whether the item is an object
   * whose id and properties are worth checking too.
   */
  slowFeature(f: Loose, i: number): boolean {
    const problems = this.problems;
    if (typeof f !== 'object' || f === null || Array.isArray(f)) {
      problems.add(i, undefined, 'not-a-feature', `${this.where(i, undefined)}: is ${describe(f)}, not a Feature object`);
      return false;
    }
    const id = typeof f.id === 'string' || typeof f.id === 'number' ? f.id : undefined;
    const where = this.where(i, id);
    if (f.type !== 'Feature') {
      const type = f.type;
      const msg =
        typeof type === 'string' && GEOMETRY_TYPES.has(type)
          ? `${where}: is a bare ${type} geometry; wrap it in a Feature ({"type":"Feature","geometry":…,"properties":{}})`
          : type === 'FeatureCollection'
            ? `${where}: is a FeatureCollection; ${this.options.noun === 'record' ? 'each record must be one Feature' : 'collections cannot be nested'}`
            : `${where}: has "type" ${describe(type)}; expected "Feature"`;
      problems.add(i, id, 'not-a-feature', msg);
      return false;
    }
    let ok = true;
    if (f.bbox !== undefined && !validBbox(f.bbox)) {
      problems.add(i, id, 'bad-bbox', `${where}: bbox is ${describe(f.bbox)}; it must be an array of 4 or 6 numbers, or left out`);
      ok = false;
    }
    const g = f.geometry;
    if (g === null || g === undefined) {
      problems.add(i, id, 'null-geometry', `${where}: has ${g === null ? 'a null geometry' : 'no geometry member'}; every observation needs a Point`);
      return true;
    }
    if (typeof g !== 'object' || Array.isArray(g)) {
      problems.add(i, id, 'not-a-point', `${where}: geometry is ${describe(g)}; it must be a Point object`);
      return true;
    }
    if (g.type !== 'Point') {
      const hint =
        g.type === 'MultiPoint'
          ? '; split a MultiPoint into one Feature per point'
          : g.type === 'Polygon' || g.type === 'MultiPolygon'
            ? '; use one point per observation (for example the place it was seen)'
            : '';
      const found = typeof g.type === 'string' ? `a ${g.type}` : `of type ${describe(g.type)}`;
      problems.add(i, id, 'not-a-point', `${where}: geometry is ${found}; only Point geometries are observations${hint}`);
      return true;
    }
    if (g.bbox !== undefined && !validBbox(g.bbox)) {
      problems.add(i, id, 'bad-bbox', `${where}: the geometry's bbox is ${describe(g.bbox)}; it must be an array of 4 or 6 numbers, or left out`);
      ok = false;
    }
    const c = g.coordinates;
    const coordMsg = coordinatesProblem(c);
    // The package check is the structural gate (a Point with a numeric position); ours adds
    // finiteness, the 2-or-3 rule and the message.
    if (coordMsg !== null || !gjv().isPoint(g)) {
      problems.add(i, id, 'bad-coordinates', `${where}: coordinates ${coordMsg ?? `are ${describe(c)}`}; write [longitude, latitude] in degrees`);
      return true;
    }
    const x = c[0] as number;
    const y = c[1] as number;
    this.positions++;
    if (x < -90 || x > 90 || y < -180 || y > 180) this.allSwappable = false;
    const range = rangeProblem(x, y);
    if (range !== null) {
      if (range.code === 'swapped-coordinates') this.swapped++;
      problems.add(i, id, range.code, `${where}: ${range.message}`);
      ok = false;
    }
    if (ok) {
      this.lon[i] = x;
      this.lat[i] = y;
    }
    return true;
  }

  /**
   * One note about the input as a whole when much of it reads as [latitude, longitude]: at least
   * a fifth of the positions (and two) fail only as given, and every position would be in range
   * swapped. Data whose longitudes all lie within ±90° cannot reveal a swap, so this speaks only
   * when the per-feature problems already show one.
   */
  swappedHint(): void {
    const { swapped, positions } = this;
    if (swapped >= 2 && swapped * 5 >= positions && this.allSwappable) {
      this.problems.addFirst(
        'swapped-coordinates',
        `${swapped} of ${positions} positions are out of range as [longitude, latitude] and every position is in range as [latitude, longitude]: the input most likely lists latitude first; GeoJSON order is [longitude, latitude]`,
      );
    }
  }
}

/** What is wrong with a Point's coordinates member, or null when it is 2 or 3 finite numbers. */
function coordinatesProblem(c: unknown): string | null {
  if (!Array.isArray(c)) return `are ${describe(c)}, not an array`;
  if (c.length < 2) return `have ${c.length} value${c.length === 1 ? '' : 's'}; a position needs 2`;
  if (c.length > 3) return `have ${c.length} values; a position has 2 (or 3 with altitude)`;
  for (let k = 0; k < c.length; k++) {
    const v = c[k];
    if (typeof v !== 'number') return `hold ${describe(v)} at position ${k}; every value must be a number`;
    if (!Number.isFinite(v)) return `hold ${v} at position ${k}; every value must be finite`;
  }
  return null;
}

function validBbox(b: unknown): boolean {
  if (!gjv().isBbox(b)) return false;
  const a = b as unknown[];
  return (a.length === 4 || a.length === 6) && a.every((v) => typeof v === 'number' && Number.isFinite(v));
}

/** Whether any item's properties has `name` as an own member. Stops at the first that does. */
function anyHasProperty(items: unknown[], name: string): boolean {
  for (let i = 0; i < items.length; i++) {
    const p = (items[i] as Loose | null)?.properties;
    if (p !== null && typeof p === 'object' && Object.hasOwn(p, name)) return true;
  }
  return false;
}

/** Names a few properties that do exist (and a case-only near miss), for `unknown-property`. */
export function unknownPropertyMessage(items: unknown[], name: string, noun: string): string {
  const seen = new Set<string>();
  const scan = Math.min(items.length, 1000);
  for (let i = 0; i < scan && seen.size < 50; i++) {
    const p = (items[i] as Loose | null)?.properties;
    if (p !== null && typeof p === 'object' && !Array.isArray(p)) for (const k of Object.keys(p)) seen.add(k);
  }
  return propertyListMessage(name, noun, [...seen]);
}

/** `no feature has the property "n"; properties found: …` with a did-you-mean for case-only differences. */
export function propertyListMessage(name: string, noun: string, found: string[]): string {
  const lower = name.toLowerCase();
  const near = found.find((k) => k.toLowerCase() === lower);
  const list = found.length === 0 ? 'none of them has any properties' : `properties found: ${found.slice(0, 8).map((k) => JSON.stringify(k)).join(', ')}${found.length > 8 ? ', …' : ''}`;
  return `no ${noun} has the property ${JSON.stringify(name)}; ${list}${near !== undefined ? ` (did you mean ${JSON.stringify(near)}? names are case-sensitive)` : ''}`;
}
