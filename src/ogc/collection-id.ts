/**
 * OGC API collection ids: `<dataset>.<kind>`, the kind after the last dot (kinds have none;
 * dataset ids may). Kinds: the stored observations, the four exact layers of the latest
 * succeeded run, and the four published (generalised) layers of that run,
 * `published-hotspots` and so on. The access check reads the dataset and whether the collection
 * is a published one from the id alone.
 */
import { LAYER_NAMES, type LayerName } from '../run/layers.js';

export type PublishedKind = `published-${LayerName}`;
export type CollectionKind = 'observations' | LayerName | PublishedKind;

export const PUBLISHED_KINDS: readonly PublishedKind[] = LAYER_NAMES.map((l) => `published-${l}` as PublishedKind);
export const KINDS: readonly CollectionKind[] = ['observations', ...LAYER_NAMES, ...PUBLISHED_KINDS];

export function collectionId(datasetId: string, kind: CollectionKind): string {
  return `${datasetId}.${kind}`;
}

export function parseCollectionId(id: string): { datasetId: string; kind: CollectionKind } | null {
  const dot = id.lastIndexOf('.');
  if (dot <= 0) return null;
  const kind = id.slice(dot + 1) as CollectionKind;
  return KINDS.includes(kind) ? { datasetId: id.slice(0, dot), kind } : null;
}

export function isPublishedKind(kind: CollectionKind): kind is PublishedKind {
  return kind.startsWith('published-');
}

/** The layer a published kind is made from: `published-hotspots` → `hotspots`. */
export function layerOfPublished(kind: PublishedKind): LayerName {
  return kind.slice('published-'.length) as LayerName;
}
