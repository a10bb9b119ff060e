/**
 * A stored result layer cut into its features, for paging and filtering without rewriting them:
 * each feature stays the exact text the run wrote (so reals keep their decimal point), and beside
 * it are kept its id, its bounding box and its time span. Stored layers never change once their
 * run has succeeded, so an index is kept per (run, layer) in a small cache bounded by the text it
 * holds.
 */
import { bboxOf, type GeometryLike } from '../geometry/geojson.js';
import type { Bbox, TimeInterval } from './query.js';
import { bboxesIntersect, timeIntersects } from './query.js';

export interface LayerIndex {
  /** the features' texts, in layer order */
  features: string[];
  /** the features' ids as text (the GeoJSON `id`), '' when absent */
  ids: string[];
  /** per feature: west, south, east, north (NaN for a null geometry) */
  boxes: Float64Array;
  /** per feature: first and last time in epoch ms (NaN when unknown) */
  times: Float64Array;
  /** the collection's bbox member, or null */
  bbox: Bbox | null;
  /** earliest and latest time over all features, epoch ms (null when none has a time) */
  interval: [number, number] | null;
  /** characters held */
  chars: number;
}

/**
 * Spans of the members of the top-level `features` array of a FeatureCollection text: start and
 * end (exclusive) of each feature. A scan that follows strings and nesting only; the text was
 * written by this service, so it is valid JSON.
 */
export function featureSpans(text: string): { spans: number[]; head: string } {
  const spans: number[] = [];
  let depth = 0;
  let i = 0;
  let inFeatures = false;
  let featureStart = -1;
  let lastKey = '';
  let head = '';
  const n = text.length;
  while (i < n) {
    const c = text.charCodeAt(i);
    if (c === 34 /* " */) {
      let j = i + 1;
      for (;;) {
        const q = text.indexOf('"', j);
        if (q < 0) throw new Error('layer text: unterminated string');
        let b = q - 1;
        while (text.charCodeAt(b) === 92 /* \ */) b--;
        if ((q - 1 - b) % 2 === 0) {
          j = q;
          break;
        }
        j = q + 1;
      }
      if (depth === 1) lastKey = text.slice(i + 1, j);
      i = j + 1;
      continue;
    }
    if (c === 123 /* { */ || c === 91 /* [ */) {
      depth++;
      if (depth === 2 && c === 91 && lastKey === 'features') {
        inFeatures = true;
        head = text.slice(0, i) + '[]}';
      } else if (depth === 3 && inFeatures) featureStart = i;
    } else if (c === 125 /* } */ || c === 93 /* ] */) {
      if (depth === 3 && inFeatures) spans.push(featureStart, i + 1);
      if (depth === 2 && inFeatures) inFeatures = false;
      depth--;
    }
    i++;
  }
  return { spans, head };
}

function timeOf(v: unknown): number {
  return typeof v === 'string' ? Date.parse(v) : NaN;
}

/** Builds the index of a layer from its text (the stored pieces joined). */
export function indexLayer(text: string): LayerIndex {
  const { spans, head } = featureSpans(text);
  const count = spans.length / 2;
  const features = new Array<string>(count);
  const ids = new Array<string>(count);
  const boxes = new Float64Array(4 * count).fill(NaN);
  const times = new Float64Array(2 * count).fill(NaN);
  let lo = Infinity;
  let hi = -Infinity;
  for (let k = 0; k < count; k++) {
    const f = text.slice(spans[2 * k]!, spans[2 * k + 1]!);
    features[k] = f;
    const parsed = JSON.parse(f) as { id?: string | number; geometry: GeometryLike | null; properties: Record<string, unknown> | null };
    ids[k] = parsed.id === undefined ? '' : String(parsed.id);
    const box = parsed.geometry === null ? null : bboxOf([parsed.geometry]);
    if (box) boxes.set(box, 4 * k);
    const p = parsed.properties ?? {};
    const first = 'first_observed_at' in p ? timeOf(p['first_observed_at']) : timeOf(p['observed_at']);
    const last = 'last_observed_at' in p ? timeOf(p['last_observed_at']) : first;
    times[2 * k] = first;
    times[2 * k + 1] = last;
    if (Number.isFinite(first) && first < lo) lo = first;
    if (Number.isFinite(last) && last > hi) hi = last;
  }
  const headDoc = JSON.parse(head) as { bbox?: number[] };
  const bbox = Array.isArray(headDoc.bbox) && headDoc.bbox.length >= 4 ? ([headDoc.bbox[0], headDoc.bbox[1], headDoc.bbox[headDoc.bbox.length === 6 ? 3 : 2], headDoc.bbox[headDoc.bbox.length === 6 ? 4 : 3]] as Bbox) : null;
  return { features, ids, boxes, times, bbox, interval: lo <= hi ? [lo, hi] : null, chars: text.length };
}

export interface LayerFilter {
  bbox: Bbox | null;
  datetime: TimeInterval | null;
}

/** Positions of the features that pass the filter, in layer order. */
export function matching(index: LayerIndex, filter: LayerFilter): number[] | null {
  if (filter.bbox === null && filter.datetime === null) return null;
  const out: number[] = [];
  const n = index.features.length;
  for (let k = 0; k < n; k++) {
    if (filter.bbox !== null) {
      const w = index.boxes[4 * k]!;
      if (Number.isNaN(w)) continue;
      if (!bboxesIntersect([w, index.boxes[4 * k + 1]!, index.boxes[4 * k + 2]!, index.boxes[4 * k + 3]!], filter.bbox)) continue;
    }
    if (filter.datetime !== null && !timeIntersects(index.times[2 * k]!, index.times[2 * k + 1]!, filter.datetime)) continue;
    out.push(k);
  }
  return out;
}

/** A small cache of layer indexes, bounded by the characters they hold (least recently used out first). */
export class LayerIndexCache {
  private readonly entries = new Map<string, Promise<LayerIndex>>();
  private readonly sizes = new Map<string, number>();
  constructor(private readonly maxChars = 256 * 1024 * 1024) {}

  async get(key: string, load: () => Promise<string>): Promise<LayerIndex> {
    const hit = this.entries.get(key);
    if (hit) {
      this.entries.delete(key);
      this.entries.set(key, hit);
      return hit;
    }
    const p = load().then(indexLayer);
    this.entries.set(key, p);
    try {
      const index = await p;
      this.sizes.set(key, index.chars);
      this.trim(key);
      return index;
    } catch (err) {
      this.entries.delete(key);
      throw err;
    }
  }

  private trim(keep: string): void {
    let total = 0;
    for (const s of this.sizes.values()) total += s;
    for (const key of this.entries.keys()) {
      if (total <= this.maxChars) break;
      if (key === keep || !this.sizes.has(key)) continue;
      total -= this.sizes.get(key)!;
      this.sizes.delete(key);
      this.entries.delete(key);
    }
  }
}
