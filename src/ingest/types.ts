/**
 * What the readers produce: the observations as a PointSet for the core, plus the original
 * features (kept untouched for the `points` output) and the per-observation extras the figures use.
 */
import type { PointSet } from '../core/types.js';

/** One GeoJSON Feature as read (properties and id kept untouched). */
export interface InputFeature {
  type: 'Feature';
  id?: string | number;
  geometry: { type: 'Point'; coordinates: number[] };
  properties: Record<string, unknown> | null;
  [member: string]: unknown;
}

export interface Observations {
  /** positions (and weights when a weight property was named) */
  points: PointSet;
  /** the features in input order (CSV rows become features with the other columns as properties) */
  features: InputFeature[];
  /** `observed_at` as epoch milliseconds, NaN where absent; null when no feature has one */
  observedAt: Float64Array | null;
}

/** One problem with one input feature (or the input as a whole when index is null). */
export interface InputProblem {
  /** 0-based position of the feature (or CSV data row) in the input, null for the whole input */
  index: number | null;
  /** the feature's id when it has one */
  id?: string | number;
  /** stable machine-readable kind, for example `not-a-point` */
  code: string;
  /** what is wrong, in plain words */
  message: string;
}

/** Bad input: carries every problem found (capped by the reader), never a partial result. */
export class InputError extends Error {
  readonly problems: InputProblem[];
  readonly total: number;
  constructor(problems: InputProblem[], total = problems.length) {
    const first = problems[0];
    // Messages that already name their item ("feature 3 …", "row 3 (line 5) …") are not prefixed again.
    const named = first !== undefined && /^(feature|row|record) \d/.test(first.message);
    const where = first && first.index !== null && !named ? `feature ${first.index}${first.id !== undefined ? ` (id ${JSON.stringify(first.id)})` : ''}: ` : '';
    const more = total > 1 ? ` (and ${total - 1} more problem${total > 2 ? 's' : ''})` : '';
    super(`${where}${first ? first.message : 'invalid input'}${more}`);
    this.name = 'InputError';
    this.problems = problems;
    this.total = total;
  }
}
