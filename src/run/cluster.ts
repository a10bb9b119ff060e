/**
 * The whole job on one input: read, filter, index, cluster, figures, GeoJSON layers. The command
 * line and the HTTP service both call `clusterInput`, so the same input and settings give the same
 * bytes everywhere.
 */
import { dbscan } from '../core/dbscan.js';
import { suggestEps } from '../core/kdistance.js';
import { extractDbscan, extractXi, optics, type OpticsResult } from '../core/optics.js';
import { SphereIndex } from '../core/sphere-index.js';
import { ROLE_CORE, ROLE_NAMES, type Clustering, type PointSet } from '../core/types.js';
import { clusteringWarnings, type ClusteringWarning } from '../core/warnings.js';
import { geometryAreaKm2 } from '../geometry/area.js';
import type { ClarkEvans } from '../geometry/clark-evans.js';
import { hotspotFigures, resultFigures, type HotspotFigures, type ResultFigures } from '../geometry/figures.js';
import {
  bboxOf,
  bboxOfPositions,
  coordText,
  writeCoord,
  featureCollectionChunks,
  featureCollectionString,
  featureString,
  featureStringWithProperties,
} from '../geometry/geojson.js';
import { hotspotHull, HullSpreadError, type HullGeometry } from '../geometry/hull.js';
import { startNearestNeighbours } from '../geometry/nearest-parallel.js';
import { categoryNames, hotspotPropertiesText } from '../geometry/layer-fields.js';
import { roundDecimals, roundMeters, roundSignificant } from '../geometry/rounding.js';
import { applyFilter } from '../ingest/filter.js';
import { readObservations, type InputFormat } from '../ingest/read.js';
import type { InputFeature, Observations } from '../ingest/types.js';
import { parseSpan, type FeatureSpans, type SpannedObservations } from '../ingest/geojson-bytes.js';
import type { ByteWindow, InputFile } from '../ingest/source.js';
import { csvRowNeed, writeCsvId, writeCsvMembers, type CsvObservations, type CsvRows } from '../ingest/csv-bytes.js';
import { CAUTIONS } from './cautions.js';
import { SettingsError, settingsRecord, type ClusterSettings } from './settings.js';
import { ROOST_VERSION } from './version.js';
import type { LayerName } from './layers.js';
import { validationBlock, validationFigures } from './validation.js';

export type { InputFormat };

/** The stages timed in every summary, in order. */
export const STAGES = ['read', 'index', 'cluster', 'figures', 'write'] as const;
export type Stage = (typeof STAGES)[number];

/**
 * One result layer: a GeoJSON FeatureCollection produced on demand in chunks of about 64 KiB, so
 * a million-point layer can be written to a file or a socket without ever being one string (and
 * without the garbage collector tracing a million kept feature strings).
 */
export class Layer {
  /**
   * @param produce the text in chunks
   * @param produceBytes the same text as UTF-8 bytes in chunks, where the layer can write bytes
   *   without building strings (points and noise read by the byte reader); absent: chunks encoded
   */
  constructor(
    private readonly produce: () => Iterable<string>,
    private readonly produceBytes?: () => Iterable<Uint8Array>,
  ) {}
  /** The text in chunks; every call starts again from the beginning. */
  chunks(): Iterable<string> {
    return this.produce();
  }
  /** Whether byteChunks() writes the bytes itself (in chunks of about a MiB) rather than encoding chunks(). */
  get writesBytes(): boolean {
    return this.produceBytes !== undefined;
  }
  /** The text as UTF-8 bytes in chunks (the bytes of chunks(), for files and sockets); every call starts again. */
  byteChunks(): Iterable<Uint8Array> {
    if (this.produceBytes !== undefined) return this.produceBytes();
    const produce = this.produce;
    return (function* () {
      for (const c of produce()) yield Buffer.from(c, 'utf8');
    })();
  }
  /** The whole text. */
  text(): string {
    const parts: string[] = [];
    for (const c of this.produce()) parts.push(c);
    return parts.join('');
  }
  /** The text in pieces of about `chars` characters or more (whole chunks joined), for storing. */
  pieces(chars: number): string[] {
    const out: string[] = [];
    let parts: string[] = [];
    let n = 0;
    for (const c of this.produce()) {
      parts.push(c);
      n += c.length;
      if (n >= chars) {
        out.push(parts.join(''));
        parts = [];
        n = 0;
      }
    }
    if (parts.length > 0 || out.length === 0) out.push(parts.join(''));
    return out;
  }
  /** The whole text as UTF-8 bytes in their own ArrayBuffer (safe to transfer to another thread). */
  bytes(): Buffer {
    const parts: Buffer[] = [];
    let total = 0;
    for (const c of this.produce()) {
      const b = Buffer.from(c, 'utf8');
      parts.push(b);
      total += b.length;
    }
    const out = Buffer.allocUnsafeSlow(total);
    let at = 0;
    for (const b of parts) at += b.copy(out, at);
    return out;
  }
}


/** One hotspot of a result, for callers that store or track hotspots (not only write files). */
export interface ResultHotspot {
  /** 1-based number within the run */
  hotspotId: number;
  /** input positions (indices into the clustered observations) of all members, ascending */
  members: Int32Array;
  /** input positions of the core members, ascending */
  coreMembers: Int32Array;
  hull: HullGeometry;
  figures: HotspotFigures;
  /**
   * The properties written on this hotspot's hull and centre features. Layers are produced on
   * demand from these objects, so a caller may fill in `track_id` (present, null by default)
   * before producing them.
   */
  properties: Record<string, unknown>;
}

export interface ClusterResult {
  /** figures, parameters, version, warnings, cautions and per-stage timings */
  summary: Record<string, unknown>;
  /** GeoJSON FeatureCollections, byte-identical for the same input and settings */
  layers: Record<LayerName, Layer>;
  /** the hotspots in number order */
  hotspots: ResultHotspot[];
  /** the observations that were clustered (after filters), in input order */
  observations: Observations;
}

export interface ClusterHooks {
  /** called at the start of each stage (done = 0) and now and then within long stages */
  onProgress?: (stage: Stage, done: number) => void;
  /** aborts between stages and within long loops */
  signal?: AbortSignal;
  /**
   * false leaves the Clark–Evans test out of the summary (it says so): its nearest-neighbour pass
   * over every observation and the hull of all of them are most of the figures stage at a million
   * points, and an answer that is one layer alone carries no summary. Default true.
   */
  clarkEvans?: boolean;
  /**
   * Offered the points and noise layers as soon as the clustering is known, before the figures,
   * when they can be written from the input's bytes alone (see PointLayersJob): a caller may write
   * them elsewhere (the command line and stored runs, in a worker thread) while the figures are
   * worked out. The result's own `points` and `noise` layers are made as always.
   */
  onPointLayers?: (job: PointLayersJob) => void;
}

/**
 * What the points and noise layers are written from when their features come from the input's
 * bytes (the byte readers' spans), with nothing of the run's but the clustering: the same bytes
 * as the result's layers, by `pointLayersJobBytes`, wherever it runs. Holds typed arrays and
 * numbers only, besides the source, so it can be sent to a worker thread.
 */
export interface PointLayersJob {
  rows: PointRows;
  /** each layer's text up to its first feature */
  pointsHead: string;
  noiseHead: string;
  /** the features as spans of a GeoJSON input (or text sequence), or as rows of a CSV input whose kept rows are all written from their cells */
  spans?: FeatureSpans;
  csvRows?: CsvRows;
  /** or as stored feature texts kept as bytes (a stored run) */
  texts?: FeatureByteSource;
}

/**
 * The bytes of the points layer (or, noiseOnly, the noise layer) of a job, in chunks of about 1
 * MiB. With `reuse`, every chunk is written into the memory of the one before (for a caller that
 * is done with each chunk before it asks for the next, such as a file written chunk by chunk), so
 * a layer of hundreds of MiB leaves no chunks behind for the garbage collector.
 */
export function pointLayersJobBytes(job: PointLayersJob, noiseOnly: boolean, reuse = false): Iterable<Uint8Array> {
  const head = noiseOnly ? job.noiseHead : job.pointsHead;
  if (job.spans !== undefined) return pointLayerBytes(head, job.spans, job.rows, NO_EXTRA, noiseOnly, reuse);
  if (job.csvRows !== undefined) return csvPointLayerBytes(head, job.csvRows, [], job.rows, NO_EXTRA, noiseOnly, reuse);
  if (job.texts !== undefined) return storedPointLayerBytes(head, job.texts, job.rows, NO_EXTRA, noiseOnly, reuse);
  throw new Error('a point layers job needs spans, CSV rows or stored texts');
}

const NO_EXTRA = (): string => '';

const round = roundDecimals;
const sig = roundSignificant;

class Timer {
  readonly ms: Record<string, number> = {};
  private t = performance.now();
  private current: Stage | null = null;
  constructor(private readonly hooks: ClusterHooks) {}
  start(stage: Stage): void {
    this.stop();
    this.hooks.signal?.throwIfAborted();
    this.current = stage;
    this.t = performance.now();
    this.hooks.onProgress?.(stage, 0);
  }
  stop(): void {
    if (this.current) this.ms[this.current] = round((this.ms[this.current] ?? 0) + performance.now() - this.t, 1);
    this.current = null;
  }
}

/** Picks eps when the settings ask for `auto`: the knee of the k-distance curve. */
function resolveEps(points: PointSet, settings: ClusterSettings): number {
  if (!settings.epsAuto) return settings.epsMeters;
  const suggestion = suggestEps(points, Math.max(2, settings.minPoints));
  if (suggestion.epsMeters === null) {
    throw new SettingsError('eps', `auto found no knee in the k-distance curve (${suggestion.message}); give eps in metres`);
  }
  return suggestion.epsMeters;
}

/**
 * Default smallest ξ hotspot: min_points, or 0.5 % of the observations when that is larger. The
 * ragged reachability of real patches otherwise splits them into many tiny ξ clusters (our choice,
 * no source).
 */
export function defaultMinClusterSize(n: number, minPoints: number): number {
  return Math.max(minPoints, 2, Math.ceil(DEFAULT_MIN_CLUSTER_SHARE * n));
}

/** The share of the observations that makes the default smallest ξ hotspot when larger than min_points. */
export const DEFAULT_MIN_CLUSTER_SHARE = 0.005;

/** OPTICS searches up to this many times eps unless optics_max_eps is given. */
export const DEFAULT_OPTICS_MAX_EPS_FACTOR = 3;

function runMethod(
  points: PointSet,
  index: SphereIndex,
  epsMeters: number,
  settings: ClusterSettings,
  progress: (d: number) => void,
): { clustering: Clustering; ordering: OpticsResult | null } {
  if (settings.method === 'dbscan') {
    return { clustering: dbscan(points, { epsMeters, minPoints: settings.minPoints, index, onProgress: progress }), ordering: null };
  }
  const maxEps = settings.opticsMaxEpsMeters ?? DEFAULT_OPTICS_MAX_EPS_FACTOR * epsMeters;
  const ordering = optics(points, { maxEpsMeters: maxEps, minPoints: settings.minPoints, onProgress: progress });
  if (settings.opticsExtraction === 'eps') return { clustering: extractDbscan(ordering, Math.min(epsMeters, maxEps)), ordering };
  return {
    clustering: extractXi(ordering, { xi: settings.xi, minClusterSize: settings.minClusterSize ?? defaultMinClusterSize(points.n, settings.minPoints) }).clustering,
    ordering,
  };
}

/**
 * The clustering alone (no hulls, figures or layers) of a point set at an eps already resolved,
 * with the settings' method: what the Monte Carlo test and the resampling repeat many times.
 */
export function clusterPoints(points: PointSet, epsMeters: number, settings: ClusterSettings): Clustering {
  const index = new SphereIndex(points, epsMeters);
  return runMethod(points, index, epsMeters, settings, () => undefined).clustering;
}

/**
 * The members OPTICS adds to each point feature, as JSON text (leading comma): `optics_order`,
 * the point's 0-based position in the cluster ordering, and `reachability_m`, its reachability
 * distance in metres (null where undefined: the first point of each part of the ordering, and
 * points reached from no core point within optics_max_eps). Together they draw the reachability
 * plot: bars of height reachability_m in optics_order.
 */
function opticsMembers(ordering: OpticsResult): (i: number) => string {
  const position = new Int32Array(ordering.order.length);
  for (let k = 0; k < ordering.order.length; k++) position[ordering.order[k]] = k;
  return (i) => {
    const r = ordering.reachability[i];
    return `,"optics_order":${position[i]},"reachability_m":${Number.isFinite(r) ? roundMeters(r) : 'null'}`;
  };
}

/** Members of every hotspot as one CSR layout: hotspot h owns members[start[h] .. start[h+1]). */
function membersByHotspot(c: Clustering): { start: Int32Array; members: Int32Array } {
  const start = new Int32Array(c.count + 1);
  for (let i = 0; i < c.labels.length; i++) if (c.labels[i] >= 0) start[c.labels[i] + 1]++;
  for (let h = 0; h < c.count; h++) start[h + 1] += start[h];
  const fill = start.slice(0, c.count);
  const members = new Int32Array(start[c.count]);
  for (let i = 0; i < c.labels.length; i++) if (c.labels[i] >= 0) members[fill[c.labels[i]]++] = i;
  return { start, members };
}

function categoryValues(features: InputFeature[], property: string): (string | null)[] {
  const out = new Array<string | null>(features.length);
  for (let i = 0; i < features.length; i++) {
    const v = features[i].properties?.[property];
    out[i] = v === undefined || v === null ? null : String(v);
  }
  return out;
}

function hotspotProperties(f: HotspotFigures, medoidId: string): Record<string, unknown> {
  return {
    hotspot_id: f.hotspot + 1,
    track_id: null,
    count: f.count,
    core_count: f.coreCount,
    border_count: f.borderCount,
    weight: sig(f.weight),
    area_km2: sig(f.areaKm2),
    density_per_km2: sig(f.densityPerKm2),
    weight_density_per_km2: sig(f.weightDensityPerKm2),
    radius_m: roundMeters(f.radiusMeters),
    centre: [round(f.centre[0], 7), round(f.centre[1], 7)],
    medoid_id: medoidId,
    first_observed_at: f.firstObservedAt,
    last_observed_at: f.lastObservedAt,
    ...(f.categories ? { categories: f.categories } : {}),
  };
}

/**
 * The point feature written for an input observation in the points and noise layers: its own
 * properties with `hotspot_id` and `role` added (replacing input properties of those names).
 * The two members are appended to the properties' JSON text rather than to a copied object: a
 * million spread copies cost more than the whole clustering. The feature's id is kept; an id of
 * null, which the reader takes for no id, is left out.
 */
export function pointFeature(f: InputFeature, hotspot: number, role: number, extra = ''): string {
  const own = f.properties;
  const added = `"hotspot_id":${hotspot >= 0 ? hotspot + 1 : 'null'},"role":"${ROLE_NAMES[role]}"${extra}}`;
  let props: string;
  if (own === null || own === undefined) props = '{' + added;
  else if (Object.hasOwn(own, 'hotspot_id') || Object.hasOwn(own, 'role')) {
    props = JSON.stringify({ ...own, hotspot_id: hotspot >= 0 ? hotspot + 1 : null, role: ROLE_NAMES[role], ...(extra ? (JSON.parse(`{${extra.slice(1)}}`) as object) : {}) });
  } else {
    const text = JSON.stringify(own);
    props = text.length === 2 ? '{' + added : text.slice(0, -1) + ',' + added;
  }
  // an id of null is read as no id (src/ingest/geojson.ts) and written as none
  const id = (f.id as string | number | null | undefined) ?? undefined;
  return featureStringWithProperties({ type: 'Point', coordinates: f.geometry.coordinates }, props, id);
}

const utf8Slice = Buffer.prototype.utf8Slice as (this: Uint8Array, start: number, end: number) => string;
const latin1Slice = Buffer.prototype.latin1Slice as (this: Uint8Array, start: number, end: number) => string;

/**
 * pointFeature for input feature `i` read by the byte reader, byte for byte the same: the id and
 * the properties are copied from the input where their text is already what JSON.stringify
 * writes (spans.verbatim), the feature is parsed from its span otherwise.
 */
export function pointFeatureFromSpans(spans: FeatureSpans, i: number, lon: number, lat: number, hotspot: number, role: number, extra = '', w: ByteWindow = spans.source.window()): string {
  if (spans.verbatim[i] !== 1) return pointFeature(parseSpan(spans, i, w), hotspot, role, extra);
  w.need(spans.featureStart[i]!, spans.featureEnd[i]!);
  const b = w.buf;
  const is = spans.idStart[i]! - w.base;
  const ie = spans.idEnd[i]! - w.base;
  // a string id is copied; a number is written as JSON.stringify writes its value (1.0 → 1)
  const id = spans.idEnd[i] === 0 ? '' : b[is] === 34 ? ',"id":' + utf8Slice.call(b, is, ie) : ',"id":' + JSON.stringify(Number(latin1Slice.call(b, is, ie)));
  const alt = spans.altitude === null ? NaN : spans.altitude[i]!;
  const position = alt === alt ? coordText(lon) + ',' + coordText(lat) + ',' + coordText(alt) : coordText(lon) + ',' + coordText(lat);
  const added = `"hotspot_id":${hotspot >= 0 ? hotspot + 1 : 'null'},"role":"${ROLE_NAMES[role]}"${extra}}`;
  const ps = spans.propertiesStart[i]! - w.base;
  const pe = spans.propertiesEnd[i]! - w.base;
  const properties = pe - ps <= 2 ? '{' + added : utf8Slice.call(b, ps, pe - 1) + ',' + added;
  return '{"type":"Feature"' + id + ',"geometry":{"type":"Point","coordinates":[' + position + ']},"properties":' + properties + '}';
}

/** What a point layer's bytes are written from: the clustered rows and the input position of each. */
export interface PointRows {
  n: number;
  lon: Float64Array;
  lat: Float64Array;
  kept: Int32Array;
  labels: Int32Array;
  roles: Uint8Array;
}

/**
 * Writes one point feature of row `i` at `pos` of `out` and returns where it ends, or -1 (writing
 * nothing) when it needs more than `room` bytes.
 */
type PointWriter = (i: number, out: Buffer, pos: number, room: number) => number;

/**
 * A point layer's bytes in chunks of about 1 MiB: `head`, the features of the rows (all, or the
 * noise only) as `write` puts them, and the closing `]}`. A feature that does not fit in what is
 * left of a chunk starts the next one, with room at least `need(i)`; with `reuse` (see
 * pointLayersJobBytes) it is written into the memory of the chunk before when that is large enough.
 */
function* pointLayerChunks(head: string, rows: PointRows, noiseOnly: boolean, write: PointWriter, need: (i: number) => number, reuse: boolean): Generator<Uint8Array> {
  const CHUNK = 1 << 20;
  let out = Buffer.allocUnsafe(Math.max(CHUNK, Buffer.byteLength(head) + 2));
  let pos = out.write(head, 0, 'utf8');
  let first = true;
  for (let i = 0; i < rows.n; i++) {
    if (noiseOnly && rows.labels[i]! >= 0) continue;
    const at = first ? pos : pos + 1;
    // 2 bytes kept for the closing ]}
    let end = write(i, out, at, out.length - at - 2);
    if (end < 0) {
      yield out.subarray(0, pos);
      const size = Math.max(CHUNK, need(i) + 3);
      if (!reuse || out.length < size) out = Buffer.allocUnsafe(size);
      pos = 0;
      end = write(i, out, first ? 0 : 1, out.length - 3);
      if (end < 0) throw new Error(`point feature ${i} needs more than the ${out.length} bytes it was given`);
    }
    if (!first) out[pos] = 44; // ,
    first = false;
    pos = end;
  }
  out[pos++] = 93; // ]
  out[pos++] = 125; // }
  yield out.subarray(0, pos);
}

/** Writes `text` at `pos` when it fits in `room` bytes; returns where it ends, or -1. */
function writeText(text: string, out: Buffer, pos: number, room: number): number {
  // a character takes at most 3 bytes of UTF-8 for each of its UTF-16 units
  if (text.length * 3 > room && Buffer.byteLength(text, 'utf8') > room) return -1;
  return pos + out.write(text, pos, 'utf8');
}

/** Bytes of a point layer (see pointFeatureFromSpans) in chunks of about 1 MiB, written without per-feature strings. */
function pointLayerBytes(head: string, spans: FeatureSpans, rows: PointRows, extra: (i: number) => string, noiseOnly: boolean, reuse = false): Generator<Uint8Array> {
  const { lon, lat, kept, labels, roles } = rows;
  // the input is read again in order through a window (a file is never held whole)
  const w = spans.source.window();
  const verbatimNeed = (k: number, x: string): number => 256 + spans.idEnd[k]! - spans.idStart[k]! + spans.propertiesEnd[k]! - spans.propertiesStart[k]! + 3 * x.length;
  const parsed = (i: number): string => pointFeature(parseSpan(spans, kept[i]!, w), labels[i]!, roles[i]!, extra(i));
  const write: PointWriter = (i, out, pos, room) => {
    const k = kept[i]!;
    const label = labels[i]!;
    const x = extra(i);
    if (spans.verbatim[k] !== 1) return writeText(parsed(i), out, pos, room);
    if (verbatimNeed(k, x) > room) return -1;
    w.need(spans.featureStart[k]!, spans.featureEnd[k]!);
    const b = w.buf;
    const is = spans.idStart[k]! - w.base;
    const ie = spans.idEnd[k]! - w.base;
    pos += ascii(out, pos, '{"type":"Feature"');
    if (spans.idEnd[k] !== 0) {
      pos += ascii(out, pos, ',"id":');
      if (b[is] === 34) pos += copyBytes(b, out, pos, is, ie);
      else pos += ascii(out, pos, JSON.stringify(Number(latin1Slice.call(b, is, ie))));
    }
    const alt = spans.altitude === null ? NaN : spans.altitude[k]!;
    pos += ascii(out, pos, ',"geometry":{"type":"Point","coordinates":[');
    pos = writeCoord(out, pos, lon[i]!);
    out[pos++] = 44;
    pos = writeCoord(out, pos, lat[i]!);
    if (alt === alt) {
      out[pos++] = 44;
      pos = writeCoord(out, pos, alt);
    }
    pos += ascii(out, pos, ']},"properties":');
    return addedProperties(b, spans.propertiesStart[k]! - w.base, spans.propertiesEnd[k]! - w.base, label, roles[i]!, x, out, pos);
  };
  const need = (i: number): number => (spans.verbatim[kept[i]!] !== 1 ? Buffer.byteLength(parsed(i), 'utf8') : verbatimNeed(kept[i]!, extra(i)));
  return pointLayerChunks(head, rows, noiseOnly, write, need, reuse);
}

/** Bytes of a point layer for CSV rows read by the CSV byte reader: written from the row's cells where it is marked verbatim, from the parsed row otherwise. */
export function csvPointLayerBytes(head: string, csv: CsvRows, features: InputFeature[], rows: PointRows, extra: (i: number) => string, noiseOnly: boolean, reuse = false): Generator<Uint8Array> {
  const { lon, lat, kept, labels, roles } = rows;
  const w = csv.source.window();
  const parsed = (i: number): string => pointFeature(features[kept[i]!]!, labels[i]!, roles[i]!, extra(i));
  const write: PointWriter = (i, out, pos, room) => {
    const k = kept[i]!;
    if (csv.verbatim[k] !== 1) return writeText(parsed(i), out, pos, room);
    const x = extra(i);
    if (csvRowNeed(csv, k) + 256 + 3 * x.length > room) return -1;
    const s = csv.rowStart[k]!;
    const e = csv.rowEnd[k]!;
    w.need(s, e);
    const b = w.buf;
    pos += ascii(out, pos, '{"type":"Feature"');
    pos = writeCsvId(csv, b, s - w.base, e - w.base, out, pos);
    pos += ascii(out, pos, ',"geometry":{"type":"Point","coordinates":[');
    pos = writeCoord(out, pos, lon[i]!);
    out[pos++] = 44;
    pos = writeCoord(out, pos, lat[i]!);
    pos += ascii(out, pos, ']},"properties":{');
    const after = writeCsvMembers(csv, k, b, s - w.base, e - w.base, out, pos);
    if (after > pos) {
      pos = after;
      out[pos++] = 44;
    }
    return addedMembers(labels[i]!, roles[i]!, x, out, pos);
  };
  const need = (i: number): number => (csv.verbatim[kept[i]!] !== 1 ? Buffer.byteLength(parsed(i), 'utf8') : csvRowNeed(csv, kept[i]!) + 256 + 3 * extra(i).length);
  return pointLayerChunks(head, rows, noiseOnly, write, need, reuse);
}

/** Feature texts kept as UTF-8 bytes (see PackedTexts in src/storage/columns.ts). */
export interface FeatureByteSource extends FeatureTextSource {
  /** the buffer holding text `index` as bytes from byteStart to byteEnd, or null when it is kept as a string */
  bytesOf(index: number): Uint8Array | null;
  byteStart(index: number): number;
  byteEnd(index: number): number;
}

/**
 * Bytes of a point layer written from stored feature texts (see pointFeatureFromText) in chunks
 * of about 1 MiB: from the texts' bytes where pointFeatureBytes can, from the text otherwise.
 */
function storedPointLayerBytes(head: string, texts: FeatureByteSource, rows: PointRows, extra: (i: number) => string, noiseOnly: boolean, reuse = false): Generator<Uint8Array> {
  const { kept, labels, roles } = rows;
  const fromText = (i: number): string => pointFeatureFromText(texts.at(kept[i]!) as string, labels[i]!, roles[i]!, extra(i));
  const write: PointWriter = (i, out, pos, room) => {
    const k = kept[i]!;
    const b = texts.bytesOf(k);
    const end = b === null ? -1 : pointFeatureBytes(b, texts.byteStart(k), texts.byteEnd(k), labels[i]!, roles[i]!, extra(i), out, pos, room);
    return end >= 0 ? end : writeText(fromText(i), out, pos, room);
  };
  return pointLayerChunks(head, rows, noiseOnly, write, (i) => Buffer.byteLength(fromText(i), 'utf8'), reuse);
}

/**
 * Writes a point feature's properties, the bytes [ps, pe) of `b` (an object, or `{}`/`null`/empty
 * for none), with hotspot_id, role and `extra` added, and the feature's closing brace.
 */
function addedProperties(b: Uint8Array, ps: number, pe: number, label: number, role: number, extra: string, out: Buffer, pos: number): number {
  if (pe - ps <= 2 || (pe - ps === 4 && b[ps] === 110)) out[pos++] = 123; // { (for none, {} or null)
  else {
    pos += copyBytes(b, out, pos, ps, pe - 1);
    out[pos++] = 44;
  }
  return addedMembers(label, role, extra, out, pos);
}

/** Writes `"hotspot_id":…,"role":…` and `extra`, closing the properties and the feature. */
function addedMembers(label: number, role: number, extra: string, out: Buffer, pos: number): number {
  pos = copyConstant(HOTSPOT_ID_BYTES, out, pos);
  pos = label >= 0 ? writeCount(label + 1, out, pos) : copyConstant(NULL_BYTES, out, pos);
  pos = copyConstant(ROLE_BYTES[role]!, out, pos);
  if (extra !== '') pos += out.write(extra, pos, 'utf8');
  out[pos++] = 125;
  out[pos++] = 125;
  return pos;
}

/**
 * Writes a whole number from 1 to 2^31 as String(v) writes it, digit by digit (a million
 * hotspot ids made as strings cost a string each); returns where it ends.
 */
function writeCount(v: number, out: Buffer, pos: number): number {
  let digits = 1;
  for (let x = v; x >= 10; x = (x / 10) | 0) digits++;
  for (let k = pos + digits - 1; k >= pos; k--) {
    const q = (v / 10) | 0;
    out[k] = 48 + v - q * 10;
    v = q;
  }
  return pos + digits;
}

/** `"hotspot_id":`, `null` and `,"role":"core"` and so on (by role) as bytes. */
const HOTSPOT_ID_BYTES = Buffer.from('"hotspot_id":');
const NULL_BYTES = Buffer.from('null');
const ROLE_BYTES = ROLE_NAMES.map((r) => Buffer.from(`,"role":"${r}"`));

/** Copies bytes [start, end) of `from` to `to` at `at`; short runs byte by byte, which beats a native call. */
function copyBytes(from: Uint8Array, to: Buffer, at: number, start: number, end: number): number {
  const n = end - start;
  if (n > 64) to.set(from.subarray(start, end), at);
  else for (let k = 0; k < n; k++) to[at + k] = from[start + k]!;
  return n;
}

/** Writes a text known to be ASCII at `at`; returns its length. */
function ascii(to: Buffer, at: number, s: string): number {
  for (let k = 0; k < s.length; k++) to[at + k] = s.charCodeAt(k);
  return s.length;
}

/** Index just past the JSON string starting (with its quote) at `i`. */
function skipString(t: string, i: number): number {
  for (let q = t.indexOf('"', i + 1); q !== -1; q = t.indexOf('"', q + 1)) {
    let b = q - 1;
    while (t.charCodeAt(b) === 92 /* \ */) b--;
    if ((q - 1 - b) % 2 === 0) return q + 1;
  }
  return -1;
}

/** Index just past the JSON value starting at `i` (-1 when the text ends first). */
function skipValue(t: string, i: number): number {
  const c = t.charCodeAt(i);
  if (c === 34) return skipString(t, i);
  if (c !== 123 && c !== 91) {
    let j = i;
    for (let d = t.charCodeAt(j); j < t.length && d !== 44 && d !== 125 && d !== 93; d = t.charCodeAt(++j));
    return j;
  }
  let depth = 0;
  for (let j = i; j < t.length; ) {
    const d = t.charCodeAt(j);
    if (d === 34) {
      j = skipString(t, j);
      if (j < 0) return -1;
      continue;
    }
    if (d === 123 || d === 91) depth++;
    else if ((d === 125 || d === 93) && --depth === 0) return j + 1;
    j++;
  }
  return -1;
}

const POINT_HEAD = '{"type":"Point","coordinates":[';

/**
 * pointFeature for a feature given as its canonical text (JSON.stringify of the parsed feature,
 * as stored by datasets), byte for byte the same, without parsing the feature: the id and the
 * properties are copied as text and only the coordinates are read as numbers. Texts the fast
 * path does not cover (an id that is not a string or number, a geometry with other members,
 * properties already holding `hotspot_id` or `role`) are parsed and go through pointFeature.
 */
export function pointFeatureFromText(text: string, hotspot: number, role: number, extra = ''): string {
  let id = '';
  let geometry = '';
  let props = '';
  let ok = text.charCodeAt(0) === 123;
  for (let i = 1; ok && text.charCodeAt(i) !== 125; ) {
    const keyEnd = skipString(text, i);
    const end = keyEnd < 0 || text.charCodeAt(keyEnd) !== 58 ? -1 : skipValue(text, keyEnd + 1);
    if (end < 0) ok = false;
    else {
      const key = text.slice(i, keyEnd);
      if (key === '"id"') id = text.slice(keyEnd + 1, end);
      else if (key === '"geometry"') geometry = text.slice(keyEnd + 1, end);
      else if (key === '"properties"') props = text.slice(keyEnd + 1, end);
      i = text.charCodeAt(end) === 44 ? end + 1 : end;
    }
  }
  const idOk = id === '' || id.charCodeAt(0) === 34 || Number.isFinite(Number(id));
  const propsOk = props === '' || props === 'null' || (props.charCodeAt(0) === 123 && !props.includes('"hotspot_id"') && !props.includes('"role"'));
  if (!ok || !idOk || !propsOk || !geometry.startsWith(POINT_HEAD) || !geometry.endsWith(']}') || geometry.includes('[', POINT_HEAD.length)) {
    return pointFeature(JSON.parse(text) as InputFeature, hotspot, role, extra);
  }
  const coords = geometry.slice(POINT_HEAD.length, -2).split(',');
  if (coords.length < 2) return pointFeature(JSON.parse(text) as InputFeature, hotspot, role, extra);
  let position = '[';
  for (let k = 0; k < coords.length; k++) position += (k ? ',' : '') + coordText(Number(coords[k]));
  const added = `"hotspot_id":${hotspot >= 0 ? hotspot + 1 : 'null'},"role":"${ROLE_NAMES[role]}"${extra}}`;
  const properties = props === '' || props === 'null' || props === '{}' ? '{' + added : props.slice(0, -1) + ',' + added;
  return `{"type":"Feature"${id === '' ? '' : ',"id":' + id},"geometry":{"type":"Point","coordinates":${position}]},"properties":${properties}}`;
}

/** Byte strings pointFeatureBytes compares with. */
const KEY_ID = Buffer.from('"id"');
const KEY_GEOMETRY = Buffer.from('"geometry"');
const KEY_PROPERTIES = Buffer.from('"properties"');
const POINT_HEAD_BYTES = Buffer.from(POINT_HEAD);
const HOTSPOT_ID_KEY = Buffer.from('"hotspot_id"');
const ROLE_KEY = Buffer.from('"role"');

/** Whether bytes [s, e) of `b` are `what`. */
function bytesAre(b: Uint8Array, s: number, e: number, what: Uint8Array): boolean {
  if (e - s !== what.length) return false;
  for (let k = 0; k < what.length; k++) if (b[s + k] !== what[k]) return false;
  return true;
}

/**
 * Whether bytes [s, e) of `b` hold `"hotspot_id"` or `"role"` anywhere (the members a point
 * feature adds), in one pass.
 */
function holdsAddedKey(b: Uint8Array, s: number, e: number): boolean {
  for (let j = s; j < e; j++) {
    if (b[j] !== 34) continue;
    const c = b[j + 1];
    if (c === 104 /* h */ ? j + 12 <= e && bytesAre(b, j, j + 12, HOTSPOT_ID_KEY) : c === 114 /* r */ && j + 6 <= e && bytesAre(b, j, j + 6, ROLE_KEY)) return true;
  }
  return false;
}

/**
 * Writes the coordinate text [from, to) of `b` at `pos` of `out` as coordText(Number(text))
 * writes it; returns where it ends. A text that is already what coordText gives back is copied:
 * an optional minus, at most 8 whole digits without a leading zero (or a lone 0), and at most
 * COORDINATE_DECIMALS (7) decimals ending in a non-zero digit, not "-0". Such a text times 10^7
 * is an integer N below 10^15, and the double nearest the text, times 10^7, lies within
 * 10^15 · 2^-52 < 0.25 of N, so coordText rounds it to N and writes the text's own digits.
 * Any other text (an exponent, more decimals, trailing zeros) goes through coordText.
 */
function copyCoord(b: Uint8Array, from: number, to: number, out: Buffer, pos: number): number {
  let j = from;
  if (b[j] === 45) j++; // -
  const w = j;
  while (j < to && b[j]! >= 48 && b[j]! <= 57) j++;
  const wholeDigits = j - w;
  let ok = wholeDigits >= 1 && wholeDigits <= 8 && (b[w] !== 48 || wholeDigits === 1);
  if (ok && j < to) {
    // a fraction: "." and 1 to 7 digits, the last not 0
    const f = ++j;
    if (b[f - 1] !== 46) ok = false;
    while (j < to && b[j]! >= 48 && b[j]! <= 57) j++;
    ok = ok && j === to && j - f >= 1 && j - f <= 7 && b[j - 1] !== 48;
  } else if (ok && b[from] === 45 && wholeDigits === 1 && b[w] === 48) ok = false; // -0
  if (ok) return pos + copyBytes(b, out, pos, from, to);
  return pos + ascii(out, pos, coordText(Number(latin1Slice.call(b, from, to))));
}

/** Index just past the JSON string starting (with its quote) at `i` of bytes [, e) (-1 when they end first). */
function skipStringBytes(b: Uint8Array, i: number, e: number): number {
  for (let q = i + 1; q < e; q++) {
    const c = b[q];
    if (c === 92) q++; // \ and the character it escapes
    else if (c === 34) return q + 1;
  }
  return -1;
}

/** Index just past the JSON value starting at `i` of bytes [, e) (-1 when they end first). */
function skipValueBytes(b: Uint8Array, i: number, e: number): number {
  const c = b[i];
  if (c === 34) return skipStringBytes(b, i, e);
  if (c !== 123 && c !== 91) {
    let j = i;
    for (let d = b[j]; j < e && d !== 44 && d !== 125 && d !== 93; d = b[++j]);
    return j;
  }
  let depth = 0;
  for (let j = i; j < e; ) {
    const d = b[j];
    if (d === 34) {
      j = skipStringBytes(b, j, e);
      if (j < 0) return -1;
      continue;
    }
    if (d === 123 || d === 91) depth++;
    else if ((d === 125 || d === 93) && --depth === 0) return j + 1;
    j++;
  }
  return -1;
}

/**
 * pointFeatureFromText on a stored text given as its UTF-8 bytes [s, e) of `b`, written at `pos`
 * of `out` without making a string of it: the same bytes, where the text is of the form the
 * fast path of pointFeatureFromText covers. @returns where the feature ends, or -1 (nothing
 * written) for any other text and when it needs more than `room` bytes
 */
export function pointFeatureBytes(b: Uint8Array, s: number, e: number, hotspot: number, role: number, extra: string, out: Buffer, pos: number, room: number): number {
  if (e - s + 160 + 3 * extra.length > room || b[s] !== 123 || b[e - 1] !== 125) return -1;
  let is = 0, ie = 0, gs = 0, ge = 0, ps = 0, pe = 0;
  for (let i = s + 1; b[i] !== 125; ) {
    const keyEnd = b[i] === 34 ? skipStringBytes(b, i, e) : -1;
    const end = keyEnd < 0 || b[keyEnd] !== 58 ? -1 : skipValueBytes(b, keyEnd + 1, e);
    if (end < 0 || end >= e) return -1;
    const len = keyEnd - i;
    if (len === 4 && bytesAre(b, i, keyEnd, KEY_ID)) {
      is = keyEnd + 1;
      ie = end;
    } else if (len === 10 && bytesAre(b, i, keyEnd, KEY_GEOMETRY)) {
      gs = keyEnd + 1;
      ge = end;
    } else if (len === 12 && bytesAre(b, i, keyEnd, KEY_PROPERTIES)) {
      ps = keyEnd + 1;
      pe = end;
    }
    i = b[end] === 44 ? end + 1 : end;
  }
  // a string id only (a number is written as JSON.stringify writes its value), properties an object or none
  if (ie > is && b[is] !== 34) return -1;
  const noProps = pe === ps || (pe - ps === 4 && b[ps] === 110 && b[ps + 1] === 117 && b[ps + 2] === 108 && b[ps + 3] === 108);
  if (!noProps && (b[ps] !== 123 || holdsAddedKey(b, ps, pe))) return -1;
  const cs = gs + POINT_HEAD_BYTES.length;
  if (ge - gs < POINT_HEAD_BYTES.length + 2 || !bytesAre(b, gs, cs, POINT_HEAD_BYTES) || b[ge - 2] !== 93 || b[ge - 1] !== 125) return -1;
  // the coordinates as split(',') cuts them: at most three (the room asked for above), no nested array
  const ce = ge - 2;
  let commas = 0;
  for (let j = cs; j < ce; j++) {
    const c = b[j];
    if (c === 91) return -1;
    if (c === 44) commas++;
  }
  if (commas < 1 || commas > 2) return -1;
  pos = copyConstant(FEATURE_HEAD_BYTES, out, pos);
  if (ie > is) {
    pos = copyConstant(ID_KEY_BYTES, out, pos);
    pos += copyBytes(b, out, pos, is, ie);
  }
  pos = copyConstant(GEOMETRY_HEAD_BYTES, out, pos);
  for (let from = cs; ; ) {
    let to = from;
    while (to < ce && b[to] !== 44) to++;
    pos = copyCoord(b, from, to, out, pos);
    if (to >= ce) break;
    out[pos++] = 44;
    from = to + 1;
  }
  pos = copyConstant(PROPERTIES_KEY_BYTES, out, pos);
  return addedProperties(b, ps, noProps ? ps : pe, hotspot, role, extra, out, pos);
}

const FEATURE_HEAD_BYTES = Buffer.from('{"type":"Feature"');
const ID_KEY_BYTES = Buffer.from(',"id":');
const GEOMETRY_HEAD_BYTES = Buffer.from(',"geometry":{"type":"Point","coordinates":[');
const PROPERTIES_KEY_BYTES = Buffer.from(']},"properties":');

/** Copies the bytes of `what` to `out` at `pos`; returns where they end. */
function copyConstant(what: Uint8Array, out: Buffer, pos: number): number {
  for (let k = 0; k < what.length; k++) out[pos + k] = what[k]!;
  return pos + what.length;
}

/**
 * The warning for observations left out by a time window because their time could not be read:
 * it names the time property and says how to name another one, so that a run over a few of the
 * observations is not blamed on eps.
 */
function untimedWarnings(untimed: number, total: number, settings: ClusterSettings): ClusteringWarning[] {
  if (untimed === 0) return [];
  const column = settings.timeColumn ?? 'observed_at';
  const how = settings.timeFormat === null ? 'as an RFC 3339 date-time' : `written ${settings.timeFormat}`;
  return [
    {
      code: 'untimed-observations',
      message:
        `${untimed} of ${total} observations were left out because a time window applies and they have no time in "${column}" ${how}. ` +
        'If their time is in another property or column, or written another way, name it with time_column and time_format (for example time_column=Datum, time_format=DD.MM.YYYY).',
    },
  ];
}

/** Plain words for why the convex hull of all observations (the Clark–Evans study area) could not be drawn. */
function studyAreaFailure(err: Error): string {
  if (/lies more than|spread evenly round the globe/.test(err.message)) {
    return 'the observations spread too far round the globe (some lie more than 80° from their mean position) for a convex hull, the study area, to be drawn on the sphere';
  }
  return `the convex hull of all observations could not be drawn (${err.message.replace(/^hotspotHull: /, '')})`;
}

/** One Clark–Evans result as written in summaries: the pattern first, then R and z, then what they rest on. */
function clarkEvansFigures(ce: ClarkEvans): Record<string, unknown> {
  return {
    pattern: ce.pattern,
    R: sig(ce.R),
    z: sig(ce.z),
    nearest_neighbour_m: { mean: roundMeters(ce.observedMeanMeters), mean_if_random: roundMeters(ce.expectedMeanMeters) },
  };
}

/**
 * The Clark–Evans block of a summary. Always present: when the test could not be run,
 * `computed` is false and `not_computed` says why. When observations share exact positions,
 * `distinct_positions` holds the test over one observation per position, in the same area.
 */
function clarkEvansBlock(whole: ResultFigures): Record<string, unknown> {
  const ce = whole.clarkEvans;
  if (ce === null) return { computed: false, not_computed: whole.clarkEvansNotComputed };
  return {
    computed: true,
    ...clarkEvansFigures(ce),
    study_area: { kind: 'convex hull of all observations', km2: sig(ce.studyAreaKm2) },
    shared_positions: whole.sharedPositions,
    distinct_positions: whole.clarkEvansDistinct === null ? null : { count: whole.distinctPositions, ...clarkEvansFigures(whole.clarkEvansDistinct) },
  };
}

/** Warnings about the Clark–Evans figure: why it is missing, or what shared positions do to it. */
function clarkEvansWarnings(whole: ResultFigures): ClusteringWarning[] {
  if (whole.clarkEvans === null) {
    return [{ code: 'clark-evans-not-computed', message: `The Clark–Evans index was not computed: ${whole.clarkEvansNotComputed}.` }];
  }
  if (whole.sharedPositions === 0) return [];
  const d = whole.clarkEvansDistinct;
  const distinct = d === null ? '' : ` Over the ${whole.distinctPositions} distinct positions R is ${sig(d.R, 4)} (${d.pattern}).`;
  return [
    {
      code: 'shared-positions',
      message:
        `${whole.sharedPositions} of ${whole.observations} observations share their exact position with another one, which pulls the Clark–Evans R down (to ${sig(whole.clarkEvans.R, 4)}) whatever the pattern of the places.${distinct} ` +
        'Repeated positions often come from geocoding to a building or a grid, or from repeated visits to one place.',
    },
  ];
}

/** Whether every kept CSV row is written from its cells (csvPointLayerBytes then needs no parsed feature). */
function everyRowVerbatim(csv: CsvRows, kept: Int32Array): boolean {
  for (let i = 0; i < kept.length; i++) if (csv.verbatim[kept[i]!] !== 1) return false;
  return true;
}

/** The text of a FeatureCollection up to its first feature (what featureCollectionChunks writes first). */
function collectionHeadText(bbox: ArrayLike<number> | null): string {
  let text = '';
  for (const c of featureCollectionChunks([], bbox)) text += c;
  return text.slice(0, -2); // without the closing ]}
}

/** Canonical feature texts by input position (see pointFeatureFromText). */
export interface FeatureTextSource {
  at(index: number): string | undefined;
}

/**
 * Clusters observations already read. `inputInfo` lands in the summary (format, counts).
 * `featureTexts`, when given, holds the canonical text of every input feature (by position in
 * `all`); the points and noise layers are then written from those texts (same bytes, no
 * re-serialising), and `all.features` is read only for count_by, weights and medoid ids.
 * `ids`, when given, holds every input observation's id (by position in `all`), for stored
 * observations whose id is a property (a dataset's id_property) rather than the GeoJSON id.
 */
export function clusterObservations(
  all: Observations,
  settings: ClusterSettings,
  hooks: ClusterHooks = {},
  timer: Timer = new Timer(hooks),
  inputInfo: Record<string, unknown> = {},
  featureTexts?: FeatureTextSource,
  ids?: ArrayLike<string>,
): ClusterResult {
  const filtered = applyFilter(all, { since: settings.since, until: settings.until, where: settings.where });
  // a stored run's window is applied by the store, which reports the untimed observations it left out
  const earlierUntimed = typeof inputInfo.left_out_untimed === 'number' ? inputInfo.left_out_untimed : 0;
  const untimed = filtered.info.left_out_untimed + earlierUntimed;
  const obs = filtered.observations;
  const { points, features } = obs;

  timer.start('index');
  const epsMeters = resolveEps(points, settings);
  const index = new SphereIndex(points, epsMeters);

  timer.start('cluster');
  const { clustering, ordering } = runMethod(points, index, epsMeters, settings, (d) => hooks.onProgress?.('cluster', d));

  const { labels, roles } = clustering;
  const kept = filtered.kept;
  let noiseCount = 0;
  for (let i = 0; i < points.n; i++) if (labels[i] < 0) noiseCount++;
  const noiseLon = new Float64Array(noiseCount);
  const noiseLat = new Float64Array(noiseCount);
  for (let i = 0, k = 0; i < points.n; i++) {
    if (labels[i] < 0) {
      noiseLon[k] = points.lon[i];
      noiseLat[k++] = points.lat[i];
    }
  }
  const noiseBbox = bboxOfPositions(noiseLon, noiseLat);
  const pointsBbox = bboxOfPositions(points.lon, points.lat);
  const rows: PointRows = { n: points.n, lon: points.lon, lat: points.lat, kept, labels, roles };
  const spans = (all as Partial<SpannedObservations>).spans;
  const csvRows = (all as Partial<CsvObservations>).csvRows;
  // stored texts kept as bytes, written without per-feature strings
  const byteTexts = featureTexts !== undefined && typeof (featureTexts as Partial<FeatureByteSource>).bytesOf === 'function' ? (featureTexts as FeatureByteSource) : undefined;
  if (hooks.onPointLayers !== undefined && ordering === null) {
    const job: PointLayersJob = { rows, pointsHead: collectionHeadText(pointsBbox), noiseHead: collectionHeadText(noiseBbox) };
    if (spans !== undefined) job.spans = spans;
    else if (csvRows !== undefined && everyRowVerbatim(csvRows, kept)) job.csvRows = csvRows;
    else if (byteTexts !== undefined) job.texts = byteTexts;
    if (job.spans !== undefined || job.csvRows !== undefined || job.texts !== undefined) hooks.onPointLayers(job);
  }

  timer.start('figures');
  // the Clark–Evans nearest-neighbour pass (on this thread by default; beside the hulls in a worker when two threads are asked for)
  const clarkEvansWanted = hooks.clarkEvans !== false;
  const pendingNearest = points.n >= 3 && clarkEvansWanted ? startNearestNeighbours(points, index) : null;
  const { start, members } = membersByHotspot(clustering);
  const hulls: HullGeometry[] = [];
  const areaKm2 = new Float64Array(clustering.count);
  const lonBuf = new Float64Array(members.length);
  const latBuf = new Float64Array(members.length);
  for (let h = 0; h < clustering.count; h++) {
    const a = start[h];
    const b = start[h + 1];
    for (let k = a; k < b; k++) {
      lonBuf[k] = points.lon[members[k]];
      latBuf[k] = points.lat[members[k]];
    }
    let hull: HullGeometry;
    try {
      hull = hotspotHull(lonBuf.subarray(a, b), latBuf.subarray(a, b), {
        kind: settings.hull,
        concavity: settings.concavity,
        bufferMeters: epsMeters / 2,
      });
    } catch (err) {
      pendingNearest?.cancel();
      if (!(err instanceof HullSpreadError)) throw err;
      // chains of neighbours can reach round the globe at any eps: the settings, not the service, must change
      throw new SettingsError(
        'eps',
        `at ${epsMeters} m, hotspot ${h + 1} joins ${b - a} observations reaching more than 80° from their centre (${err.message}), which no hull can outline; use a smaller eps or a larger min_points`,
      );
    }
    hulls.push(hull);
    areaKm2[h] = geometryAreaKm2(hull);
  }
  const figures = hotspotFigures(points, clustering, {
    areaKm2,
    observedAt: obs.observedAt,
    category: settings.countBy ? categoryValues(features, settings.countBy) : null,
  });

  // Clark–Evans over the convex hull of all observations (the stated study area).
  let studyAreaKm2: number | null = null;
  let studyAreaProblem: string | undefined;
  if (!clarkEvansWanted) studyAreaProblem = 'none was drawn';
  else if (points.n >= 3) {
    try {
      studyAreaKm2 = geometryAreaKm2(hotspotHull(points.lon, points.lat, { kind: 'convex', bufferMeters: epsMeters / 2 }));
    } catch (err) {
      studyAreaProblem = studyAreaFailure(err as Error);
    }
  } else studyAreaProblem = 'fewer than 3 observations outline no area';
  if (!studyAreaKm2) pendingNearest?.cancel();
  const nearest = pendingNearest !== null && studyAreaKm2 ? pendingNearest.collect() : undefined;
  const whole = resultFigures(points, clustering, { studyAreaKm2, studyAreaProblem, nearest, xyz: index.xyz });
  if (!clarkEvansWanted) whole.clarkEvansNotComputed = 'it was not asked for';
  const validation = validationFigures(points, clustering, settings, settings.referenceProperty ? categoryValues(features, settings.referenceProperty) : null);

  timer.start('write');
  /** the medoid's observation id: the stored id, else the GeoJSON id, else its input index */
  // the observation's own id, always as a string (a stored id, the feature's id, else its input position)
  const medoidIdOf = (i: number): string => (ids !== undefined ? (ids[filtered.kept[i]!] as string) : String(features[i]!.id ?? filtered.kept[i]!));
  // looked up in input order: features read from a file are parsed from it when first read, and
  // a window moving forward reads the file in large chunks where scattered jumps read it in many
  // small ones
  const medoidIds = new Array<string>(clustering.count);
  const byPosition = Array.from({ length: clustering.count }, (_, h) => h).sort((a, b) => figures[a].medoid - figures[b].medoid);
  for (const h of byPosition) medoidIds[h] = medoidIdOf(figures[h].medoid);
  const resultHotspots: ResultHotspot[] = [];
  for (let h = 0; h < clustering.count; h++) {
    const own = members.slice(start[h], start[h + 1]);
    const coreMembers = new Int32Array(figures[h].coreCount);
    for (let k = 0, c = 0; k < own.length; k++) if (clustering.roles[own[k]] === ROLE_CORE) coreMembers[c++] = own[k];
    const properties = hotspotProperties(figures[h], medoidIds[h]);
    if (validation.reference) {
      const r = validation.reference.hotspots[h];
      properties.reference_majority = r.majority;
      properties.reference_share = r.share === null ? null : round(r.share, 6);
    }
    resultHotspots.push({ hotspotId: h + 1, members: own, coreMembers, hull: hulls[h], figures: figures[h], properties });
  }
  const extra = ordering === null ? NO_EXTRA : opticsMembers(ordering);
  function* pointFeatures(noiseOnly: boolean): Generator<string> {
    const w = spans?.source.window();
    for (let i = 0; i < points.n; i++) {
      if (noiseOnly && labels[i] >= 0) continue;
      if (spans !== undefined) yield pointFeatureFromSpans(spans, kept[i]!, points.lon[i]!, points.lat[i]!, labels[i], roles[i], extra(i), w);
      else yield featureTexts === undefined ? pointFeature(features[i], labels[i], roles[i], extra(i)) : pointFeatureFromText(featureTexts.at(kept[i]) as string, labels[i], roles[i], extra(i));
    }
  }
  // bytes written without per-feature strings, from the byte reader's spans or stored texts kept as bytes
  const pointBytes = (bbox: ArrayLike<number> | null, noiseOnly: boolean): (() => Iterable<Uint8Array>) | undefined => {
    if (spans !== undefined) return () => pointLayerBytes(collectionHeadText(bbox), spans, rows, extra, noiseOnly);
    if (csvRows !== undefined) return () => csvPointLayerBytes(collectionHeadText(bbox), csvRows, all.features, rows, extra, noiseOnly);
    if (byteTexts !== undefined) return () => storedPointLayerBytes(collectionHeadText(bbox), byteTexts, rows, extra, noiseOnly);
    return undefined;
  };
  const hotspotsBbox = bboxOf(hulls);
  const centresBbox = bboxOf(figures.map((f) => ({ type: 'Point' as const, coordinates: f.centre })));
  // the layers' fixed fields (src/geometry/layer-fields.ts), read when a layer is written so that
  // track ids filled in after clustering are included
  const categories = categoryNames(resultHotspots.map((r) => r.properties));
  const layerProperties = (r: ResultHotspot): string => hotspotPropertiesText(r.properties, categories);
  const layers: Record<LayerName, Layer> = {
    hotspots: new Layer(() => [
      featureCollectionString(
        resultHotspots.map((r) => featureStringWithProperties(r.hull, layerProperties(r), r.hotspotId)),
        hotspotsBbox,
      ),
    ]),
    centres: new Layer(() => [
      featureCollectionString(
        resultHotspots.map((r) => featureStringWithProperties({ type: 'Point', coordinates: r.figures.centre }, layerProperties(r), r.hotspotId)),
        centresBbox,
      ),
    ]),
    noise: new Layer(
      () => featureCollectionChunks(pointFeatures(true), noiseBbox),
      pointBytes(noiseBbox, true),
    ),
    points: new Layer(
      () => featureCollectionChunks(pointFeatures(false), pointsBbox),
      pointBytes(pointsBbox, false),
    ),
  };
  timer.stop();

  let core = 0;
  for (let i = 0; i < points.n; i++) if (clustering.roles[i] === ROLE_CORE) core++;
  const summary: Record<string, unknown> = {
    roost_version: ROOST_VERSION,
    parameters: { ...settingsRecord(settings), eps: epsMeters, eps_auto: settings.epsAuto },
    input: { ...inputInfo, observations: all.points.n, kept: points.n, left_out_by_filter: all.points.n - points.n, ...filtered.info, left_out_untimed: untimed },
    figures: {
      hotspots: whole.hotspots,
      observations: whole.observations,
      clustered: whole.clustered,
      noise: whole.noise,
      core,
      clustered_share: round(whole.clusteredShare, 6),
      noise_share: round(whole.noiseShare, 6),
      total_weight: sig(whole.totalWeight),
      clark_evans: clarkEvansBlock(whole),
    },
    ...validationBlock(validation),
    hotspots: resultHotspots.map((r) => r.properties),
    warnings: [...untimedWarnings(untimed, all.points.n + earlierUntimed, settings), ...clusteringWarnings(clustering), ...clarkEvansWarnings(whole)],
    cautions: CAUTIONS,
    timings_ms: timer.ms,
  };
  return { summary, layers, hotspots: resultHotspots, observations: obs };
}

/**
 * Reads and clusters one input. Throws InputError (per-feature problems) for bad observations
 * and SettingsError for settings that do not fit the data; never returns a partial result.
 */
export function clusterInput(
  input: Buffer | string | InputFile,
  format: InputFormat | undefined,
  settings: ClusterSettings,
  hooks: ClusterHooks = {},
): ClusterResult {
  const timer = new Timer(hooks);
  timer.start('read');
  const obs = readInput(input, format, settings);
  return clusterObservations(obs, settings, hooks, timer, { format: format ?? 'detected' });
}

/** Reads an input with the reader options a clustering's settings name (weight, columns, time column and format). */
export function readInput(input: Buffer | string | InputFile, format: InputFormat | undefined, settings: ClusterSettings): Observations {
  return readObservations(input, {
    format,
    weightProperty: settings.weightProperty,
    lonColumn: settings.lonColumn ?? undefined,
    latColumn: settings.latColumn ?? undefined,
    timeColumn: settings.timeColumn,
    timeFormat: settings.timeFormat,
  });
}

/** The JSON document POST /v1/cluster returns, built from the layer texts without re-parsing. */
export function resultDocument(result: ClusterResult): string {
  const { hotspots, centres, noise } = result.layers;
  return `{"summary":${JSON.stringify(result.summary)},"hotspots":${hotspots.text()},"centres":${centres.text()},"noise":${noise.text()}}`;
}

/** The k-distance curve and suggested eps for one input. */
export function suggestEpsInput(input: Buffer | string, format: InputFormat | undefined, settings: ClusterSettings): Record<string, unknown> {
  const obs = readInput(input, format, settings);
  const { observations } = applyFilter(obs, { since: settings.since, until: settings.until, where: settings.where });
  const minPoints = Math.max(2, settings.minPoints);
  const s = suggestEps(observations.points, minPoints);
  // The warning signs are read off a DBSCAN run at the suggested eps.
  const warnings = s.epsMeters === null ? [] : clusteringWarnings(dbscan(observations.points, { epsMeters: s.epsMeters, minPoints }));
  return {
    min_points: minPoints,
    k: s.k,
    observations: s.total,
    sampled: s.sampled,
    // four significant figures: a suggestion to read and type, which must not become 0 for a dense set
    eps_m: s.epsMeters === null ? null : sig(s.epsMeters, 4),
    knee_index: s.kneeIndex,
    message: s.message,
    warnings,
    curve: { rank: s.curve.rank, meters: s.curve.meters.map((m) => sig(m, 4)) },
  };
}
