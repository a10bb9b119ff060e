/**
 * The one catalogue of error kinds the service answers with, as RFC 9457 problem details.
 * Each kind has a stable `code`, a `type` URI built from it, an HTTP status and a title.
 * openapi.yaml lists the same kinds (a test keeps the two in step).
 */

/** Media type of every error body. */
export const PROBLEM_MEDIA_TYPE = 'application/problem+json';

/**
 * Prefix of every problem `type`. A tag URI (RFC 4151) names the kind without promising a web
 * page at that address, as RFC 9457 §3.1.1 suggests for types that are not meant to be fetched.
 */
export const PROBLEM_TYPE_PREFIX = 'tag:roost,2025:problem/';

export const PROBLEMS = {
  'malformed-body': { status: 400, title: 'The request body cannot be read' },
  'invalid-parameter': { status: 400, title: 'A parameter is unknown or has an invalid value' },
  'bad-request': { status: 400, title: 'The request is not valid HTTP for this service' },
  'unauthorized': { status: 401, title: 'An API key is needed' },
  'forbidden': { status: 403, title: 'The API key may not do this' },
  'request-timeout': { status: 408, title: 'The request body did not arrive in time' },
  'uri-too-long': { status: 414, title: 'The request path is longer than this service reads' },
  'not-found': { status: 404, title: 'No such resource' },
  'dataset-not-found': { status: 404, title: 'No such dataset' },
  'observation-not-found': { status: 404, title: 'No such observation in this dataset' },
  'run-not-found': { status: 404, title: 'No such run in this dataset' },
  'track-not-found': { status: 404, title: 'No such track in this dataset' },
  'collection-not-found': { status: 404, title: 'No such feature collection' },
  'feature-not-found': { status: 404, title: 'No such feature in this collection' },
  'key-not-found': { status: 404, title: 'No such API key' },
  'not-published': { status: 404, title: 'The dataset publishes no layers' },
  'no-earlier-run': { status: 404, title: 'There is no earlier succeeded run to compare with' },
  'dataset-exists': { status: 409, title: 'A dataset with this id exists' },
  'observation-conflict': { status: 409, title: 'Observations with these ids are stored with other content' },
  'run-not-ready': { status: 409, title: 'The run has no result' },
  'run-finished': { status: 409, title: 'The run is already over' },
  'body-too-large': { status: 413, title: 'The request body is larger than this service accepts' },
  'unsupported-media-type': { status: 415, title: 'The request body has a media type this endpoint does not read' },
  'host-not-allowed': { status: 421, title: 'This service does not answer for that host name' },
  'origin-not-allowed': { status: 403, title: 'Requests from that web origin may not change anything here' },
  'invalid-observations': { status: 422, title: 'Some observations are not valid' },
  'rate-limited': { status: 429, title: 'Too many requests; retry later' },
  'internal-error': { status: 500, title: 'The service failed to answer this request' },
  'overloaded': { status: 503, title: 'The service is busy; retry later' },
  'store-failed': { status: 503, title: 'The database did not store the batch; nothing of it was stored' },
  'time-limit': { status: 504, title: 'The work took longer than this service allows' },
} as const satisfies Record<string, { status: number; title: string }>;

export type ProblemCode = keyof typeof PROBLEMS;

/** The `type` URI of a problem code. */
export function problemType(code: ProblemCode): string {
  return PROBLEM_TYPE_PREFIX + code;
}

/** At most this many offending features are listed in one 422 body; `problems_total` gives the count. */
export const MAX_LISTED_PROBLEMS = 100;

/** An RFC 9457 body as the service sends it. */
export interface ProblemBody {
  type: string;
  title: string;
  status: number;
  detail: string;
  code: ProblemCode;
  request_id: string;
  [extension: string]: unknown;
}

/**
 * An error that becomes a problem+json response. `extensions` are extra members of the body
 * (for example `parameter`, `problems`); `headers` are added to the response (for example
 * Retry-After).
 */
export class HttpProblem extends Error {
  readonly code: ProblemCode;
  readonly status: number;
  readonly extensions: Record<string, unknown>;
  readonly headers: Record<string, string>;
  constructor(code: ProblemCode, detail: string, extensions: Record<string, unknown> = {}, headers: Record<string, string> = {}) {
    super(detail);
    this.name = 'HttpProblem';
    this.code = code;
    this.status = PROBLEMS[code].status;
    this.extensions = extensions;
    this.headers = headers;
  }

  /** The response body for the request with id `requestId`. */
  body(requestId: string): ProblemBody {
    const def = PROBLEMS[this.code];
    return {
      type: problemType(this.code),
      title: def.title,
      status: def.status,
      detail: this.message,
      code: this.code,
      request_id: requestId,
      ...this.extensions,
    };
  }
}
