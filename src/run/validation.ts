/**
 * The validation figures of a run as its settings ask for them (`validation`, `reference`), and
 * the `validation` block of its summary. The figures themselves are in src/trust/validation.ts.
 */
import type { Clustering, PointSet } from '../core/types.js';
import { roundDecimals } from '../geometry/rounding.js';
import { internalFigures, referenceFigures, VALIDATION_SAMPLE, VALIDATION_SEED, type AgreementFigures, type InternalFigures, type ReferenceFigures } from '../trust/validation.js';
import type { ClusterSettings } from './settings.js';

export interface RunValidation {
  internal: InternalFigures | null;
  reference: ReferenceFigures | null;
}

/**
 * @param values the reference property's value per observation (as text, null where missing),
 *   or null when no reference was asked for
 */
export function validationFigures(points: PointSet, clustering: Clustering, settings: ClusterSettings, values: (string | null)[] | null): RunValidation {
  return {
    internal: settings.validation ? internalFigures(points, clustering.labels) : null,
    reference: settings.referenceProperty && values ? referenceFigures(settings.referenceProperty, clustering.labels, clustering.count, values) : null,
  };
}

const r6 = (x: number | null): number | null => (x === null ? null : roundDecimals(x, 6));

function agreementBlock(a: AgreementFigures): Record<string, unknown> {
  return {
    observations: a.observations,
    groups: a.clusters,
    reference_values: a.classes,
    purity: r6(a.purity),
    rand_index: r6(a.randIndex),
    adjusted_rand_index: r6(a.adjustedRandIndex),
    nmi: r6(a.nmi),
  };
}

/** The summary's `validation` member, or nothing when neither figure was asked for. */
export function validationBlock(v: RunValidation): { validation?: Record<string, unknown> } {
  if (v.internal === null && v.reference === null) return {};
  const out: Record<string, unknown> = {};
  if (v.internal !== null) {
    const i = v.internal;
    out.internal = {
      observations: i.observations,
      sample: i.sampled ? { size: VALIDATION_SAMPLE, seed: VALIDATION_SEED } : null,
      silhouette: r6(i.silhouette),
      dbcv: r6(i.dbcv),
      ...(Object.keys(i.notComputed).length > 0 ? { not_computed: i.notComputed } : {}),
    };
  }
  if (v.reference !== null) {
    const r = v.reference;
    out.reference = {
      property: r.property,
      labelled: r.labelled,
      unlabelled: r.unlabelled,
      noise_excluded: agreementBlock(r.noiseExcluded),
      noise_as_group: agreementBlock(r.noiseAsGroup),
    };
  }
  return { validation: out };
}
