/**
 * Published layers: a run's result made fit to show the public.
 *
 * - Positions are generalised to the grid of `generaliseM` metres (grid.ts): a published point is
 *   the centre of its observation's cell, shared by everything in that cell.
 * - Outlines are built from cells, never from observations: the convex hull of a 16-gon of
 *   circumradius 1.6·g around each cell centre the hotspot occupies (g = generaliseM). A member is
 *   at most g from its cell's centre and the 16-gon holds the disc of radius 1.6·g·cos(π/16) ≈
 *   1.569·g around that centre, so the disc of radius 0.569·g around every member lies inside the
 *   outline: no point of an outline, vertex or edge, is closer than g/2 to any member of its
 *   hotspot (`OUTLINE_GUARANTEE`).
 * - Hotspots with fewer than `minCount` observations are withheld, with their members.
 * - Noise is withheld unless `noise` is 'publish'.
 * - Observation properties are dropped except those named in `properties`; observation ids and
 *   medoid ids are never published, nor first and last observation times; a hotspot's category
 *   counts only when the property they count is allowed.
 * - Every layer carries a `published` member saying what was done and how much was withheld.
 *
 * Generalisation is not anonymisation: a published cell can still single out a person or a nest
 * where few observations are; minCount and noise withholding are what limit that.
 */
import { hotspotHull } from '../geometry/hull.js';
import { circlePositions } from '../geometry/hull.js';
import { geometryAreaKm2 } from '../geometry/area.js';
import { roundSignificant } from '../geometry/rounding.js';
import { bboxOf, featureCollectionString, featureString, featureStringWithProperties, roundCoord, type GeometryLike } from '../geometry/geojson.js';
import { CATEGORY_FIELD_PREFIX, categoryCounts, propertiesText } from '../geometry/layer-fields.js';
import { Grid, type Cell } from './grid.js';

/** Every outline point is at least this share of generaliseM from every member (see the header). */
export const OUTLINE_GUARANTEE = 0.5;
/** Circumradius of the polygon around each occupied cell, as a share of generaliseM. */
const OUTLINE_RADIUS = 1.6;
const OUTLINE_VERTICES = 16;

export interface PublishOptions {
  /** grid size in metres, 1–100 000 */
  generaliseM: number;
  /** hotspots with fewer observations are withheld; default 1 (none) */
  minCount: number;
  /** 'withhold' (leave noise out) or 'publish' (generalised, like hotspot members) */
  noise: 'withhold' | 'publish';
  /** observation properties that may be published; everything else is dropped */
  properties: string[];
  /** the property the run counted per hotspot (`count_by`), so its counts follow the allow-list */
  countBy?: string | null;
}

export const PUBLISH_DEFAULTS = { minCount: 1, noise: 'withhold' as const, properties: [] as string[] };

/** What a published layer says about itself (the `published` member). */
export interface PublishedInfo {
  generalise_m: number;
  min_count: number;
  noise: 'withhold' | 'publish';
  properties: string[];
  /** no outline point is closer than this to a member of its hotspot, metres */
  outline_min_distance_m: number;
  /** no published point is farther than this from an observation it stands for, metres */
  point_max_offset_m: number;
  hotspots: { total: number; published: number; withheld: number };
  observations: { total: number; published: number; withheld_in_small_hotspots: number; withheld_noise: number };
}

export interface PublishedLayers {
  hotspots: string;
  centres: string;
  noise: string;
  points: string;
  info: PublishedInfo;
  /** the published hotspots' properties (for a published summary) */
  figures: Record<string, unknown>[];
}

/** Thrown for publishing options that cannot be used; `field` names the option. */
export class PublishError extends Error {
  constructor(
    readonly field: string,
    message: string,
  ) {
    super(message);
    this.name = 'PublishError';
  }
}

/** Checks publishing options (API names) and fills in defaults. */
export function resolvePublishOptions(input: { generalise_m?: unknown; min_count?: unknown; noise?: unknown; properties?: unknown }, countBy: string | null = null): PublishOptions {
  const g = input.generalise_m;
  if (typeof g !== 'number' || !(g >= 1 && g <= 100_000)) throw new PublishError('generalise_m', `generalise_m must be a number of metres from 1 to 100000, got ${JSON.stringify(g ?? null)}`);
  const m = input.min_count ?? PUBLISH_DEFAULTS.minCount;
  if (typeof m !== 'number' || !Number.isSafeInteger(m) || m < 1) throw new PublishError('min_count', `min_count must be a whole number of at least 1, got ${JSON.stringify(m)}`);
  const noise = input.noise ?? PUBLISH_DEFAULTS.noise;
  if (noise !== 'withhold' && noise !== 'publish') throw new PublishError('noise', `noise must be "withhold" or "publish", got ${JSON.stringify(noise)}`);
  const props = input.properties ?? PUBLISH_DEFAULTS.properties;
  if (!Array.isArray(props) || props.some((p) => typeof p !== 'string' || p === '') || props.length > 100) {
    throw new PublishError('properties', 'properties must be a list of up to 100 property names');
  }
  return { generaliseM: g, minCount: m, noise, properties: [...new Set(props as string[])], countBy };
}

interface PointFeature {
  geometry: { type: string; coordinates: number[] } | null;
  properties: Record<string, unknown> | null;
}
interface HotspotFeature {
  properties: Record<string, unknown> | null;
}

/** Published hotspot fields written as reals whatever their value (see src/geometry/layer-fields.ts). */
const PUBLISHED_REALS: ReadonlySet<string> = new Set(['weight', 'radius_m', 'area_km2', 'density_per_km2', 'centre_lon', 'centre_lat', 'p_value', 'stability']);

/**
 * Figures copied as they are; everything else is recomputed or dropped. The trust figures (in runs
 * whose settings ask for them) say how far to trust the hotspot as a whole, nothing about anyone
 * in it, and a published hotspot that may be chance must say so as the exact one does.
 */
const KEPT_FIGURES = ['hotspot_id', 'track_id', 'count', 'core_count', 'border_count', 'weight', 'radius_m', 'p_value', 'significant', 'stability'] as const;

function round(x: number, digits: number): number {
  const f = 10 ** digits;
  return Math.round(x * f) / f;
}

/**
 * Published versions of a run's layers, from its points layer (every observation with its
 * `hotspot_id` and `role`) and its hotspots layer (the figures). Deterministic: the same input
 * gives the same bytes.
 */
export function publishLayers(points: readonly PointFeature[], hotspots: readonly HotspotFeature[], options: PublishOptions): PublishedLayers {
  const grid = new Grid(options.generaliseM);
  const allowed = new Set(options.properties);
  const figures = new Map<number, Record<string, unknown>>();
  for (const h of hotspots) {
    const id = h.properties?.hotspot_id;
    if (typeof id === 'number') figures.set(id, h.properties!);
  }

  // members per hotspot, with their cells; noise apart
  const members = new Map<number, { cells: Map<string, Cell>; points: { cell: Cell; feature: PointFeature; index: number }[] }>();
  const noise: { cell: Cell; feature: PointFeature; index: number }[] = [];
  points.forEach((feature, index) => {
    const c = feature.geometry?.coordinates;
    if (!c || feature.geometry?.type !== 'Point') return;
    const cell = grid.cellOf(c[0]!, c[1]!);
    const hid = feature.properties?.hotspot_id;
    if (typeof hid !== 'number') {
      noise.push({ cell, feature, index });
      return;
    }
    let m = members.get(hid);
    if (!m) members.set(hid, (m = { cells: new Map(), points: [] }));
    m.cells.set(`${cell.row}:${cell.col}`, cell);
    m.points.push({ cell, feature, index });
  });

  const ids = [...members.keys()].sort((a, b) => a - b);
  const kept = ids.filter((id) => members.get(id)!.points.length >= options.minCount);
  const withheldMembers = ids.filter((id) => !kept.includes(id)).reduce((s, id) => s + members.get(id)!.points.length, 0);

  const hotspotFeatures: string[] = [];
  const centreFeatures: string[] = [];
  const outlines: GeometryLike[] = [];
  const centres: GeometryLike[] = [];
  const published: Record<string, unknown>[] = [];
  for (const id of kept) {
    const m = members.get(id)!;
    const cells = [...m.cells.values()].sort((a, b) => a.row - b.row || a.col - b.col);
    const lon: number[] = [];
    const lat: number[] = [];
    for (const c of cells) {
      const ring = circlePositions(c.lon, c.lat, OUTLINE_RADIUS * options.generaliseM, OUTLINE_VERTICES);
      lon.push(...ring.lon);
      lat.push(...ring.lat);
    }
    const outline = hotspotHull(lon, lat, { kind: 'convex', bufferMeters: options.generaliseM });
    const areaKm2 = geometryAreaKm2(outline);
    const source = figures.get(id) ?? { hotspot_id: id, count: m.points.length };
    const props: Record<string, unknown> = {};
    for (const k of KEPT_FIGURES) if (source[k] !== undefined) props[k] = source[k];
    props.count = m.points.length;
    // significant figures, as the exact layers keep them: a sparse hotspot's density is not 0
    props.area_km2 = roundSignificant(areaKm2);
    props.density_per_km2 = roundSignificant(m.points.length / areaKm2);
    // the layers' flat fields (src/geometry/layer-fields.ts); a summary's figures give `centre`
    const centre = Array.isArray(source.centre) ? (source.centre as number[]) : typeof source.centre_lon === 'number' ? [source.centre_lon, source.centre_lat as number] : undefined;
    const cc = centre ? grid.cellOf(centre[0]!, centre[1]!) : cells[0]!;
    props.centre_lon = roundCoord(cc.lon);
    props.centre_lat = roundCoord(cc.lat);
    const counts = categoryCounts(source);
    if (options.countBy && allowed.has(options.countBy) && counts !== undefined) for (const [c, n] of Object.entries(counts)) props[CATEGORY_FIELD_PREFIX + c] = n;
    published.push(props);
    const text = propertiesText(props, PUBLISHED_REALS);
    hotspotFeatures.push(featureStringWithProperties(outline, text, id));
    outlines.push(outline);
    const point: GeometryLike = { type: 'Point', coordinates: [cc.lon, cc.lat] };
    centreFeatures.push(featureStringWithProperties(point, text, id));
    centres.push(point);
  }

  const pointOut = (p: { cell: Cell; feature: PointFeature }, hotspotId: number | null): { text: string; geometry: GeometryLike } => {
    const props: Record<string, unknown> = { hotspot_id: hotspotId, role: hotspotId === null ? 'noise' : (p.feature.properties?.role ?? null) };
    const own = p.feature.properties ?? {};
    for (const name of options.properties) {
      if (name === 'hotspot_id' || name === 'role') continue;
      if (Object.prototype.hasOwnProperty.call(own, name)) props[name] = own[name];
    }
    const geometry: GeometryLike = { type: 'Point', coordinates: [p.cell.lon, p.cell.lat] };
    return { text: featureString(geometry, props), geometry };
  };
  // Sorted by hotspot, then cell, then input order: the order tells nothing finer than the cell.
  const byCell = <T extends { cell: Cell; index: number }>(a: T, b: T): number => a.cell.row - b.cell.row || a.cell.col - b.cell.col || a.index - b.index;
  const pointTexts: string[] = [];
  const pointGeoms: GeometryLike[] = [];
  for (const id of kept) {
    for (const p of [...members.get(id)!.points].sort(byCell)) {
      const o = pointOut(p, id);
      pointTexts.push(o.text);
      pointGeoms.push(o.geometry);
    }
  }
  const noiseTexts: string[] = [];
  const noiseGeoms: GeometryLike[] = [];
  if (options.noise === 'publish') {
    for (const p of [...noise].sort(byCell)) {
      const o = pointOut(p, null);
      noiseTexts.push(o.text);
      noiseGeoms.push(o.geometry);
      pointTexts.push(o.text);
      pointGeoms.push(o.geometry);
    }
  }

  const total = ids.reduce((s, id) => s + members.get(id)!.points.length, 0) + noise.length;
  const info: PublishedInfo = {
    generalise_m: options.generaliseM,
    min_count: options.minCount,
    noise: options.noise,
    properties: options.properties,
    outline_min_distance_m: round(OUTLINE_GUARANTEE * options.generaliseM, 3),
    point_max_offset_m: round(grid.maxOffsetMeters, 3),
    hotspots: { total: ids.length, published: kept.length, withheld: ids.length - kept.length },
    observations: {
      total,
      published: pointTexts.length,
      withheld_in_small_hotspots: withheldMembers,
      withheld_noise: options.noise === 'withhold' ? noise.length : 0,
    },
  };
  const extra = { published: info };
  return {
    hotspots: featureCollectionString(hotspotFeatures, bboxOf(outlines), extra),
    centres: featureCollectionString(centreFeatures, bboxOf(centres), extra),
    noise: featureCollectionString(noiseTexts, bboxOf(noiseGeoms), extra),
    points: featureCollectionString(pointTexts, bboxOf(pointGeoms), extra),
    info,
    figures: published,
  };
}

/** Published layers from the stored layer texts of a run (points and hotspots layers). */
export function publishLayerTexts(pointsText: string, hotspotsText: string, options: PublishOptions): PublishedLayers {
  const points = (JSON.parse(pointsText) as { features: PointFeature[] }).features;
  const hotspots = (JSON.parse(hotspotsText) as { features: HotspotFeature[] }).features;
  return publishLayers(points, hotspots, options);
}


/** Run parameters that name no property and no value of one, and so may be published as they are. */
const PUBLIC_PARAMETERS = ['method', 'eps', 'min_points', 'since', 'until', 'optics_max_eps', 'optics_extraction', 'xi', 'min_cluster_size', 'eps_auto'];

/**
 * A run summary fit to publish beside published layers: the whole-result figures, the published
 * hotspots' figures (as in the published layers), the parameters that name no property, the
 * warnings and cautions, and what publishing did. Per-hotspot exact figures (medoid ids, exact
 * centres, first and last times) are left out.
 */
export function publishedSummary(summary: Record<string, unknown>, layers: PublishedLayers): Record<string, unknown> {
  const params = (summary.parameters ?? {}) as Record<string, unknown>;
  const parameters: Record<string, unknown> = {};
  for (const k of PUBLIC_PARAMETERS) if (params[k] !== undefined) parameters[k] = params[k];
  const figures = { ...((summary.figures ?? {}) as Record<string, unknown>) };
  return {
    roost_version: summary.roost_version,
    parameters,
    figures,
    hotspots: layers.figures,
    published: layers.info,
    warnings: summary.warnings,
    cautions: summary.cautions,
    timings_ms: summary.timings_ms,
  };
}

const PUBLISH_MEMBERS = ['public', 'generalise_m', 'min_count', 'noise', 'properties'];

/**
 * A dataset's `publish` member as given in a request, checked and with defaults filled in
 * ({public, generalise_m, min_count, noise, properties}); null stays null (nothing published).
 * Throws PublishError naming the member ('' when `publish` itself is not an object).
 */
export function checkPublishBlock(input: unknown): Record<string, unknown> | null {
  if (input === null) return null;
  if (typeof input !== 'object' || Array.isArray(input)) throw new PublishError('', 'publish must be an object such as {"public": true, "generalise_m": 500, "min_count": 10} or null');
  const doc = input as Record<string, unknown>;
  for (const k of Object.keys(doc)) if (!PUBLISH_MEMBERS.includes(k)) throw new PublishError(k, `${k}: unknown member; publish has ${PUBLISH_MEMBERS.join(', ')}`);
  if (doc.public !== undefined && typeof doc.public !== 'boolean') throw new PublishError('public', `public must be true or false, got ${JSON.stringify(doc.public)}`);
  const o = resolvePublishOptions(doc);
  return { public: doc.public === true, generalise_m: o.generaliseM, min_count: o.minCount, noise: o.noise, properties: o.properties };
}
