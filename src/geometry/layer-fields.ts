/**
 * The fixed field list of the hotspots and centres layers, and the writer that keeps each field's
 * type the same from run to run whatever the values, so a GIS that appends every night's layer to
 * one table never meets a field that changed type:
 *
 * - reals are always written with a decimal point (`243.0`, not `243`): GIS readers, GDAL among
 *   them, type a JSON number by how it is written, so a whole value would otherwise make the field
 *   an integer in one run and a real in the next;
 * - ids are always strings (`medoid_id`, `track_id`), but for `hotspot_id`, the hotspot's number
 *   in its run, which is always a whole number;
 * - every field is flat, one value per field, which GeoPackage, Shapefile and CSV can hold: the
 *   centre is `centre_lon` and `centre_lat`, and the counts by category (`count_by`) are one
 *   integer field per category value, `count_<value>`, present on every hotspot of a run (0 where
 *   the hotspot has none of them).
 *
 * The run summary keeps its own form (`centre` as a pair, `categories` as an object).
 */

/** A field's type as GIS formats know it. */
export type FieldType = 'integer' | 'real' | 'string' | 'datetime' | 'boolean';

export interface LayerField {
  name: string;
  type: FieldType;
  /** whether the value may be null */
  nullable: boolean;
  description: string;
}

/** Fields of every feature of the hotspots and centres layers, in the order they are written. */
export const HOTSPOT_FIELDS: readonly LayerField[] = [
  { name: 'hotspot_id', type: 'integer', nullable: false, description: "the hotspot's number in its run (1, 2, …)" },
  { name: 'track_id', type: 'string', nullable: true, description: "the hotspot's identity across runs; null outside stored datasets" },
  { name: 'count', type: 'integer', nullable: false, description: 'observations in the hotspot' },
  { name: 'core_count', type: 'integer', nullable: false, description: 'core observations' },
  { name: 'border_count', type: 'integer', nullable: false, description: 'border observations' },
  { name: 'weight', type: 'real', nullable: false, description: 'sum of the weight property, or the count' },
  { name: 'area_km2', type: 'real', nullable: false, description: 'area of the hull on the sphere, km²' },
  { name: 'density_per_km2', type: 'real', nullable: false, description: 'observations per km² of hull' },
  { name: 'weight_density_per_km2', type: 'real', nullable: false, description: 'weight per km² of hull' },
  { name: 'radius_m', type: 'real', nullable: false, description: 'root-mean-square ground distance of the members from the centre, metres' },
  { name: 'centre_lon', type: 'real', nullable: false, description: 'longitude of the centre (mean position on the sphere), degrees' },
  { name: 'centre_lat', type: 'real', nullable: false, description: 'latitude of the centre, degrees' },
  { name: 'medoid_id', type: 'string', nullable: false, description: "id of the member nearest the centre (the observation's own id; its input position when it has none)" },
  { name: 'first_observed_at', type: 'datetime', nullable: true, description: 'earliest observed_at among the members' },
  { name: 'last_observed_at', type: 'datetime', nullable: true, description: 'latest observed_at among the members' },
];

/**
 * Fields written after the fixed ones only in runs that asked for a Monte Carlo test or for
 * resampling (src/trust/assess.ts), on every hotspot of such a run. A dataset's nightly runs share
 * their settings, so a GIS appending them meets the same fields every night; a field that was
 * null in every run would be typed as text by GIS readers, which is why they are left out rather
 * than written as null.
 */
export const TRUST_FIELDS: readonly LayerField[] = [
  { name: 'p_value', type: 'real', nullable: false, description: 'Monte Carlo p-value under the run\'s null model' },
  { name: 'significant', type: 'boolean', nullable: false, description: 'whether p_value is at most the significance level' },
  { name: 'stability', type: 'real', nullable: false, description: 'mean Jaccard similarity with the best-matching hotspot over resamples, 0–1' },
];

/** The trust fields a run's hotspots carry (all of its hotspots carry the same ones). */
export function trustFieldsOf(hotspots: readonly Record<string, unknown>[]): LayerField[] {
  return TRUST_FIELDS.filter((f) => hotspots.some((h) => h[f.name] !== undefined && h[f.name] !== null));
}

/**
 * Fields a run writes on every one of its hotspots when its settings ask for them, after the fixed
 * fields and the trust fields, before the category counts: with `reference`, the hotspot's majority reference value
 * and its share of the members that have a value (null when none has one).
 */
export const OPTIONAL_HOTSPOT_FIELDS: readonly LayerField[] = [
  { name: 'reference_majority', type: 'string', nullable: true, description: "the most frequent value of the reference property among the members (ties: the first in code-unit order)" },
  { name: 'reference_share', type: 'real', nullable: true, description: 'share of the members with a reference value that have the majority value, 0–1' },
];

/** The optional fields a run's hotspots carry (those present on any of them), in their fixed order. */
export function optionalFieldsOf(hotspots: readonly Record<string, unknown>[]): LayerField[] {
  return OPTIONAL_HOTSPOT_FIELDS.filter((f) => hotspots.some((h) => Object.hasOwn(h, f.name)));
}

/**
 * Fields of every feature of the changes layer (GET /v1/datasets/{id}/changes as GeoJSON), in the
 * order they are written: the same names and types whatever transitions a pair of runs has. Fields
 * that do not apply to a transition are null (a survival's change on an emergence, say); `centre`
 * (the pair) is kept beside `centre_lon` and `centre_lat` for the map page.
 */
export const CHANGE_FIELDS: readonly LayerField[] = [
  { name: 'transition', type: 'string', nullable: false, description: 'emergence, survival, split, absorption or disappearance' },
  { name: 'run_id', type: 'string', nullable: false, description: 'the run the hull is from: the later one, or the earlier one for a disappearance' },
  { name: 'hotspot_id', type: 'integer', nullable: false, description: "the hotspot's number in that run" },
  { name: 'track_id', type: 'string', nullable: true, description: "the hotspot's track" },
  { name: 'from_track_ids', type: 'string', nullable: false, description: 'the tracks it came from in the earlier run, comma-separated (empty for an emergence)' },
  { name: 'count', type: 'integer', nullable: true, description: 'observations in the hotspot' },
  { name: 'area_km2', type: 'real', nullable: true, description: 'hull area, km²' },
  { name: 'density_per_km2', type: 'real', nullable: true, description: 'count per km² of hull' },
  { name: 'centre_lon', type: 'real', nullable: true, description: "longitude of the hotspot's centre" },
  { name: 'centre_lat', type: 'real', nullable: true, description: "latitude of the hotspot's centre" },
  { name: 'basis', type: 'string', nullable: true, description: 'members or hull: what the overlap was measured on (null for a disappearance)' },
  { name: 'overlap', type: 'real', nullable: true, description: "a split part's share of the old hotspot; otherwise the largest overlap with a hotspot it came from; null for emergences and disappearances" },
  { name: 'count_delta', type: 'real', nullable: true, description: 'survivals: new count minus old' },
  { name: 'count_ratio', type: 'real', nullable: true, description: 'survivals: new count over old (null when the old is 0)' },
  { name: 'area_delta_km2', type: 'real', nullable: true, description: 'survivals: new area minus old, km²' },
  { name: 'density_ratio', type: 'real', nullable: true, description: 'survivals: new density over old (null when the old is 0)' },
  { name: 'moved_m', type: 'real', nullable: true, description: 'survivals: distance between the old and the new centre, metres' },
  { name: 'shrink', type: 'boolean', nullable: false, description: 'survivals judged by the shrink rule' },
];

/** The JSON text of properties written field by field as `fields` declare them (reals with a decimal point, absent as null). */
export function fieldsText(props: Record<string, unknown>, fields: readonly LayerField[]): string {
  let s = '{';
  for (const field of fields) s += (s.length > 1 ? ',' : '') + JSON.stringify(field.name) + ':' + valueText(field, props[field.name]);
  return s + '}';
}

/** Prefix of the per-category count fields. */
export const CATEGORY_FIELD_PREFIX = 'count_';

/** Text of a real number that always carries a decimal point or an exponent (`1` → `1.0`). */
export function realText(x: number): string {
  if (!Number.isFinite(x)) throw new Error(`layer field: ${x} is not a finite number`);
  const s = JSON.stringify(x);
  return /^-?\d+$/.test(s) ? s + '.0' : s;
}

function valueText(field: LayerField, v: unknown): string {
  if (v === null || v === undefined) {
    if (!field.nullable) throw new Error(`layer field ${field.name}: a value is required`);
    return 'null';
  }
  switch (field.type) {
    case 'real':
      return realText(Number(v));
    case 'integer':
      if (!Number.isInteger(v)) throw new Error(`layer field ${field.name}: ${String(v)} is not a whole number`);
      return String(v);
    case 'string':
    case 'datetime':
      return JSON.stringify(String(v));
    case 'boolean':
      if (typeof v !== 'boolean') throw new Error(`layer field ${field.name}: ${String(v)} is not true or false`);
      return String(v);
  }
}

/** The category values of a run's hotspots (from their `categories` objects), sorted. */
export function categoryNames(hotspots: readonly Record<string, unknown>[]): string[] {
  const names = new Set<string>();
  for (const h of hotspots) {
    const c = h['categories'];
    if (c && typeof c === 'object') for (const k of Object.keys(c)) names.add(k);
  }
  return [...names].sort();
}

/** The fields of a run's hotspots and centres layers: the fixed ones, the trust fields it has, the optional ones asked for, then one count per category. */
export function hotspotLayerFields(categories: readonly string[], trust: readonly LayerField[] = [], optional: readonly LayerField[] = []): LayerField[] {
  return [
    ...HOTSPOT_FIELDS,
    ...trust,
    ...optional,
    ...categories.map((c): LayerField => ({ name: CATEGORY_FIELD_PREFIX + c, type: 'integer', nullable: false, description: `members whose count_by property is ${JSON.stringify(c)}` })),
  ];
}

/** Each field's name as JSON text with its colon, made once. */
const keysOf = (fields: readonly LayerField[]): string[] => fields.map((f) => JSON.stringify(f.name) + ':');
const HOTSPOT_KEYS = keysOf(HOTSPOT_FIELDS);
const TRUST_KEYS = keysOf(TRUST_FIELDS);
const OPTIONAL_KEYS = keysOf(OPTIONAL_HOTSPOT_FIELDS);

/**
 * The JSON text of a hotspot's layer properties, built from the hotspot's figures as the run
 * computed them (`centre` pair, `categories` object, `medoid_id`), in HOTSPOT_FIELDS order.
 * @param categories the run's category values (categoryNames), the same list for every hotspot
 */
export function hotspotPropertiesText(props: Record<string, unknown>, categories: readonly string[]): string {
  const centre = props['centre'] as [number, number];
  // the centre pair written as two fields; the other fields read straight from props (no copy)
  const flat = (name: string): unknown => (name === 'centre_lon' ? centre[0] : name === 'centre_lat' ? centre[1] : props[name]);
  let s = '{';
  for (let k = 0; k < HOTSPOT_FIELDS.length; k++) {
    const field = HOTSPOT_FIELDS[k]!;
    s += (k > 0 ? ',' : '') + HOTSPOT_KEYS[k] + valueText(field, flat(field.name));
  }
  for (let k = 0; k < TRUST_FIELDS.length; k++) {
    const field = TRUST_FIELDS[k]!;
    const v = flat(field.name);
    if (v !== undefined && v !== null) s += ',' + TRUST_KEYS[k] + valueText(field, v);
  }
  for (let k = 0; k < OPTIONAL_HOTSPOT_FIELDS.length; k++) {
    const field = OPTIONAL_HOTSPOT_FIELDS[k]!;
    if (Object.hasOwn(props, field.name)) s += ',' + OPTIONAL_KEYS[k] + valueText(field, props[field.name]);
  }
  const counts = (props['categories'] ?? {}) as Record<string, number>;
  for (const c of categories) s += ',' + JSON.stringify(CATEGORY_FIELD_PREFIX + c) + ':' + String(Object.hasOwn(counts, c) ? counts[c] : 0);
  return s + '}';
}

/**
 * The JSON text of flat properties in their own order, the fields named in `reals` written as
 * reals (with a decimal point) when they are numbers; for layers with fields of their own (the
 * published layers).
 */
export function propertiesText(props: Record<string, unknown>, reals: ReadonlySet<string>): string {
  let s = '{';
  for (const [k, v] of Object.entries(props)) {
    if (v === undefined) continue;
    s += (s.length > 1 ? ',' : '') + JSON.stringify(k) + ':' + (reals.has(k) && typeof v === 'number' ? realText(v) : JSON.stringify(v));
  }
  return s + '}';
}

/** The category counts of a hotspot's layer properties (`count_<value>` fields), by value. */
export function categoryCounts(props: Record<string, unknown>): Record<string, number> | undefined {
  if (props['categories'] && typeof props['categories'] === 'object') return props['categories'] as Record<string, number>;
  let out: Record<string, number> | undefined;
  for (const [k, v] of Object.entries(props)) if (k.startsWith(CATEGORY_FIELD_PREFIX) && typeof v === 'number') (out ??= {})[k.slice(CATEGORY_FIELD_PREFIX.length)] = v;
  return out;
}

/** A JSON Schema (draft 2020-12) of a layer's feature properties, for `describedby` links. */
export function propertiesJsonSchema(fields: readonly LayerField[], title: string): Record<string, unknown> {
  const properties: Record<string, unknown> = {};
  for (const f of fields) {
    const base =
      f.type === 'real'
        ? { type: 'number' }
        : f.type === 'integer'
          ? { type: 'integer' }
          : f.type === 'boolean'
            ? { type: 'boolean' }
            : f.type === 'datetime'
              ? { type: 'string', format: 'date-time' }
              : { type: 'string' };
    properties[f.name] = { ...base, ...(f.nullable ? { type: [base.type, 'null'] } : {}), description: f.description, 'x-roost-field-type': f.type };
  }
  return {
    $schema: 'https://json-schema.org/draft/2020-12/schema',
    title,
    type: 'object',
    required: fields.map((f) => f.name),
    properties,
  };
}
