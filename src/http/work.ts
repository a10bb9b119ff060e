/**
 * What the main thread sends to a worker and what comes back. Bodies travel as transferred
 * bytes both ways, so neither side copies or re-parses the other's data.
 */
import type { LayerName } from '../run/layers.js';
import type { ProblemCode } from './errors.js';

/** Input formats, named as the clustering pipeline names them. */
export type BodyFormat = 'geojson' | 'csv' | 'geojson-seq';


export interface WorkTask {
  op: 'cluster' | 'k-distance' | 'sweep';
  /** the raw request body; its ArrayBuffer is transferred to the worker */
  body: Uint8Array;
  format: BodyFormat;
  /** settings from the query string, as the client wrote them (strings or string arrays) */
  query: Record<string, unknown>;
  /** for `cluster`: one layer alone, or null for the whole result document */
  layer: LayerName | null;
}

/** Success: the response body, ready to send, with its media type. */
export interface WorkDone {
  ok: true;
  contentType: string;
  body: Uint8Array;
}

/** The client's input was at fault: a problem to send as it is. */
export interface WorkRejected {
  ok: false;
  code: Extract<ProblemCode, 'malformed-body' | 'invalid-parameter' | 'invalid-observations' | 'body-too-large'>;
  detail: string;
  extensions: Record<string, unknown>;
}

/** The service failed; `detail` and `stack` are for the log only, never for the client. */
export interface WorkFailed {
  ok: false;
  code: 'internal-error';
  detail: string;
  stack: string | undefined;
}

export type WorkResult = WorkDone | WorkRejected | WorkFailed;
