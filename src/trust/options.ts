/**
 * Settings of the Monte Carlo test and the resampling, named as the API, stored datasets and
 * (as --kebab-case) the command line spell them. They are kept apart from the clustering
 * settings (src/run/settings.ts) because they say how far to trust a result, not how to make it.
 */
import { SettingsError, parseCondition, resolveSettings, type ClusterSettings } from '../run/settings.js';
import type { NullModel } from './chance.js';

export interface TrustSettings {
  /** simulations of the Monte Carlo test; 0 when no test is asked for */
  simulations: number;
  /** seed of every simulation's and resample's random stream */
  seed: number;
  /** the null model of the test */
  nullModel: NullModel;
  /** effort points are the observations whose property equals the value (the others are cases) */
  effortWhere: { property: string; value: string } | null;
  /** resamples for stability; 0 when none are asked for */
  resamples: number;
  /** share of the observations each resample keeps */
  resampleShare: number;
  /** hotspots with p above this are marked not significant */
  significanceLevel: number;
}

/** Simulations when a test is asked for (by naming a null model) without a number: 99 gives p down to 0.01. */
export const DEFAULT_SIMULATIONS = 99;

export const DEFAULT_TRUST: Readonly<TrustSettings> = Object.freeze({
  simulations: 0,
  seed: 1,
  nullModel: 'csr',
  effortWhere: null,
  resamples: 0,
  resampleShare: 0.8,
  significanceLevel: 0.05,
});

/** The names, as the API spells them. */
export const TRUST_SETTING_NAMES = ['simulations', 'seed', 'null_model', 'effort_where', 'resamples', 'resample_share', 'significance_level'] as const;
export type TrustSettingName = (typeof TRUST_SETTING_NAMES)[number];

/** Most simulations or resamples one run may ask for. */
export const MAX_TRIALS = 9999;

function whole(name: string, raw: unknown, min: number, max: number): number {
  const v = typeof raw === 'number' ? raw : typeof raw === 'string' && raw.trim() !== '' ? Number(raw) : NaN;
  if (!Number.isInteger(v) || v < min || v > max) throw new SettingsError(name, `must be a whole number from ${min} to ${max}, got ${JSON.stringify(raw)}`);
  return v;
}

function share(name: string, raw: unknown, lo: number, hi: number): number {
  const v = typeof raw === 'number' ? raw : typeof raw === 'string' && raw.trim() !== '' ? Number(raw) : NaN;
  if (!(v > lo && v < hi)) throw new SettingsError(name, `must be a number above ${lo} and below ${hi}, got ${JSON.stringify(raw)}`);
  return v;
}

/** Whether a name is one of the trust settings. */
export function isTrustSetting(name: string): name is TrustSettingName {
  return (TRUST_SETTING_NAMES as readonly string[]).includes(name);
}

/**
 * Splits settings by name into clustering settings and trust settings (for query strings and
 * stored datasets that carry both).
 */
export function splitTrustSettings(input: Record<string, unknown>): { clustering: Record<string, unknown>; trust: Record<string, unknown> } {
  const clustering: Record<string, unknown> = {};
  const trust: Record<string, unknown> = {};
  for (const [k, v] of Object.entries(input)) (isTrustSetting(k) ? trust : clustering)[k] = v;
  return { clustering, trust };
}

/**
 * Validates and completes trust settings. Naming a null model (or effort points) without a
 * number of simulations asks for 99; a number of simulations without a null model tests
 * against csr, or against effort when effort points are named.
 * @param effortGiven whether effort points come from elsewhere (a file or a dataset)
 */
export function resolveTrustSettings(input: Record<string, unknown>, base: Readonly<TrustSettings> = DEFAULT_TRUST, effortGiven = false): TrustSettings {
  const s: TrustSettings = { ...base };
  let modelGiven = false;
  let simsGiven = false;
  for (const [name, raw] of Object.entries(input)) {
    if (!isTrustSetting(name)) throw new SettingsError(name, `unknown setting; known settings are ${TRUST_SETTING_NAMES.join(', ')}`);
    if (raw === undefined || raw === null || raw === '') continue;
    switch (name) {
      case 'simulations':
        s.simulations = whole(name, raw, 0, MAX_TRIALS);
        simsGiven = true;
        break;
      case 'seed':
        s.seed = whole(name, raw, 0, 4294967295);
        break;
      case 'null_model':
        if (raw !== 'csr' && raw !== 'effort') throw new SettingsError(name, `must be csr or effort, got ${JSON.stringify(raw)}`);
        s.nullModel = raw;
        modelGiven = true;
        break;
      case 'effort_where':
        s.effortWhere = parseCondition(raw);
        break;
      case 'resamples':
        s.resamples = whole(name, raw, 0, MAX_TRIALS);
        break;
      case 'resample_share':
        s.resampleShare = share(name, raw, 0, 1);
        break;
      case 'significance_level':
        s.significanceLevel = share(name, raw, 0, 1);
        break;
    }
  }
  const effortNamed = effortGiven || s.effortWhere !== null;
  if (!modelGiven && effortNamed && (simsGiven || base.simulations === 0)) s.nullModel = 'effort';
  if (!simsGiven && (modelGiven || (effortNamed && base.simulations === 0)) && s.simulations === 0) s.simulations = DEFAULT_SIMULATIONS;
  if (s.nullModel === 'effort' && s.simulations > 0 && !effortNamed) {
    throw new SettingsError('null_model', 'effort needs effort points: a file of them (--effort), another dataset, or a property marking them among the observations (effort_where=property=value)');
  }
  if (s.nullModel === 'csr' && s.effortWhere !== null) {
    throw new SettingsError('effort_where', 'names effort points, which only the effort null model uses; ask for null_model=effort or leave effort_where out');
  }
  return s;
}

/** The settings as plain API-named members. */
export function trustRecord(s: TrustSettings): Record<TrustSettingName, unknown> {
  return {
    simulations: s.simulations,
    seed: s.seed,
    null_model: s.nullModel,
    effort_where: s.effortWhere,
    resamples: s.resamples,
    resample_share: s.resampleShare,
    significance_level: s.significanceLevel,
  };
}

/**
 * Clustering and trust settings from one record that carries both (a dataset's settings, a stored
 * run's, a query string), each checked by its own validator. A stored dataset names effort points
 * only by a marker among its observations (effort_where).
 */
export function resolveRunSettings(input: Record<string, unknown>): { clustering: ClusterSettings; trust: TrustSettings } {
  const { clustering, trust } = splitTrustSettings(input);
  return { clustering: resolveSettings(clustering), trust: resolveTrustSettings(trust) };
}

/** The clustering settings of a record that may also carry trust settings. */
export function resolveClusterPart(input: Record<string, unknown>): ClusterSettings {
  return resolveSettings(splitTrustSettings(input).clustering);
}
