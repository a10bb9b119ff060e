/**
 * Turning posted observations into store records: each feature's canonical text (its JSON as
 * parsed, whitespace dropped, members in the order given), the SHA-256 of that text, its id, and
 * the columns a run needs (position, time, weight).
 *
 * `observed_at` and the weight are optional: a feature without a weight counts 1 in a run; a
 * weight that is present must be a number ≥ 0 (`bad-weight`).
 *
 * Ids are required. An observation's id is the GeoJSON `id` or, when the dataset names an id
 * property, that property's value (strings and numbers; numbers are written as text). A feature
 * without one is rejected (`missing-id`): a phone that retries a post must send the same id, or
 * the retry would be stored twice, and an id made from the content would merge two honest,
 * identical sightings into one.
 *
 * With `partial`, the features that pass every check are returned beside the rejected ones;
 * without it, any rejected feature throws an InputError listing them all (index, id, code,
 * message), so nothing of the batch is stored.
 */
import { createHash } from 'node:crypto';
import { parse as parseCsv } from 'csv-parse/sync';
import type { ObservationRecord } from '../storage/store.js';
import { DEFAULT_MAX_PROBLEMS } from './checks.js';
import { idProblem } from './limits.js';
import { sniffDelimiter } from './csv.js';
import { readObservations, detectFormat, type InputFormat } from './read.js';
import { InputError, type InputFeature, type InputProblem, type Observations } from './types.js';

export interface RecordOptions {
  /** input format; sniffed when absent */
  format?: InputFormat;
  /** property holding the observation id; null: the GeoJSON `id` */
  idProperty: string | null;
  /** property holding the weight (optional per feature); null: none */
  weightProperty: string | null;
  /** keep the valid features when others are bad */
  partial: boolean;
  /** CSV column names */
  lonColumn?: string | null;
  latColumn?: string | null;
  /** property (CSV: column) holding the time, and how it is written (see ReadOptions) */
  timeColumn?: string | null;
  timeFormat?: string | null;
  /** most observations in one batch (more: a `too-many-features` problem); default unlimited */
  maxFeatures?: number;
}

/** One rejected feature: where it was in the input, its id when it had one, and why. */
export interface RejectedFeature {
  index: number;
  id?: string;
  code: string;
  message: string;
}

export interface RecordBatch {
  /** the good features in input order */
  records: ObservationRecord[];
  /** input position of each record */
  indices: number[];
  /** rejected features in input order (empty unless `partial`) */
  rejected: RejectedFeature[];
}

/** SHA-256 of a text, hex. */
export function contentHash(text: string): string {
  return createHash('sha256').update(text, 'utf8').digest('hex');
}

/** The id of a feature under the dataset's id rule, or a problem saying why there is none. */
export function featureId(f: InputFeature, idProperty: string | null): string | { code: string; message: string } {
  const raw = idProperty === null ? f.id : f.properties?.[idProperty];
  const where = idProperty === null ? 'the GeoJSON "id" member' : `the property "${idProperty}"`;
  if (raw === undefined || raw === null || raw === '') {
    return { code: 'missing-id', message: `has no id: give each observation an id in ${where}, so that a repeated post is recognised instead of stored twice` };
  }
  if (typeof raw === 'string') {
    const p = idProblem(raw);
    return p === null ? raw : { code: p.code, message: `has an unusable id: ${p.message}` };
  }
  if (typeof raw === 'number' && Number.isFinite(raw)) return String(raw);
  return { code: 'bad-id', message: `has an id in ${where} that is neither a string nor a number (${JSON.stringify(raw)?.slice(0, 40)})` };
}

/** Records for observations already read and checked; features without a usable id are returned as problems. */
export function toRecords(
  obs: Observations,
  idProperty: string | null,
  weightProperty: string | null = null,
  /** CSV: weights are column text, read as numbers */
  weightFromText = false,
): { records: ObservationRecord[]; indices: number[]; problems: RejectedFeature[] } {
  const { features, points, observedAt } = obs;
  const records: ObservationRecord[] = [];
  const indices: number[] = [];
  const problems: RejectedFeature[] = [];
  for (let i = 0; i < features.length; i++) {
    const f = features[i]!;
    const id = featureId(f, idProperty);
    if (typeof id !== 'string') {
      problems.push({ index: i, code: id.code, message: `feature ${i} ${id.message}` });
      continue;
    }
    const given = weightProperty === null ? undefined : f.properties?.[weightProperty];
    const w = weightFromText && typeof given === 'string' ? (given.trim() === '' ? undefined : Number(given)) : given;
    if (w !== undefined && w !== null && !(typeof w === 'number' && w >= 0 && w <= Number.MAX_VALUE)) {
      problems.push({ index: i, id, code: 'bad-weight', message: `feature ${i} has a weight "${weightProperty}" of ${JSON.stringify(given)?.slice(0, 40)}; give a number ≥ 0, or leave it out for weight 1` });
      continue;
    }
    // CSV: the weight column becomes a number, as the reader makes it when it reads for a run,
    // so a file posted to the service and one given to the command line keep the same properties
    const numeric = weightFromText && typeof given === 'string' && typeof w === 'number' && f.properties;
    const text = JSON.stringify(numeric ? { ...f, properties: withProperty(f.properties as Record<string, unknown>, weightProperty as string, w) } : f);
    const t = observedAt === null ? NaN : observedAt[i]!;
    records.push({
      id,
      lon: points.lon[i]!,
      lat: points.lat[i]!,
      observedAt: Number.isNaN(t) ? null : t,
      weight: typeof w === 'number' ? w : null,
      feature: text,
      contentHash: contentHash(text),
    });
    indices.push(i);
  }
  return { records, indices, problems };
}

/** A copy of properties with one member's value replaced, in the same member order. */
function withProperty(p: Record<string, unknown>, name: string, value: unknown): Record<string, unknown> {
  const out: Record<string, unknown> = {};
  for (const k of Object.keys(p)) Object.defineProperty(out, k, { value: k === name ? value : p[k], enumerable: true, writable: true, configurable: true });
  return out;
}

function toRejected(p: InputProblem): RejectedFeature {
  const out: RejectedFeature = { index: p.index as number, code: p.code, message: p.message };
  if (typeof p.id === 'string' || typeof p.id === 'number') out.id = String(p.id);
  return out;
}

/**
 * The input with the given items (features, text-sequence records or CSV data rows) left out,
 * in a form the same reader reads. GeoJSON and sequences become a FeatureCollection; CSV keeps
 * its header and the raw text of the remaining rows.
 */
function withoutItems(text: string, format: InputFormat, drop: Set<number>): { text: string; format: InputFormat; kept: number[] } {
  const kept: number[] = [];
  if (format === 'csv') {
    const rows = parseCsv(text, { delimiter: sniffDelimiter(text), bom: true, relax_column_count: true, skip_empty_lines: true, raw: true }) as unknown as { raw: string }[];
    const parts: string[] = [rows[0]!.raw];
    for (let i = 1; i < rows.length; i++) {
      if (drop.has(i - 1)) continue;
      kept.push(i - 1);
      parts.push(rows[i]!.raw.endsWith('\n') ? rows[i]!.raw : rows[i]!.raw + '\n');
    }
    return { text: parts.join(''), format, kept };
  }
  let items: string[];
  if (format === 'geojson') {
    const root = JSON.parse(text) as { type?: string; features?: unknown[] };
    items = (root.type === 'FeatureCollection' ? (root.features ?? []) : [root]).map((f) => JSON.stringify(f));
  } else {
    items = text.split(/[\x1e\n]/).map((s) => s.trim()).filter((s) => s !== '');
  }
  const good: string[] = [];
  for (let i = 0; i < items.length; i++) {
    if (drop.has(i)) continue;
    kept.push(i);
    good.push(items[i]!);
  }
  return { text: `{"type":"FeatureCollection","features":[${good.join(',')}]}`, format: 'geojson', kept };
}

/**
 * Reads a posted body into store records.
 * @throws InputError for a body that cannot be read at all (whole-input problems, index null),
 *   and, unless `partial`, for any rejected feature (all listed up to 100, the total counted).
 */
export function readRecords(input: Buffer | string, options: RecordOptions): RecordBatch {
  const text = typeof input === 'string' ? input : input.toString('utf8');
  const format = options.format ?? detectFormat(text);
  const read = (t: string, f: InputFormat, maxProblems: number): Observations =>
    readObservations(t, {
      format: f,
      // weights are optional here (the reader requires one on every feature when named): checked in toRecords
      weightProperty: null,
      storable: true,
      lonColumn: options.lonColumn ?? undefined,
      latColumn: options.latColumn ?? undefined,
      timeColumn: options.timeColumn,
      timeFormat: options.timeFormat,
      idProperty: options.idProperty,
      maxProblems,
      maxFeatures: options.maxFeatures,
    });
  const maxProblems = options.partial ? Number.MAX_SAFE_INTEGER : DEFAULT_MAX_PROBLEMS;
  let obs: Observations;
  let positions: number[] | null = null;
  let readerRejected: RejectedFeature[] = [];
  try {
    obs = read(text, format, maxProblems);
  } catch (err) {
    if (!(err instanceof InputError) || !options.partial || err.problems.some((p) => p.index === null)) throw err;
    readerRejected = err.problems.map(toRejected);
    const rest = withoutItems(text, format, new Set(readerRejected.map((r) => r.index)));
    if (rest.kept.length === 0) return { records: [], indices: [], rejected: readerRejected };
    obs = read(rest.text, rest.format, maxProblems);
    positions = rest.kept;
  }
  const { records, indices, problems } = toRecords(obs, options.idProperty, options.weightProperty, format === 'csv');
  const at = (i: number): number => (positions === null ? i : positions[i]!);
  const idProblems = problems.map((p) => ({ ...p, index: at(p.index), message: p.message.replace(/^feature \d+/, `feature ${at(p.index)}`) }));
  const rejected = [...readerRejected, ...idProblems].sort((a, b) => a.index - b.index);
  if (!options.partial && rejected.length > 0) {
    throw new InputError(
      rejected.slice(0, DEFAULT_MAX_PROBLEMS).map((r) => ({ index: r.index, ...(r.id !== undefined ? { id: r.id } : {}), code: r.code, message: r.message })),
      rejected.length,
    );
  }
  return { records, indices: indices.map(at), rejected };
}
