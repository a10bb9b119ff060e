/**
 * OGC API collection ids: `<dataset>.<kind>`, the kind after the last dot (kinds have none;
 * dataset ids may). Kinds: the stored observations, the four exact layers of the latest
 * succeeded run, and the four published (generalised) layers of that run,
 * `published-hotspots` and so on. A named run's layers are `<dataset>@<run>.<kind>` (dataset ids
 * hold no `@`, run ids no dot). The access check reads the dataset and whether the collection is
 * a published one from the id alone.
 */
import { LAYER_NAMES, type LayerName } from '../run/layers.js';

export type PublishedKind = `published-${LayerName}`;
export type CollectionKind = 'observations' | LayerName | PublishedKind;

export const PUBLISHED_KINDS: readonly PublishedKind[] = LAYER_NAMES.map((l) => `published-${l}` as PublishedKind);
export const KINDS: readonly CollectionKind[] = ['observations', ...LAYER_NAMES, ...PUBLISHED_KINDS];

export function collectionId(datasetId: string, kind: CollectionKind, runId: string | null = null): string {
  return runId === null ? `${datasetId}.${kind}` : `${datasetId}@${runId}.${kind}`;
}

/** The parts of a collection id; `runId` null for the latest run's (or the observations). */
export function parseCollectionId(id: string): { datasetId: string; kind: CollectionKind; runId: string | null } | null {
  const dot = id.lastIndexOf('.');
  if (dot <= 0) return null;
  const kind = id.slice(dot + 1) as CollectionKind;
  if (!KINDS.includes(kind)) return null;
  const head = id.slice(0, dot);
  const at = head.indexOf('@');
  if (at < 0) return { datasetId: head, kind, runId: null };
  const runId = head.slice(at + 1);
  // a run's layers only: the observations belong to no run
  if (at === 0 || runId === '' || runId.includes('@') || kind === 'observations') return null;
  return { datasetId: head.slice(0, at), kind, runId };
}

export function isPublishedKind(kind: CollectionKind): kind is PublishedKind {
  return kind.startsWith('published-');
}

/** The layer a published kind is made from: `published-hotspots` → `hotspots`. */
export function layerOfPublished(kind: PublishedKind): LayerName {
  return kind.slice('published-'.length) as LayerName;
}
