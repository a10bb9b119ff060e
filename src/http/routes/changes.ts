/**
 * What changed between two runs of a dataset, and the history of one track.
 *
 * GET /v1/datasets/{id}/changes?from=<run>&to=<run>: `to` defaults to the latest succeeded run,
 * `from` to the succeeded run before `to`. JSON by default; GeoJSON with `?format=geojson` or
 * `Accept: application/geo+json`: the hulls of the `to` run's hotspots with the transition that
 * led to each, and the hulls (from the `from` run) of the hotspots that disappeared. The
 * transitions are computed from the two stored runs with the service's track settings, so for the
 * default pair they are what the later run recorded in its summary, and any two runs can be
 * compared; track ids are those the runs were stored with.
 *
 * GET /v1/datasets/{id}/tracks: the dataset's tracks, a page at a time (`limit`, `cursor`), in the
 * order they were given out, each with its first and last run and its hotspot's figures in the
 * last; `active=true` keeps those in the latest succeeded run, `active=false` those that ended.
 *
 * GET /v1/datasets/{id}/tracks/{track}: one entry per run the track was seen in, oldest first.
 */
import type { FastifyInstance, FastifyReply, FastifyRequest } from 'fastify';
import { bboxOf, featureCollectionString, featureStringWithProperties, type GeometryLike } from '../../geometry/geojson.js';
import { CHANGE_FIELDS, fieldsText, TRUST_FIELDS, type LayerField } from '../../geometry/layer-fields.js';
import { compareStoredRuns, type TransitionJson } from '../../jobs/tracking.js';
import { StoreError, type Run, type RunHotspot, type Store, type TrackPoint, type TrackRunRef, type TrackSummary } from '../../storage/store.js';
import { resolveTrackSettings, type TrackSettings } from '../../tracks/settings.js';
import { sendTagged } from '../conditional.js';
import { HttpProblem } from '../errors.js';
import { requireDataset, requireRun } from './common.js';

export interface ChangeRouteOptions {
  /** thresholds used to compare runs; default DEFAULT_TRACK_SETTINGS (keep equal to the run hooks') */
  trackSettings?: Partial<TrackSettings>;
}

const GEOJSON = 'application/geo+json';

/** `format` (json or geojson, as the schema says), else the Accept header. */
function wantsGeoJson(request: FastifyRequest, query: Record<string, unknown>): boolean {
  const format = query['format'];
  if (format !== undefined) return format === 'geojson';
  return (request.headers.accept ?? '').toLowerCase().includes(GEOJSON);
}

/** A run id given as `from` or `to` (one text, as the schema says); empty is absent. */
function runParam(query: Record<string, unknown>, name: string): string | undefined {
  const v = query[name] as string | undefined;
  return v === '' ? undefined : v;
}

/** The figures of a stored hotspot the change views show. */
function figures(h: RunHotspot | undefined): Record<string, unknown> {
  const f = h?.figures ?? {};
  const out: Record<string, unknown> = { count: f['count'] ?? h?.members.length ?? null, area_km2: f['area_km2'] ?? null, density_per_km2: f['density_per_km2'] ?? null, centre: f['centre'] ?? null };
  // from runs with a Monte Carlo test (a dataset's p-value settings)
  if (typeof f['p_value'] === 'number') out['p_value'] = f['p_value'];
  if (typeof f['significant'] === 'boolean') out['significant'] = f['significant'];
  return out;
}

/** A transition with the figures of the hotspots at both ends. */
function withFigures(t: TransitionJson, from: Map<number, RunHotspot>, to: Map<number, RunHotspot>): Record<string, unknown> {
  return {
    ...t,
    from: t.from.map((e) => ({ ...e, ...figures(from.get(e.hotspot_id)) })),
    to: t.to.map((e) => ({ ...e, ...figures(to.get(e.hotspot_id)) })),
  };
}

function runRef(r: Run): Record<string, unknown> {
  return { id: r.id, created_at: r.createdAt, finished_at: r.finishedAt, trigger: r.trigger };
}

function trackRunRef(r: TrackRunRef): Record<string, unknown> {
  return { id: r.id, created_at: r.createdAt, finished_at: r.finishedAt };
}

/** `active`: absent (all tracks), true or false (the schema allows only these two texts). */
function activeParam(query: Record<string, unknown>): boolean | undefined {
  const v = query['active'];
  return v === undefined ? undefined : v === 'true';
}

/** A run given as `from` or `to`, which must have succeeded. */
async function succeededRun(store: Store, datasetId: string, runId: string, name: string): Promise<Run> {
  const run = await requireRun(store, datasetId, runId);
  if (run.status !== 'succeeded') throw new HttpProblem('run-not-ready', `run ${run.id} (${name}) is ${run.status}; only succeeded runs have hotspots to compare`, { parameter: name });
  return run;
}

/** The `to` run: the one named, else the latest succeeded run. */
async function toRun(store: Store, datasetId: string, toId: string | undefined): Promise<Run> {
  if (toId !== undefined) return succeededRun(store, datasetId, toId, 'to');
  const latest = await store.latestRun(datasetId);
  if (latest === null) throw new HttpProblem('run-not-found', `dataset ${JSON.stringify(datasetId)} has no succeeded run yet; POST /v1/datasets/${datasetId}/runs starts one`);
  return latest;
}

/** The `from` run: the one named, which must be older than `to`, else the succeeded run before `to`. */
async function fromRun(store: Store, datasetId: string, fromId: string | undefined, to: Run): Promise<Run> {
  if (fromId !== undefined) {
    const from = await succeededRun(store, datasetId, fromId, 'from');
    // run ids follow creation order
    if (Number(from.id.slice(1)) >= Number(to.id.slice(1))) {
      throw new HttpProblem('invalid-parameter', `from (${from.id}) must be a run created before to (${to.id})`, { parameter: 'from' });
    }
    return from;
  }
  const previous = await store.latestRun(datasetId, 'succeeded', to.id);
  if (previous === null) throw new HttpProblem('no-earlier-run', `run ${to.id} is the first succeeded run of dataset ${JSON.stringify(datasetId)}; there is nothing to compare it with yet`);
  return previous;
}

/** Two stored runs of a dataset compared, with their hotspots by id. */
interface Comparison {
  dataset: string;
  from: Run;
  to: Run;
  result: Awaited<ReturnType<typeof compareStoredRuns>>;
  fromById: Map<number, RunHotspot>;
  toById: Map<number, RunHotspot>;
}

async function compareRuns(store: Store, dataset: string, from: Run, to: Run, settings: TrackSettings): Promise<Comparison> {
  let result;
  try {
    result = await compareStoredRuns(store, from.id, to.id, settings);
  } catch (err) {
    if (err instanceof Error && /has no centre and area figures/.test(err.message)) throw new HttpProblem('run-not-ready', err.message);
    throw err;
  }
  return { dataset, from, to, result, fromById: new Map(result.from.map((h) => [h.hotspotId, h])), toById: new Map(result.to.map((h) => [h.hotspotId, h])) };
}

/** The JSON answer of /changes: counts, settings and transitions with their hotspots' figures. */
function changesJson(c: Comparison, settings: TrackSettings): Record<string, unknown> {
  const base = `/v1/datasets/${c.dataset}`;
  return {
    dataset: c.dataset,
    from: runRef(c.from),
    to: runRef(c.to),
    counts: c.result.counts,
    member_share: c.result.memberShare,
    track_settings: { survival_threshold: settings.survivalThreshold, split_threshold: settings.splitThreshold, hull_overlap_fallback: settings.hullOverlapFallback, min_member_overlap_share: settings.minMemberOverlapShare, shrink_survival: settings.shrinkSurvival },
    transitions: c.result.transitions.map((t) => withFigures(t, c.fromById, c.toById)),
    links: { from: `${base}/runs/${c.from.id}`, to: `${base}/runs/${c.to.id}`, geojson: `${base}/changes?from=${c.from.id}&to=${c.to.id}&format=geojson` },
  };
}

/** The members a `to` hotspot's feature adds for the transition that led to it (flat: CHANGE_FIELDS). */
function arrivalMembers(t: TransitionJson, k: number): Record<string, unknown> {
  const extra: Record<string, unknown> = { from_track_ids: t.from.map((f) => f.track_id ?? '').join(','), basis: t.basis };
  if (t.kind === 'split') extra['overlap'] = t.overlap[k];
  else if (t.kind !== 'emergence' && t.overlap.length > 0) extra['overlap'] = Math.max(...t.overlap);
  if (t.change) Object.assign(extra, t.change);
  if (t.shrink) extra['shrink'] = true;
  return extra;
}

/**
 * The fields of the changes layer: one list for every feature (layer-fields.ts CHANGE_FIELDS),
 * with the Monte Carlo fields when either run has them, so a GIS types every field the same from
 * one pair of runs to the next.
 */
function changeFields(c: Comparison): LayerField[] {
  const hotspots = [...c.result.from, ...c.result.to];
  const trust = TRUST_FIELDS.filter((f) => f.name !== 'stability' && hotspots.some((h) => h.figures?.[f.name] !== undefined && h.figures?.[f.name] !== null));
  return [...CHANGE_FIELDS, ...trust.map((f) => ({ ...f, nullable: true }))];
}

/** One feature of the changes layer: the declared fields, then `centre` (the pair, for the map page). */
function changeFeature(h: RunHotspot, run: Run, t: TransitionJson, extra: Record<string, unknown>, fields: readonly LayerField[]): string {
  const fig = figures(h);
  const centre = Array.isArray(fig['centre']) ? (fig['centre'] as number[]) : null;
  const props = { transition: t.kind, run_id: run.id, hotspot_id: h.hotspotId, track_id: h.trackId, ...fig, centre_lon: centre?.[0] ?? null, centre_lat: centre?.[1] ?? null, shrink: false, ...extra };
  const text = fieldsText(props, fields);
  return featureStringWithProperties(JSON.parse(h.hull) as GeometryLike, centre === null ? text : `${text.slice(0, -1)},"centre":${JSON.stringify(centre)}}`, `${run.id}-${h.hotspotId}`);
}

/** The GeoJSON answer of /changes: the `to` run's hulls with their transitions, and the hulls that disappeared. */
function changesGeoJson(c: Comparison): string {
  const features: string[] = [];
  const geometries: GeometryLike[] = [];
  const fields = changeFields(c);
  const add = (h: RunHotspot, run: Run, t: TransitionJson, extra: Record<string, unknown>): void => {
    geometries.push(JSON.parse(h.hull) as GeometryLike);
    features.push(changeFeature(h, run, t, extra, fields));
  };
  for (const t of c.result.transitions) {
    if (t.kind === 'disappearance') add(c.fromById.get(t.from[0]!.hotspot_id)!, c.from, t, { from_track_ids: t.from[0]!.track_id ?? '' });
    else t.to.forEach((e, k) => add(c.toById.get(e.hotspot_id)!, c.to, t, arrivalMembers(t, k)));
  }
  return featureCollectionString(features, bboxOf(geometries), { dataset: c.dataset, from_run: c.from.id, to_run: c.to.id, counts: c.result.counts });
}

/** GET /v1/datasets/{id}/changes */
function changesHandler(store: Store, settings: TrackSettings) {
  return async (request: FastifyRequest<{ Params: { id: string } }>, reply: FastifyReply) => {
    const query = (request.query ?? {}) as Record<string, unknown>;
    const geo = wantsGeoJson(request, query);
    const dataset = await requireDataset(store, request.params.id);
    const to = await toRun(store, dataset.id, runParam(query, 'to'));
    const from = await fromRun(store, dataset.id, runParam(query, 'from'), to);
    const c = await compareRuns(store, dataset.id, from, to, settings);
    if (!geo) return changesJson(c, settings);
    return reply.type(GEOJSON).send(changesGeoJson(c));
  };
}

/** One track of the listing: its runs and its hotspot's figures in the last. */
function trackEntry(t: TrackSummary, base: string): Record<string, unknown> {
  const f = t.figures ?? {};
  return {
    track_id: t.trackId,
    active: t.active,
    runs: t.runCount,
    first_run: trackRunRef(t.firstRun),
    last_run: trackRunRef(t.lastRun),
    hotspot_id: t.hotspotId,
    count: f['count'] ?? t.memberCount,
    area_km2: f['area_km2'] ?? null,
    density_per_km2: f['density_per_km2'] ?? null,
    centre: f['centre'] ?? null,
    history: `${base}/tracks/${encodeURIComponent(t.trackId)}`,
  };
}

/** The address of the listing's next page, with the same limit and `active`. */
function nextTracksLink(base: string, limit: number, active: boolean | undefined, cursor: string | null): string | null {
  if (cursor === null) return null;
  const q = new URLSearchParams({ limit: String(limit) });
  if (active !== undefined) q.set('active', String(active));
  q.set('cursor', cursor);
  return `${base}/tracks?${q.toString()}`;
}

/** GET /v1/datasets/{id}/tracks */
function tracksHandler(store: Store) {
  return async (request: FastifyRequest<{ Params: { id: string } }>, reply: FastifyReply) => {
    const query = (request.query ?? {}) as Record<string, unknown>;
    const dataset = await requireDataset(store, request.params.id);
    const limit = (query.limit as number | undefined) ?? 100;
    const active = activeParam(query);
    const cursor = query['cursor'] as string | undefined;
    let page;
    try {
      page = await store.listTracks(dataset.id, { limit, cursor, active });
    } catch (err) {
      if (err instanceof StoreError && err.code === 'invalid') throw new HttpProblem('invalid-parameter', err.message, { parameter: 'cursor' });
      throw err;
    }
    const latest = await store.latestRun(dataset.id);
    const base = `/v1/datasets/${dataset.id}`;
    const body = { dataset: dataset.id, latest_run: latest?.id ?? null, tracks: page.tracks.map((t) => trackEntry(t, base)), next: nextTracksLink(base, limit, active, page.nextCursor) };
    return sendTagged(request, reply, 'application/json; charset=utf-8', JSON.stringify(body));
  };
}

/** One entry of a track's history: its hotspot in one run, and the transition that led to it. */
function historyEntry(p: TrackPoint, run: Run, base: string): Record<string, unknown> {
  const changes = run.summary?.['changes'] as { transitions?: TransitionJson[] } | null | undefined;
  const how = changes?.transitions?.find((t) => t.to.some((e) => e.hotspot_id === p.hotspotId));
  const f = p.figures ?? {};
  return {
    run_id: p.runId,
    run_created_at: run.createdAt,
    run_finished_at: run.finishedAt,
    hotspot_id: p.hotspotId,
    count: f['count'] ?? p.memberCount,
    area_km2: f['area_km2'] ?? null,
    density_per_km2: f['density_per_km2'] ?? null,
    centre: f['centre'] ?? null,
    transition: how?.kind ?? null,
    hotspots: `${base}/runs/${p.runId}/hotspots`,
  };
}

/** GET /v1/datasets/{id}/tracks/{track} */
function trackHistoryHandler(store: Store) {
  return async (request: FastifyRequest<{ Params: { id: string; track: string } }>) => {
    const dataset = await requireDataset(store, request.params.id);
    const points = await store.getTrack(dataset.id, request.params.track);
    if (points.length === 0) throw new HttpProblem('track-not-found', `dataset ${JSON.stringify(dataset.id)} has no track ${JSON.stringify(request.params.track)}; the changes and hotspot layers name the tracks`);
    const runs = new Map<string, Run>();
    for (const p of points) if (!runs.has(p.runId)) runs.set(p.runId, (await store.getRun(dataset.id, p.runId))!);
    const latest = await store.latestRun(dataset.id);
    const base = `/v1/datasets/${dataset.id}`;
    return {
      dataset: dataset.id,
      track_id: request.params.track,
      active: latest !== null && points.some((p) => p.runId === latest.id),
      history: points.map((p) => historyEntry(p, runs.get(p.runId)!, base)),
    };
  };
}

/** Adds GET /v1/datasets/{id}/changes, GET /v1/datasets/{id}/tracks and GET /v1/datasets/{id}/tracks/{track}. Throws a RangeError for bad track settings. */
export default async function changeRoutes(app: FastifyInstance, options: ChangeRouteOptions): Promise<void> {
  const settings = resolveTrackSettings(options.trackSettings);
  app.get('/v1/datasets/:id/changes', changesHandler(app.store, settings));
  app.get('/v1/datasets/:id/tracks', tracksHandler(app.store));
  app.get('/v1/datasets/:id/tracks/:track', trackHistoryHandler(app.store));
}
