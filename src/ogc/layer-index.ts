/**
 * A stored result layer cut into its features, for paging and filtering without rewriting them:
 * each feature stays the exact text the run wrote (so reals keep their decimal point), and beside
 * it are kept its id, its bounding box and its time span. The layer is held as its UTF-8 bytes
 * with each feature's place in them, and a feature is cut out only when a page asks for it. The
 * scan and the parse of every feature (`indexParts`) are the costly part; the service does them
 * in a job thread (src/ogc/layers.ts). Indexes are kept with the layers' bytes in
 * src/ogc/layer-cache.ts.
 */
import { Buffer } from 'node:buffer';
import { bboxOf, type GeometryLike } from '../geometry/geojson.js';
import type { Bbox, TimeInterval } from './query.js';
import { bboxesIntersect, timeIntersects } from './query.js';

export interface LayerIndex {
  /** features in the layer */
  count: number;
  /** the text of feature `k`, exactly as the run wrote it */
  feature(k: number): string;
  /** the position of the first feature whose id (as text) is `id`, or -1 */
  find(id: string): number;
  /** the id (as text, '' when absent) of feature `k` */
  idOf(k: number): string;
  /** per feature: west, south, east, north (NaN for a null geometry) */
  boxes: Float64Array;
  /** per feature: first and last time in epoch ms (NaN when unknown) */
  times: Float64Array;
  /** the collection's bbox member, or null */
  bbox: Bbox | null;
  /** earliest and latest time over all features, epoch ms (null when none has a time) */
  interval: [number, number] | null;
  /** bytes of layer text held */
  bytes: number;
}

/**
 * An index as a thread hands it over, without the layer's bytes: typed arrays and one string, so
 * that passing it between threads copies a few arrays rather than one string per feature.
 */
export interface LayerIndexParts {
  /** per feature: start and end (exclusive) in the layer's UTF-8 bytes */
  spans: Float64Array;
  /** the features' ids as text, one after another */
  ids: string;
  /** per feature: where its id ends in `ids` */
  idEnds: Float64Array;
  boxes: Float64Array;
  times: Float64Array;
  bbox: Bbox | null;
  interval: [number, number] | null;
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

/**
 * The work of indexing a layer, given its UTF-8 bytes (run in a job thread by the service, see
 * src/ogc/layers.ts): where each feature starts and ends, its id, bounding box and time span.
 */
export function indexParts(bytes: Uint8Array): LayerIndexParts {
  const buf = Buffer.from(bytes.buffer, bytes.byteOffset, bytes.byteLength);
  const text = buf.toString('utf8');
  const { spans: chars, head } = featureSpans(text);
  const count = chars.length / 2;
  const spans = new Float64Array(2 * count);
  // character positions to byte positions: the same when the text is ASCII, else counted along
  const ascii = text.length === buf.length;
  let charAt = 0;
  let byteAt = 0;
  for (let k = 0; k < chars.length; k++) {
    const c = chars[k]!;
    if (!ascii) {
      byteAt += Buffer.byteLength(text.slice(charAt, c), 'utf8');
      charAt = c;
    }
    spans[k] = ascii ? c : byteAt;
  }
  const ids: string[] = new Array<string>(count);
  const idEnds = new Float64Array(count);
  const boxes = new Float64Array(4 * count).fill(NaN);
  const times = new Float64Array(2 * count).fill(NaN);
  let lo = Infinity;
  let hi = -Infinity;
  let idAt = 0;
  for (let k = 0; k < count; k++) {
    const parsed = JSON.parse(text.slice(chars[2 * k]!, chars[2 * k + 1]!)) as { id?: string | number; geometry: GeometryLike | null; properties: Record<string, unknown> | null };
    const id = parsed.id === undefined ? '' : String(parsed.id);
    ids[k] = id;
    idAt += id.length;
    idEnds[k] = idAt;
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
  return { spans, ids: ids.join(''), idEnds, boxes, times, bbox, interval: lo <= hi ? [lo, hi] : null };
}

/** The index over a layer's bytes and the parts made of them: features are cut out of the bytes when asked for. */
export function layerIndexFrom(bytes: Uint8Array, parts: LayerIndexParts): LayerIndex {
  const buf = Buffer.from(bytes.buffer, bytes.byteOffset, bytes.byteLength);
  const { spans, ids, idEnds } = parts;
  const count = idEnds.length;
  const idOf = (k: number): string => ids.slice(k === 0 ? 0 : idEnds[k - 1]!, idEnds[k]!);
  return {
    count,
    feature: (k) => buf.toString('utf8', spans[2 * k]!, spans[2 * k + 1]!),
    idOf,
    find(id) {
      for (let k = 0, start = 0; k < count; k++) {
        const end = idEnds[k]!;
        if (end - start === id.length && ids.startsWith(id, start)) return k;
        start = end;
      }
      return -1;
    },
    boxes: parts.boxes,
    times: parts.times,
    bbox: parts.bbox,
    interval: parts.interval,
    bytes: buf.length,
  };
}

/** Builds the index of a layer from its text, on this thread. */
export function indexLayer(text: string): LayerIndex {
  const bytes = Buffer.from(text, 'utf8');
  return layerIndexFrom(bytes, indexParts(bytes));
}

export interface LayerFilter {
  bbox: Bbox | null;
  datetime: TimeInterval | null;
}

/** Positions of the features that pass the filter, in layer order. */
export function matching(index: LayerIndex, filter: LayerFilter): number[] | null {
  if (filter.bbox === null && filter.datetime === null) return null;
  const out: number[] = [];
  const n = index.count;
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
