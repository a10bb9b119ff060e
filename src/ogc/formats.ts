/**
 * A layer's features in other formats than GeoJSON, for big layers and for tools that take
 * files: FlatGeobuf (written with the `flatgeobuf` package, streamable: header, then one feature
 * at a time, no spatial index) and CSV (RFC 4180).
 *
 * Both need a fixed list of typed columns, where GeoJSON lets each feature say its own:
 * - the hotspots and centres layers have their declared fields (src/geometry/layer-fields.ts),
 *   the same from run to run;
 * - the points and noise layers have `id` (the observation's id, when features carry one),
 *   `hotspot_id`, `role` and the observations' own properties, typed from every feature of the
 *   layer: all whole numbers → integer, all numbers → real, all true/false → boolean, all RFC 3339
 *   date-times → date-time, all text → string; anything else (mixed, arrays, objects) → JSON text.
 *
 * CSV: point layers start with `lon,lat` (the point's position in CRS84); other layers (the
 * hotspot hulls) start with `wkt`, the geometry as Well-Known Text, which GDAL and spreadsheets
 * read as text. Reals always carry a decimal point (`1.0`), empty cells are nulls, and JSON text
 * stands for nested values.
 */
import { ColumnType } from 'flatgeobuf/lib/mjs/flat-geobuf/column-type.js';
import { GeometryType } from 'flatgeobuf/lib/mjs/flat-geobuf/geometry-type.js';
import { magicbytes } from 'flatgeobuf/lib/mjs/constants.js';
import { buildFeature } from 'flatgeobuf/lib/mjs/generic/feature.js';
import { Column as FgbColumn } from 'flatgeobuf/lib/mjs/flat-geobuf/column.js';
import { Crs } from 'flatgeobuf/lib/mjs/flat-geobuf/crs.js';
import { Header } from 'flatgeobuf/lib/mjs/flat-geobuf/header.js';
import { Builder } from 'flatbuffers';
import { parseGeometry } from 'flatgeobuf/lib/mjs/geojson/geometry.js';
import type { ColumnMeta } from 'flatgeobuf/lib/mjs/column-meta.js';
import type { HeaderMeta } from 'flatgeobuf/lib/mjs/header-meta.js';
import { realText, type FieldType, type LayerField } from '../geometry/layer-fields.js';

export type ColumnKind = FieldType | 'json';

export interface Column {
  name: string;
  type: ColumnKind;
}

interface Geometry {
  type: string;
  coordinates: unknown;
}

interface ParsedFeature {
  id?: string | number;
  geometry: Geometry | null;
  properties: Record<string, unknown> | null;
}

export const LAYER_FORMATS = ['geojson', 'fgb', 'csv'] as const;
export type LayerFormat = (typeof LAYER_FORMATS)[number];

export const MEDIA_TYPES: Record<LayerFormat, string> = {
  geojson: 'application/geo+json',
  fgb: 'application/flatgeobuf',
  csv: 'text/csv; charset=utf-8',
};

/** The format of a layer answer: `f` first, else the first of the Accept header's types we serve. */
export function layerFormat(f: unknown, accept: string | undefined): LayerFormat {
  if (typeof f === 'string') return f as LayerFormat; // checked against the enum by the route schema
  const types = (accept ?? '')
    .toLowerCase()
    .split(',')
    .map((t) => t.split(';')[0]!.trim());
  for (const t of types) {
    if (t === 'application/flatgeobuf') return 'fgb';
    if (t === 'text/csv') return 'csv';
    if (t === 'application/geo+json' || t === 'application/json') return 'geojson';
  }
  return 'geojson';
}

/** RFC 3339 date-times, as the GeoJSON reader of GDAL also takes them for DateTime fields. */
const DATE_TIME = /^\d{4}-\d{2}-\d{2}T\d{2}:\d{2}:\d{2}(\.\d+)?(Z|[+-]\d{2}:\d{2})$/;

/** The type of a set of values seen for one property (nulls left out). */
function typeOf(values: unknown[]): ColumnKind {
  const seen = values.filter((v) => v !== null && v !== undefined);
  if (seen.length === 0) return 'string';
  if (seen.every((v) => typeof v === 'number')) return seen.every((v) => Number.isInteger(v)) ? 'integer' : 'real';
  if (seen.every((v) => typeof v === 'boolean')) return 'boolean';
  if (seen.every((v) => typeof v === 'string')) return seen.every((v) => DATE_TIME.test(v as string)) ? 'datetime' : 'string';
  return 'json';
}

/** The columns of a layer: its declared fields, or (points and noise) inferred from every feature. */
export function layerColumns(features: readonly ParsedFeature[], fixed: readonly LayerField[] | null): Column[] {
  if (fixed !== null) return fixed.map((f) => ({ name: f.name, type: f.type }));
  const names: string[] = [];
  const values = new Map<string, unknown[]>();
  for (const f of features) {
    for (const [k, v] of Object.entries(f.properties ?? {})) {
      let list = values.get(k);
      if (list === undefined) {
        values.set(k, (list = []));
        names.push(k);
      }
      list.push(v);
    }
  }
  const columns: Column[] = [];
  if (!values.has('id') && features.some((f) => f.id !== undefined)) columns.push({ name: 'id', type: 'string' });
  for (const n of names) columns.push({ name: n, type: n === 'hotspot_id' ? 'integer' : typeOf(values.get(n)!) });
  return columns;
}

/** A feature's value for a column; `id` comes from the feature's own id when no property has that name. */
function valueOf(f: ParsedFeature, c: Column): unknown {
  const props = f.properties ?? {};
  if (c.name === 'id' && !('id' in props)) return f.id === undefined ? null : String(f.id);
  const v = props[c.name];
  return v === undefined ? null : v;
}

/** Whether every feature is a point (CSV then writes lon,lat). */
export function allPoints(features: readonly ParsedFeature[]): boolean {
  return features.every((f) => f.geometry !== null && f.geometry.type === 'Point');
}

// --- CSV ---

function csvCell(text: string): string {
  return /[",\r\n]/.test(text) ? `"${text.replace(/"/g, '""')}"` : text;
}

function csvValue(v: unknown, type: ColumnKind): string {
  if (v === null) return '';
  switch (type) {
    case 'real':
      return typeof v === 'number' ? realText(v) : csvCell(JSON.stringify(v));
    case 'integer':
    case 'boolean':
      return typeof v === 'object' ? csvCell(JSON.stringify(v)) : String(v);
    case 'string':
    case 'datetime':
      return csvCell(typeof v === 'string' ? v : JSON.stringify(v));
    case 'json':
      return csvCell(JSON.stringify(v));
  }
}

function wktPositions(ring: number[][]): string {
  return ring.map((p) => `${p[0]} ${p[1]}`).join(', ');
}

/** Well-Known Text of a GeoJSON geometry (OGC 06-103r4 §7): the kinds a layer holds. */
export function wkt(g: Geometry | null): string {
  if (g === null) return '';
  const c = g.coordinates as never;
  switch (g.type) {
    case 'Point':
      return `POINT (${(c as number[])[0]} ${(c as number[])[1]})`;
    case 'MultiPoint':
      return `MULTIPOINT (${(c as number[][]).map((p) => `(${p[0]} ${p[1]})`).join(', ')})`;
    case 'LineString':
      return `LINESTRING (${wktPositions(c)})`;
    case 'MultiLineString':
      return `MULTILINESTRING (${(c as number[][][]).map((l) => `(${wktPositions(l)})`).join(', ')})`;
    case 'Polygon':
      return `POLYGON (${(c as number[][][]).map((r) => `(${wktPositions(r)})`).join(', ')})`;
    case 'MultiPolygon':
      return `MULTIPOLYGON (${(c as number[][][][]).map((p) => `(${p.map((r) => `(${wktPositions(r)})`).join(', ')})`).join(', ')})`;
    default:
      throw new Error(`layer geometry: ${g.type} has no WKT form here`);
  }
}

/** CSV lines of a layer, the header first; each ends with CRLF (RFC 4180). */
export function* csvLines(features: readonly ParsedFeature[], columns: readonly Column[]): Generator<string> {
  const points = allPoints(features);
  const geometryHead = points ? ['lon', 'lat'] : ['wkt'];
  yield [...geometryHead, ...columns.map((c) => csvCell(c.name))].join(',') + '\r\n';
  for (const f of features) {
    const geometry = points ? [String((f.geometry!.coordinates as number[])[0]), String((f.geometry!.coordinates as number[])[1])] : [csvCell(wkt(f.geometry))];
    yield [...geometry, ...columns.map((c) => csvValue(valueOf(f, c), c.type))].join(',') + '\r\n';
  }
}

// --- FlatGeobuf ---

const FGB_TYPES: Record<ColumnKind, ColumnType> = {
  real: ColumnType.Double,
  integer: ColumnType.Long,
  string: ColumnType.String,
  datetime: ColumnType.DateTime,
  boolean: ColumnType.Bool,
  json: ColumnType.Json,
};

function fgbValue(v: unknown, type: ColumnKind): unknown {
  if (v === null) return null;
  switch (type) {
    case 'real':
      return typeof v === 'number' ? v : null;
    case 'integer':
      return typeof v === 'number' && Number.isInteger(v) ? v : null;
    case 'boolean':
      return typeof v === 'boolean' ? v : null;
    case 'string':
    case 'datetime':
      return typeof v === 'string' ? v : JSON.stringify(v);
    case 'json':
      return v;
  }
}

function geometryTypeOf(features: readonly ParsedFeature[]): GeometryType {
  const kinds = new Set(features.map((f) => f.geometry?.type ?? 'none'));
  if (kinds.size !== 1) return GeometryType.Unknown;
  const only = [...kinds][0]!;
  const types: Record<string, GeometryType> = {
    Point: GeometryType.Point,
    MultiPoint: GeometryType.MultiPoint,
    LineString: GeometryType.LineString,
    MultiLineString: GeometryType.MultiLineString,
    Polygon: GeometryType.Polygon,
    MultiPolygon: GeometryType.MultiPolygon,
  };
  return types[only] ?? GeometryType.Unknown;
}

/**
 * The FlatGeobuf header: as the package's own `buildHeader`, with the layer's name (which GDAL
 * shows and gives the layer it copies) where that one always writes `L1`.
 */
function buildHeader(meta: HeaderMeta, name: string, crsCode: number): Uint8Array {
  const builder = new Builder();
  const columns = (meta.columns ?? []).map((c) => {
    const n = builder.createString(c.name);
    FgbColumn.startColumn(builder);
    FgbColumn.addName(builder, n);
    FgbColumn.addType(builder, c.type);
    return FgbColumn.endColumn(builder);
  });
  const columnsOffset = columns.length > 0 ? Header.createColumnsVector(builder, columns) : 0;
  const nameOffset = builder.createString(name);
  Crs.startCrs(builder);
  Crs.addCode(builder, crsCode);
  const crsOffset = Crs.endCrs(builder);
  Header.startHeader(builder);
  Header.addCrs(builder, crsOffset);
  Header.addFeaturesCount(builder, BigInt(meta.featuresCount));
  Header.addGeometryType(builder, meta.geometryType);
  Header.addIndexNodeSize(builder, 0);
  if (columnsOffset) Header.addColumns(builder, columnsOffset);
  Header.addName(builder, nameOffset);
  builder.finishSizePrefixed(Header.endHeader(builder));
  return builder.asUint8Array();
}

/**
 * FlatGeobuf of a layer, as chunks: the magic bytes and header, then one chunk per feature. CRS
 * EPSG:4326 (GDAL reads FlatGeobuf positions longitude first, as CRS84). Features without a
 * geometry are written without one.
 */
export function* flatGeobufChunks(features: readonly ParsedFeature[], columns: readonly Column[], name: string): Generator<Uint8Array> {
  const geometryType = geometryTypeOf(features);
  // whole numbers as 32-bit integers (GDAL's Integer, as it types them from GeoJSON) unless some value needs 64 bits
  const wide = (c: Column): boolean => features.some((f) => {
    const v = valueOf(f, c);
    return typeof v === 'number' && (v > 2147483647 || v < -2147483648);
  });
  const meta: HeaderMeta = {
    geometryType,
    columns: columns.map(
      (c): ColumnMeta => ({ name: c.name, type: c.type === 'integer' && !wide(c) ? ColumnType.Int : FGB_TYPES[c.type], title: null, description: null, width: -1, precision: -1, scale: -1, nullable: true, unique: false, primary_key: false }),
    ),
    envelope: null,
    featuresCount: features.length,
    indexNodeSize: 0,
    crs: null,
    title: null,
    description: null,
    metadata: null,
  };
  const header = buildHeader(meta, name, 4326);
  const head = new Uint8Array(magicbytes.length + header.length);
  head.set(magicbytes);
  head.set(header, magicbytes.length);
  yield head;
  for (const f of features) {
    const props: Record<string, unknown> = {};
    for (const c of columns) props[c.name] = fgbValue(valueOf(f, c), c.type);
    const parsed = f.geometry === null ? { xy: [], type: geometryType } : parseGeometry(f.geometry as never);
    yield buildFeature(parsed as never, props as never, meta);
  }
}
