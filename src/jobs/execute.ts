/**
 * One stored run from start to finish: load the dataset's observations in the run's window,
 * cluster them, let the hooks give every hotspot its track id, save the layers and hotspots, and
 * mark the run succeeded. The same function runs inside a worker thread (src/jobs/job-worker.ts,
 * with its own store connection) or, for an in-memory store, on the calling thread.
 *
 * Progress is stored as a percentage at fixed points (load 5 %, index 35 %, clustering 40–75 %,
 * figures 80 %, layers 85 %, Monte Carlo simulations and resamples, when the settings ask for
 * them, 85–89 %, save 90 %) and at most once a second inside the clustering and the trials. Each
 * write is conditional on the run still being 'running' under this claim (src/jobs/lease.ts), so
 * a run cancelled from any process (or instance), or taken over after its lease ran out, stops at
 * its next progress point and never overwrites the result of the process that took it over.
 */
import { pointSet } from '../core/types.js';
import { clusterObservations, type Layer, type PointLayersJob, type Stage } from '../run/cluster.js';
import { SettingsError, type ClusterSettings } from '../run/settings.js';
import { assess, splitEffort, type EffortPoints } from '../trust/assess.js';
import { resolveRunSettings } from '../trust/options.js';
import type { InputFeature, Observations } from '../ingest/types.js';
import { PackedTexts } from '../storage/columns.js';
import { LAYER_PIECE_CHARS } from '../storage/layer-pieces.js';
import { timedPieces, utf8Pieces } from '../storage/layer-write.js';
import type { Dataset, FeatureTexts, ObservationQuery, Run, RunHotspot, RunPatch, Store } from '../storage/store.js';
import { StoreError } from '../storage/store.js';
import type { FinishedHotspot, TrackAssignment } from './hooks.js';
import { StoredLayerThread } from './layer-thread.js';

/**
 * A run failure the user can act on (its message says what to change); any other error is the
 * service's own, logged with the run id and shown to users only as `INTERNAL_RUN_ERROR`.
 */
export class RunError extends Error {
  constructor(message: string) {
    super(message);
    this.name = 'RunError';
  }
}

/** What a run's `error` says when it failed for a reason inside the service. */
export function internalRunError(runId: string): string {
  return `the run failed inside the service, not because of its observations or settings; try it again, and if it fails again ask the operator to look for run ${runId} in the service log`;
}

/** The message for the run's `error`, and whether the full error belongs in the log instead. */
export function runFailureMessage(err: unknown, runId: string): { message: string; internal: boolean } {
  if (err instanceof RunError) return { message: err.message, internal: false };
  if ((err as { code?: unknown } | null)?.code === 'ERR_WORKER_OUT_OF_MEMORY') {
    return { message: 'the run needed more memory than the service gives one run; narrow it (a shorter window, a where condition) or ask the operator for more memory', internal: false };
  }
  if (err instanceof SettingsError) return { message: `the run's settings cannot be used: ${err.message}; change them in the dataset (PATCH) or in the run request`, internal: false };
  return { message: internalRunError(runId), internal: true };
}

/** A run stopped because it was cancelled (its status already says so). */
export class RunCancelled extends Error {
  constructor(message = 'the run was cancelled') {
    super(message);
    this.name = 'RunCancelled';
  }
}

const DURATION = /^P(?:(\d+)Y)?(?:(\d+)M)?(?:(\d+)W)?(?:(\d+)D)?(?:T(?:(\d+)H)?(?:(\d+)M)?(?:(\d+(?:\.\d+)?)S)?)?$/;

/**
 * Checks an ISO 8601 duration such as P30D, P1Y6M, PT12H or P2W (whole units; seconds may have
 * a fraction). @returns an error message, or null when the text is usable
 */
export function windowProblem(text: string): string | null {
  const m = DURATION.exec(text);
  if (m === null || text === 'P' || text.endsWith('T') || m.slice(1).every((x) => x === undefined)) {
    return `window must be an ISO 8601 duration such as P30D (30 days), P2W, P1M or PT12H, got ${JSON.stringify(text)}`;
  }
  return null;
}

/**
 * The start of a window that ends at `endMs`: years and months step back in the calendar (UTC),
 * weeks, days, hours, minutes and seconds by their length. A day that the target month does not
 * have becomes its last day: P1M back from 31 March is 28 (or 29) February, not 3 March, as in
 * the TC39 Temporal proposal's date arithmetic, whose default overflow "constrain" clamps the day
 * (from memory). @returns epoch milliseconds
 */
export function windowStart(duration: string, endMs: number): number {
  const m = DURATION.exec(duration);
  if (m === null || windowProblem(duration) !== null) throw new RangeError(windowProblem(duration) ?? 'bad window');
  const n = (i: number): number => (m[i] === undefined ? 0 : Number(m[i]));
  const d = new Date(endMs);
  const months = d.getUTCFullYear() * 12 + d.getUTCMonth() - n(1) * 12 - n(2);
  const year = Math.floor(months / 12);
  const month = months - year * 12;
  // day 0 of the next month is the last day of this one
  const lastDay = new Date(Date.UTC(2000, month + 1, 0)).getUTCDate() - (month === 1 && !isLeapYear(year) ? 1 : 0);
  d.setUTCFullYear(year, month, Math.min(d.getUTCDate(), lastDay));
  return d.getTime() - (((n(3) * 7 + n(4)) * 24 + n(5)) * 60 + n(6)) * 60_000 - Math.round(n(7) * 1000);
}

function isLeapYear(y: number): boolean {
  return (y % 4 === 0 && y % 100 !== 0) || y % 400 === 0;
}

/**
 * The store query for a run: the dataset's window (ending at the run's creation, so a run that
 * waited in the queue still covers the time it was asked for), narrowed by the settings' since,
 * until and where.
 */
export function runQuery(settings: ClusterSettings, window: string | null, runCreatedMs: number): Omit<ObservationQuery, 'bbox'> {
  let from = settings.since === null ? -Infinity : Date.parse(settings.since);
  let to = settings.until === null ? Infinity : Date.parse(settings.until);
  if (window !== null) {
    from = Math.max(from, windowStart(window, runCreatedMs));
    to = Math.min(to, runCreatedMs);
  }
  const q: Omit<ObservationQuery, 'bbox'> = {};
  if (Number.isFinite(from)) q.from = from;
  if (Number.isFinite(to)) q.to = to;
  if (settings.where.length > 0) q.where = settings.where;
  return q;
}

export interface ExecuteOptions {
  /** aborts between stages and inside the clustering */
  signal?: AbortSignal;
  /** gives each hotspot its track id (the RunHooks' assignTracks, possibly across a thread) */
  assignTracks(hotspots: FinishedHotspot[]): Promise<TrackAssignment>;
  /** smallest interval between progress writes inside a stage, milliseconds; default 1000 */
  progressIntervalMs?: number;
  /** worker threads for the Monte Carlo simulations and resamples a run's settings ask for; default 1 (this thread) */
  trialThreads?: number;
}

export interface ExecutedRun {
  summary: Record<string, unknown>;
  timings: Record<string, number>;
  hotspots: number;
}

const STAGE_PERCENT: Record<Stage, number> = { read: 5, index: 35, cluster: 40, figures: 80, write: 85 };

/**
 * Executes a run that this caller has claimed (status 'running'). Resolves once the result is
 * saved and the run marked succeeded; throws RunCancelled when the run stopped being 'running'
 * (cancelled elsewhere) and any other error for a failure (the caller marks the run failed).
 */
export async function executeRun(store: Store, run: Run, dataset: Dataset, options: ExecuteOptions): Promise<ExecutedRun> {
  const t0 = performance.now();
  const timings: Record<string, number> = {};
  const lap = (name: string, since: number): number => {
    const now = performance.now();
    timings[name] = Math.round((now - since) * 10) / 10;
    return now;
  };
  const interval = options.progressIntervalMs ?? 1000;
  const claim = run.workerId ?? undefined;
  let lastWrite = 0;
  let pending: Promise<unknown> = Promise.resolve();
  let cancelled = false;
  const progress = (percent: number, force: boolean): void => {
    const now = Date.now();
    if (!force && now - lastWrite < interval) return;
    lastWrite = now;
    pending = pending
      .then(() => store.updateRun(run.id, { progress: Math.round(percent) }, ['running'], claim))
      .catch((e: unknown) => {
        if (e instanceof StoreError && e.code === 'conflict') cancelled = true;
        else throw e;
      });
  };
  const check = async (): Promise<void> => {
    await pending;
    options.signal?.throwIfAborted();
    if (cancelled) throw new RunCancelled();
  };

  const { clustering: settings, trust } = resolveRunSettings(run.settings);
  const query = runQuery(settings, dataset.window, Date.parse(run.createdAt));
  progress(1, true);
  await check();

  let t = performance.now();
  const input = await store.loadForRun(dataset.id, query);
  // A time window leaves out the observations without a time; count them for the summary and
  // its warning (a second query: an observation posted in between may be counted or not).
  const windowed = query.from !== undefined || query.to !== undefined;
  const untimed = windowed ? await store.countObservations(dataset.id, { untimed: true, ...(query.where ? { where: query.where } : {}) }) : 0;
  t = lap('load', t);
  progress(STAGE_PERCENT.read, true);
  await check();

  const n = input.ids.length;
  const texts = input.features;
  const features = lazyFeatures(texts);
  let weight: Float64Array | null = null;
  if (settings.weightProperty !== null) {
    // read from the features, so that a run may weigh by another property than the dataset's
    weight = new Float64Array(n);
    for (let i = 0; i < n; i++) {
      const w = features[i]!.properties?.[settings.weightProperty];
      weight[i] = typeof w === 'number' && w >= 0 ? w : typeof w === 'string' && Number(w) >= 0 ? Number(w) : 1;
    }
  }
  let anyTime = false;
  for (let i = 0; i < n; i++) if (!Number.isNaN(input.observedAt[i])) anyTime = true;
  const obs: Observations = { points: pointSet(input.lon, input.lat, weight), features, observedAt: anyTime ? input.observedAt : null };
  t = lap('parse', t);

  // the store applied the window and conditions; the clustering must not filter again
  const clusterSettings: ClusterSettings = { ...settings, since: null, until: null, where: [] };
  // with an effort marker (effort_where) the marked observations are effort points of the
  // Monte Carlo test, and only the others (the cases) are clustered
  let cases = obs;
  let caseTexts: FeatureTexts | { at(i: number): string | undefined } = texts;
  let caseIds: ArrayLike<string> = input.ids;
  let effort: EffortPoints | null = null;
  if (n > 0 && trust.effortWhere !== null) {
    const split = splitEffort(obs, trust.effortWhere);
    const at = split.caseIndex;
    cases = split.cases;
    caseTexts = { at: (i: number) => texts.at(at[i]!) };
    caseIds = idsAt(input.ids, at);
    effort = split.effort;
  }
  // The points and noise layers are made in a worker beside the figures and tracks when that
  // pays (./layer-thread.ts): DBSCAN's layers (OPTICS adds each point's ordering). The worker
  // borrows the texts, so only for a run that reads none of them after the clustering: no
  // count_by, reference property or effort marker.
  const borrowable = texts instanceof PackedTexts && effort === null && settings.countBy === null && settings.referenceProperty === null;
  const layerThread = borrowable && settings.method === 'dbscan' ? StoredLayerThread.start(n, store.engine) : null;
  try {
    return await clusterAndSave();
  } finally {
    await layerThread?.stop();
  }

  async function clusterAndSave(): Promise<ExecutedRun> {
    const result =
      n === 0
        ? null
        : clusterObservations(
            cases,
            clusterSettings,
            {
              signal: options.signal,
              ...(layerThread === null ? {} : { onPointLayers: (job: PointLayersJob) => void layerThread.offer(job) }),
              onProgress: (stage, done) => {
                const base = STAGE_PERCENT[stage];
                if (stage === 'cluster') progress(base + 35 * Math.min(1, done), done === 0);
                else progress(base, true);
              },
            },
            undefined,
            { source: 'stored', dataset: dataset.id, query: queryRecord(query), left_out_untimed: untimed, ...(effort === null ? {} : { effort_points: effort.lon.length }) },
            caseTexts,
            caseIds,
          );
    if (result === null) {
      const why = untimed > 0 ? `; ${untimed} observation(s) have no readable time and a time window applies: name their time with the dataset's time_column and time_format settings` : '';
      throw new RunError(`no observations in dataset ${dataset.id} match the run's window and conditions; post observations or widen the window${why}`);
    }
    t = lap('cluster', t);
    await check();

    if (trust.simulations > 0 || trust.resamples > 0) {
      // p-values and stabilities go into the hotspots' properties before tracks, layers and
      // stored figures are made from them
      await assess(result, clusterSettings, {
        settings: trust,
        effort,
        threads: options.trialThreads ?? 1,
        onProgress: (what, done, total) => progress(what === 'simulations' ? 85 + 3 * (done / total) : 88 + (done / total), false),
      });
      t = lap('trust', t);
      await check();
    }

    const ids = caseIds;
    const finished: FinishedHotspot[] = result.hotspots.map((h) => ({
      hotspot: h,
      memberIds: idsAt(ids, h.members),
      coreIds: idsAt(ids, h.coreMembers),
    }));
    const assignment = await options.assignTracks(finished);
    if (assignment.trackIds.length !== finished.length) throw new Error(`track assignment gave ${assignment.trackIds.length} track ids for ${finished.length} hotspots`);
    if (trust.simulations > 0) markSignificance(assignment.changes, result.hotspots);
    result.hotspots.forEach((h, k) => (h.properties.track_id = assignment.trackIds[k]));
    t = lap('tracks', t);
    await check();

    // Made on demand while the store saves them, in pieces of about a MiB of UTF-8 as the store
    // keeps them: a million points are never one 234 MB string, nor 234 MB of pieces held at once.
    // The time spent making them counts as the layers stage, the rest of the saving as save.
    const making = { ms: 0 };
    // (points and noise written as bytes from the stored texts, when the store kept them as bytes)
    const pieces = (layer: Layer): Iterable<Uint8Array> => (layer.writesBytes ? timedPieces(layer.byteChunks(), making) : utf8Pieces(layer.chunks(), LAYER_PIECE_CHARS, making));
    // made by the worker meanwhile, if one took them; the wait for it counts as the layers stage
    const byThread = layerThread === null ? null : await layerThread.layers();
    const layers = {
      hotspots: pieces(result.layers.hotspots),
      centres: pieces(result.layers.centres),
      noise: byThread === null ? pieces(result.layers.noise) : iterable(byThread.noise),
      points: byThread === null ? pieces(result.layers.points) : iterable(byThread.points),
    };
    const stored: RunHotspot[] = finished.map((f, k) => ({
      hotspotId: f.hotspot.hotspotId,
      trackId: assignment.trackIds[k]!,
      members: f.memberIds,
      coreMembers: f.coreIds,
      hull: JSON.stringify(f.hotspot.hull),
      figures: f.hotspot.properties,
    }));
    const hotspotsMs = performance.now() - t;
    progress(90, true);
    await check();
    const summary = { ...result.summary, changes: assignment.changes };
    // The run is marked succeeded in the transaction that stores its result (the store asks for
    // the update once the result is written), so the timings end there: what follows is the
    // commit, on SQLite with the checkpoint of the result into the database file.
    t = performance.now();
    const finish = (): RunPatch => {
      const saveMs = performance.now() - t;
      timings.layers = Math.round((hotspotsMs + making.ms) * 10) / 10;
      timings.save = Math.round((saveMs - making.ms) * 10) / 10;
      timings.total = Math.round((performance.now() - t0) * 10) / 10;
      return { status: 'succeeded', progress: 100, error: null, finishedAt: new Date().toISOString(), summary, timings };
    };
    await store.saveRunResult(run.id, { layers, hotspots: stored, finish }, claim).catch((e: unknown) => {
      if (e instanceof StoreError && e.code === 'conflict') throw new RunCancelled('the run is no longer this process\'s');
      throw e;
    });
    return { summary, timings, hotspots: stored.length };
  }
}

/**
 * Says in the run's changes whether each hotspot of this run that a transition ends in is
 * significant at the run's level (its `significant` field), so that an emerging hotspot that is
 * not is said to be so where the change is told.
 */
export function markSignificance(changes: Record<string, unknown> | null, hotspots: readonly { hotspotId: number; properties: Record<string, unknown> }[]): void {
  const transitions = (changes?.['transitions'] ?? []) as { to: { hotspot_id: number; significant?: boolean }[] }[];
  const byId = new Map(hotspots.map((h) => [h.hotspotId, h.properties['significant']]));
  for (const t of transitions) {
    for (const end of t.to) {
      const s = byId.get(end.hotspot_id);
      if (typeof s === 'boolean') end.significant = s;
    }
  }
}

/** Pieces already made, as the store takes a layer made on demand (an array is for text pieces). */
function iterable(pieces: readonly Uint8Array[]): Iterable<Uint8Array> {
  return { [Symbol.iterator]: () => pieces.values() };
}

/**
 * The ids at the positions given, in their order. A loop into an array of the right length: an
 * `Array.from` with a mapping function over the million positions of a large run's members took
 * about six times as long (0.2 against 0.03 s for 900,000, measured).
 */
function idsAt(ids: ArrayLike<string>, at: ArrayLike<number>): string[] {
  const out = new Array<string>(at.length);
  for (let k = 0; k < at.length; k++) out[k] = ids[at[k]!]!;
  return out;
}

/**
 * The stored features as an array whose items are parsed on first read. A run reads feature
 * objects only for count_by, a weight property and the hotspots' medoids; the points and noise
 * layers are written from the texts (clusterObservations' featureTexts), so most of a million
 * features are never parsed.
 */
function lazyFeatures(texts: FeatureTexts): InputFeature[] {
  const parsed: (InputFeature | undefined)[] = new Array(texts.length);
  return new Proxy(parsed as InputFeature[], {
    get(target, key, receiver) {
      if (typeof key === 'string') {
        const i = key.length > 0 && key.length < 16 && key.charCodeAt(0) >= 48 && key.charCodeAt(0) <= 57 ? Number(key) : NaN;
        if (Number.isInteger(i) && i < texts.length && String(i) === key) return (target[i] ??= JSON.parse(texts.at(i) as string) as InputFeature);
      }
      return Reflect.get(target, key, receiver) as unknown;
    },
  });
}

function queryRecord(q: Omit<ObservationQuery, 'bbox'>): Record<string, unknown> {
  return {
    from: q.from === undefined ? null : new Date(q.from).toISOString(),
    to: q.to === undefined ? null : new Date(q.to).toISOString(),
    where: q.where ?? [],
  };
}
