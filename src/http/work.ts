/**
 * What the main thread sends to a worker and what comes back. Bodies travel as transferred
 * bytes both ways, so neither side copies or re-parses the other's data.
 */
import type { LayerName } from '../run/layers.js';
import type { ArrivingShare } from './arriving.js';
import type { ProblemCode } from './errors.js';

/** Input formats, named as the clustering pipeline names them. */
export type BodyFormat = 'geojson' | 'csv' | 'geojson-seq';


export interface WorkTask {
  op: 'cluster' | 'k-distance' | 'sweep';
  /**
   * the raw request body; its ArrayBuffer is transferred to the worker (a SharedArrayBuffer, the
   * body of a request read while it arrives, is shared)
   */
  body: Uint8Array;
  /** for `cluster`: the body is still arriving into `body`'s shared memory (src/http/arriving.ts) */
  arriving?: ArrivingShare | undefined;
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

/**
 * No answer from a body read while it arrived: the upload failed (`abandoned`: the upload's own
 * problem is the answer), or the body is to be read again whole once it has arrived (`read-again`).
 */
export interface WorkUnanswered {
  ok: false;
  code: 'abandoned' | 'read-again';
}

export type WorkResult = WorkDone | WorkRejected | WorkFailed | WorkUnanswered;
