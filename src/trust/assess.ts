/**
 * How far to trust each hotspot of a finished run: the Monte Carlo p-value against a null model
 * (src/trust/chance.ts) and the stability under resampling (src/trust/stability.ts), written into
 * the hotspots' properties (and so into the hotspots and centres layers and the summary) and into
 * the summary's `chance` and `stability` blocks.
 */
import { applyFilter } from '../ingest/filter.js';
import type { Observations } from '../ingest/types.js';
import { hotspotHull } from '../geometry/hull.js';
import type { InputFile } from '../ingest/source.js';
import { clusterInput, clusterObservations, defaultMinClusterSize, readInput, type ClusterHooks, type ClusterResult, type InputFormat } from '../run/cluster.js';

import { SettingsError, type ClusterSettings } from '../run/settings.js';
import { roundSignificant } from '../geometry/rounding.js';
import { hotspotStatistics, monteCarloPValues, type ChanceSpec } from './chance.js';
import { meanJaccards, type StabilitySpec } from './stability.js';
import { studyArea, type StudyArea } from './study-area.js';
import { runTrials, runTrialsHere, type TrialProgress, type Trials } from './trials.js';
import type { TrustSettings } from './options.js';

/** Effort points as positions. */
export interface EffortPoints {
  lon: Float64Array;
  lat: Float64Array;
  /** where they came from, for the summary */
  source: 'file' | 'property marker' | 'dataset';
}

export interface TrustInputs {
  settings: TrustSettings;
  /** a study area given by the user for csr; the convex hull of the observations when null */
  studyArea?: StudyArea | null;
  /** effort points from a file or another dataset (or split off by the marker) */
  effort?: EffortPoints | null;
  /** worker threads for the trials; 1 runs them in this thread */
  threads?: number;
  /** called as simulations and resamples finish */
  onProgress?: (what: 'simulations' | 'resamples', done: number, total: number) => void;
}

/** What the effort marker (effort_where) splits off the observations. */
export interface EffortSplit {
  /** the observations that are cases */
  cases: Observations;
  /** input position of each case, ascending */
  caseIndex: Int32Array;
  effort: EffortPoints;
}

/**
 * Splits the observations whose property equals the marker's value (the effort points) from the
 * others (the cases). Throws SettingsError when no observation is marked, or every one is.
 */
export function splitEffort(obs: Observations, marker: { property: string; value: string }): EffortSplit {
  const n = obs.points.n;
  const marked = applyFilter(obs, { where: [marker] }).kept;
  const label = `effort_where: ${marker.property}=${marker.value}`;
  if (marked.length === 0) throw new SettingsError('effort_where', `no observation has ${marker.property}=${marker.value}, so there are no effort points; check the property and value (${label})`);
  if (marked.length === n) throw new SettingsError('effort_where', `every observation has ${marker.property}=${marker.value}, which leaves no cases to cluster`);
  const isEffort = new Uint8Array(n);
  for (const i of marked) isEffort[i] = 1;
  const caseIndex = new Int32Array(n - marked.length);
  for (let i = 0, k = 0; i < n; i++) if (!isEffort[i]) caseIndex[k++] = i;
  const pick = (a: Float64Array): Float64Array => Float64Array.from(caseIndex, (i) => a[i]);
  const { points } = obs;
  return {
    cases: {
      points: { n: caseIndex.length, lon: pick(points.lon), lat: pick(points.lat), weight: points.weight === null ? null : pick(points.weight) },
      features: Array.from(caseIndex, (i) => obs.features[i]),
      observedAt: obs.observedAt === null ? null : pick(obs.observedAt),
    },
    caseIndex,
    effort: { lon: Float64Array.from(marked, (i) => points.lon[i]), lat: Float64Array.from(marked, (i) => points.lat[i]), source: 'property marker' },
  };
}

/**
 * Reads and clusters the input. With an effort marker (--effort-where) the marked observations
 * are split off first: they are effort points, and only the others (the cases) are clustered.
 */
export function clusterCases(data: Buffer | string | InputFile, format: InputFormat | undefined, settings: ClusterSettings, trust: TrustSettings, hooks: ClusterHooks = {}): { result: ClusterResult; effort: EffortPoints | null } {
  if (trust.effortWhere === null) return { result: clusterInput(data, format, settings, hooks), effort: null };
  const all = readInput(data, format, settings);
  const split = splitEffort(all, trust.effortWhere);
  const ids = split.cases.features.map((f, k) => String(f.id ?? split.caseIndex[k]));
  const result = clusterObservations(split.cases, settings, hooks, undefined, { format: format ?? 'detected', effort_points: split.effort.lon.length }, undefined, ids);
  return { result, effort: split.effort };
}

interface Prepared {
  chance: ChanceSpec | null;
  stability: StabilitySpec | null;
  observed: Float64Array;
  block: Record<string, unknown> | null;
}

/** The run's hotspot per clustered observation (−1 noise), from the hotspots' members. */
function labelsOf(result: ClusterResult): Int32Array {
  const labels = new Int32Array(result.observations.points.n).fill(-1);
  for (const h of result.hotspots) for (const i of h.members) labels[i] = h.hotspotId - 1;
  return labels;
}

function prepare(result: ClusterResult, settings: ClusterSettings, inputs: TrustInputs): Prepared {
  const t = inputs.settings;
  const points = result.observations.points;
  const epsMeters = (result.summary.parameters as { eps: number }).eps;
  // the same clustering as the run's: eps as resolved on the observations, and OPTICS' smallest
  // ξ hotspot as it was for them (its default depends on the number of observations)
  const fixed: ClusterSettings = {
    ...settings,
    epsMeters,
    epsAuto: false,
    minClusterSize: settings.minClusterSize ?? defaultMinClusterSize(points.n, settings.minPoints),
  };
  const labels = labelsOf(result);
  const observed = hotspotStatistics({ labels, roles: new Uint8Array(0), count: result.hotspots.length }, points.weight);
  let chance: ChanceSpec | null = null;
  let block: Record<string, unknown> | null = null;
  if (t.simulations > 0) {
    const base = { settings: fixed, seed: t.seed, model: t.nullModel, n: points.n, weight: points.weight, area: null, poolLon: null, poolLat: null };
    if (t.nullModel === 'csr') {
      let area = inputs.studyArea ?? null;
      if (area === null) {
        try {
          area = studyArea(hotspotHull(points.lon, points.lat, { kind: 'convex', bufferMeters: epsMeters / 2 }), 'convex hull of all observations');
        } catch (err) {
          throw new SettingsError('null_model', `csr places points in the convex hull of the observations, which cannot be drawn here (${(err as Error).message}); give a study area polygon`);
        }
      }
      chance = { ...base, area };
      block = { study_area: { kind: area.kind, km2: roundSignificant(area.areaKm2) } };
    } else {
      const effort = inputs.effort;
      if (!effort || effort.lon.length === 0) throw new SettingsError('null_model', 'effort needs effort points, and none were given');
      const poolLon = new Float64Array(points.n + effort.lon.length);
      const poolLat = new Float64Array(points.n + effort.lon.length);
      poolLon.set(points.lon);
      poolLat.set(points.lat);
      poolLon.set(effort.lon, points.n);
      poolLat.set(effort.lat, points.n);
      chance = { ...base, poolLon, poolLat };
      block = { effort: { source: effort.source, cases: points.n, effort_points: effort.lon.length } };
    }
  }
  const stability: StabilitySpec | null =
    t.resamples > 0 ? { settings: fixed, seed: t.seed, lon: points.lon, lat: points.lat, weight: points.weight, labels, hotspots: result.hotspots.length, share: t.resampleShare } : null;
  return { chance, stability, observed, block };
}

function finish(result: ClusterResult, inputs: TrustInputs, p: Prepared, maxima: Float64Array | null, jaccards: Float64Array | null, ms: { simulations?: number; resamples?: number }): void {
  const t = inputs.settings;
  const timings = result.summary.timings_ms as Record<string, number>;
  if (p.chance !== null && maxima !== null) {
    const pv = monteCarloPValues(p.observed, maxima);
    let significant = 0;
    result.hotspots.forEach((h, k) => {
      h.properties.p_value = roundSignificant(pv[k], 6);
      h.properties.significant = pv[k] <= t.significanceLevel;
      if (pv[k] <= t.significanceLevel) significant++;
    });
    const sorted = Float64Array.from(maxima).sort();
    result.summary.chance = {
      null_model: t.nullModel,
      simulations: t.simulations,
      seed: t.seed,
      statistic: p.chance.weight === null ? 'count' : 'weight',
      ...p.block,
      smallest_possible_p: roundSignificant(1 / (1 + t.simulations), 6),
      significance_level: t.significanceLevel,
      significant_hotspots: significant,
      simulated_largest: { min: roundSignificant(sorted[0]), median: roundSignificant(sorted[Math.floor(sorted.length / 2)]), max: roundSignificant(sorted[sorted.length - 1]) },
      note: 'p_value is the share of simulations under this null model whose largest hotspot reaches the hotspot (Monte Carlo test, Besag & Diggle 1977); comparing with the largest keeps the chance of any false alarm at the level. A small p says "unlikely by chance under this null", nothing about cause.',
    };
    timings.simulations = Math.round((ms.simulations ?? 0) * 10) / 10;
    if (t.simulations < 19) {
      (result.summary.warnings as unknown[]).push({
        code: 'few-simulations',
        message: `With ${t.simulations} simulations no p-value can be below ${roundSignificant(1 / (1 + t.simulations), 3)}; ask for at least 19 to test at 0.05, 99 to reach 0.01.`,
      });
    }
  }
  if (p.stability !== null && jaccards !== null) {
    const mean = meanJaccards(jaccards, p.stability.hotspots);
    result.hotspots.forEach((h, k) => (h.properties.stability = Math.round(mean[k] * 1000) / 1000));
    result.summary.stability = {
      resamples: t.resamples,
      resample_share: t.resampleShare,
      seed: t.seed,
      method: 'subsampling without replacement; each hotspot scored by the mean, over resamples, of the Jaccard similarity with its best-matching hotspot (Hennig 2007)',
    };
    timings.resamples = Math.round((ms.resamples ?? 0) * 10) / 10;
  }
}

function progress(inputs: TrustInputs, what: 'simulations' | 'resamples'): TrialProgress | undefined {
  const f = inputs.onProgress;
  return f === undefined ? undefined : (done, total) => f(what, done, total);
}

/** Tests and resamples a finished run in this thread (worker threads of the service call this). */
export function assessHere(result: ClusterResult, settings: ClusterSettings, inputs: TrustInputs): void {
  const p = prepare(result, settings, inputs);
  const t0 = performance.now();
  const maxima = p.chance === null ? null : runTrialsHere({ kind: 'chance', spec: p.chance }, inputs.settings.simulations, progress(inputs, 'simulations'));
  const t1 = performance.now();
  const jaccards = p.stability === null ? null : runTrialsHere({ kind: 'stability', spec: p.stability }, inputs.settings.resamples, progress(inputs, 'resamples'));
  finish(result, inputs, p, maxima, jaccards, { simulations: t1 - t0, resamples: performance.now() - t1 });
}

/** Tests and resamples a finished run over `inputs.threads` worker threads (the command line). */
export async function assess(result: ClusterResult, settings: ClusterSettings, inputs: TrustInputs): Promise<void> {
  const p = prepare(result, settings, inputs);
  const threads = inputs.threads ?? 1;
  const run = (t: Trials, count: number, what: 'simulations' | 'resamples'): Promise<Float64Array> => runTrials(t, count, threads, progress(inputs, what));
  const t0 = performance.now();
  const maxima = p.chance === null ? null : await run({ kind: 'chance', spec: p.chance }, inputs.settings.simulations, 'simulations');
  const t1 = performance.now();
  const jaccards = p.stability === null ? null : await run({ kind: 'stability', spec: p.stability }, inputs.settings.resamples, 'resamples');
  finish(result, inputs, p, maxima, jaccards, { simulations: t1 - t0, resamples: performance.now() - t1 });
}
