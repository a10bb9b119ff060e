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
import { CHANGE_FIELDS, fieldsText, TRUST_FIELDS } from '../../geometry/layer-fields.js';
import { compareStoredRuns, type TransitionJson } from '../../jobs/tracking.js';
import { StoreError, type Run, type RunHotspot, type TrackRunRef } from '../../storage/store.js';
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

/** `active`: absent (all tracks), true or false. */
function activeParam(query: Record<string, unknown>): boolean | undefined {
  const v = query['active'];
  if (v === undefined || v === '') return undefined;
  if (v === 'true') return true;
  if (v === 'false') return false;
  throw new HttpProblem('invalid-parameter', `active must be true or false, got ${JSON.stringify(v)}`, { parameter: 'active' });
}

/** Adds GET /v1/datasets/{id}/changes, GET /v1/datasets/{id}/tracks and GET /v1/datasets/{id}/tracks/{track}. Throws a RangeError for bad track settings. */
export default async function changeRoutes(app: FastifyInstance, options: ChangeRouteOptions): Promise<void> {
  const { store } = app;
  const settings = resolveTrackSettings(options.trackSettings);

  const succeeded = async (datasetId: string, runId: string, name: string): Promise<Run> => {
    const run = await requireRun(store, datasetId, runId);
    if (run.status !== 'succeeded') throw new HttpProblem('run-not-ready', `run ${run.id} (${name}) is ${run.status}; only succeeded runs have hotspots to compare`, { parameter: name });
    return run;
  };

  app.get<{ Params: { id: string } }>('/v1/datasets/:id/changes', async (request, reply: FastifyReply) => {
    const query = (request.query ?? {}) as Record<string, unknown>;
    const geo = wantsGeoJson(request, query);
    const dataset = await requireDataset(store, request.params.id);
    const toId = runParam(query, 'to');
    const fromId = runParam(query, 'from');
    const base = `/v1/datasets/${dataset.id}`;

    let to: Run;
    if (toId !== undefined) to = await succeeded(dataset.id, toId, 'to');
    else {
      const latest = await store.latestRun(dataset.id);
      if (latest === null) throw new HttpProblem('run-not-found', `dataset ${JSON.stringify(dataset.id)} has no succeeded run yet; POST ${base}/runs starts one`);
      to = latest;
    }
    let from: Run;
    if (fromId !== undefined) {
      from = await succeeded(dataset.id, fromId, 'from');
      // run ids follow creation order
      if (Number(from.id.slice(1)) >= Number(to.id.slice(1))) {
        throw new HttpProblem('invalid-parameter', `from (${from.id}) must be a run created before to (${to.id})`, { parameter: 'from' });
      }
    } else {
      const previous = await store.latestRun(dataset.id, 'succeeded', to.id);
      if (previous === null) throw new HttpProblem('no-earlier-run', `run ${to.id} is the first succeeded run of dataset ${JSON.stringify(dataset.id)}; there is nothing to compare it with yet`);
      from = previous;
    }

    let c;
    try {
      c = await compareStoredRuns(store, from.id, to.id, settings);
    } catch (err) {
      if (err instanceof Error && /has no centre and area figures/.test(err.message)) throw new HttpProblem('run-not-ready', err.message);
      throw err;
    }
    const fromById = new Map(c.from.map((h) => [h.hotspotId, h]));
    const toById = new Map(c.to.map((h) => [h.hotspotId, h]));

    if (!geo) {
      return {
        dataset: dataset.id,
        from: runRef(from),
        to: runRef(to),
        counts: c.counts,
        member_share: c.memberShare,
        track_settings: { survival_threshold: settings.survivalThreshold, split_threshold: settings.splitThreshold, hull_overlap_fallback: settings.hullOverlapFallback, min_member_overlap_share: settings.minMemberOverlapShare, shrink_survival: settings.shrinkSurvival },
        transitions: c.transitions.map((t) => withFigures(t, fromById, toById)),
        links: { from: `${base}/runs/${from.id}`, to: `${base}/runs/${to.id}`, geojson: `${base}/changes?from=${from.id}&to=${to.id}&format=geojson` },
      };
    }

    const features: string[] = [];
    const geometries: GeometryLike[] = [];
    // one field list for every feature (layer-fields.ts CHANGE_FIELDS), with the Monte Carlo
    // fields when either run has them, so a GIS types every field the same from one pair to the next
    const trust = TRUST_FIELDS.filter((f) => f.name !== 'stability' && [...c.from, ...c.to].some((h) => h.figures?.[f.name] !== undefined && h.figures?.[f.name] !== null)).map((f) => ({ ...f, nullable: true }));
    const fields = [...CHANGE_FIELDS, ...trust];
    const add = (h: RunHotspot, run: Run, t: TransitionJson, extra: Record<string, unknown>): void => {
      const g = JSON.parse(h.hull) as GeometryLike;
      geometries.push(g);
      const fig = figures(h);
      const centre = Array.isArray(fig['centre']) ? (fig['centre'] as number[]) : null;
      const props: Record<string, unknown> = {
        transition: t.kind,
        run_id: run.id,
        hotspot_id: h.hotspotId,
        track_id: h.trackId,
        ...fig,
        centre_lon: centre?.[0] ?? null,
        centre_lat: centre?.[1] ?? null,
        shrink: false,
        ...extra,
      };
      // the pair, for the map page, after the declared fields
      const text = fieldsText(props, fields);
      features.push(featureStringWithProperties(g, centre === null ? text : `${text.slice(0, -1)},"centre":${JSON.stringify(centre)}}`, `${run.id}-${h.hotspotId}`));
    };
    for (const t of c.transitions) {
      if (t.kind === 'disappearance') {
        add(fromById.get(t.from[0]!.hotspot_id)!, from, t, { from_track_ids: t.from[0]!.track_id ?? '' });
        continue;
      }
      t.to.forEach((e, k) => {
        const extra: Record<string, unknown> = { from_track_ids: t.from.map((f) => f.track_id ?? '').join(','), basis: t.basis };
        if (t.kind === 'split') extra['overlap'] = t.overlap[k];
        else if (t.kind !== 'emergence' && t.overlap.length > 0) extra['overlap'] = Math.max(...t.overlap);
        if (t.change) Object.assign(extra, t.change);
        if (t.shrink) extra['shrink'] = true;
        add(toById.get(e.hotspot_id)!, to, t, extra);
      });
    }
    const text = featureCollectionString(features, bboxOf(geometries), { dataset: dataset.id, from_run: from.id, to_run: to.id, counts: c.counts });
    return reply.type(GEOJSON).send(text);
  });

  app.get<{ Params: { id: string } }>('/v1/datasets/:id/tracks', async (request, reply) => {
    const query = (request.query ?? {}) as Record<string, unknown>;
    const dataset = await requireDataset(store, request.params.id);
    const limit = (query.limit as number | undefined) ?? 100;
    const active = activeParam(query);
    const cursor = query['cursor'];
    if (cursor !== undefined && typeof cursor !== 'string') throw new HttpProblem('invalid-parameter', 'cursor must be given once, as the next link gives it', { parameter: 'cursor' });
    let page;
    try {
      page = await store.listTracks(dataset.id, { limit, cursor, active });
    } catch (err) {
      if (err instanceof StoreError && err.code === 'invalid') throw new HttpProblem('invalid-parameter', err.message, { parameter: 'cursor' });
      throw err;
    }
    const latest = await store.latestRun(dataset.id);
    const base = `/v1/datasets/${dataset.id}`;
    let next: string | null = null;
    if (page.nextCursor !== null) {
      const q = new URLSearchParams({ limit: String(limit) });
      if (active !== undefined) q.set('active', String(active));
      q.set('cursor', page.nextCursor);
      next = `${base}/tracks?${q.toString()}`;
    }
    const body = {
      dataset: dataset.id,
      latest_run: latest?.id ?? null,
      tracks: page.tracks.map((t) => {
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
      }),
      next,
    };
    return sendTagged(request, reply, 'application/json; charset=utf-8', JSON.stringify(body));
  });

  app.get<{ Params: { id: string; track: string } }>('/v1/datasets/:id/tracks/:track', async (request) => {
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
      history: points.map((p) => {
        const run = runs.get(p.runId)!;
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
      }),
    };
  });
}
