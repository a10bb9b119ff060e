/**
 * Request bodies are collected as raw bytes and never parsed on the main thread: a worker reads
 * them. The bytes end in a buffer of the exact size, which owns its memory and can be transferred
 * to a worker without copying. Content-Length is trusted for an early 413 and, once an eighth of
 * the declared bytes has truly arrived, for the size of that buffer: from then on each chunk is
 * copied straight in, so a body is held about 1.125 times, never twice. A client cannot use this
 * to hold more than honest clients can: the buffer is no larger than the body limit, and each
 * body takes an upload slot. Without Content-Length the chunks are kept and joined at the end.
 */
import type { FastifyRequest } from 'fastify';
import type { ArrivingBody } from './arriving.js';
import { HttpProblem } from './errors.js';
import type { BodyFormat } from './work.js';

/** Media types the clustering endpoints read, and the reader each one goes to. */
export const BODY_MEDIA_TYPES: Readonly<Record<string, BodyFormat>> = {
  'application/geo+json': 'geojson',
  'application/json': 'geojson',
  'text/csv': 'csv',
  'application/geo+json-seq': 'geojson-seq',
};

/** The reader for a Content-Type header value (parameters such as charset are ignored). */
export function formatOf(contentType: string | undefined): BodyFormat | undefined {
  const essence = (contentType ?? '').split(';')[0]!.trim().toLowerCase();
  return BODY_MEDIA_TYPES[essence];
}

/** Bytes in their own ArrayBuffer (Buffer.allocUnsafe may hand out a slice of a shared pool). */
function ownBuffer(size: number): Buffer {
  return Buffer.allocUnsafeSlow(size);
}

function tooLarge(limitBytes: number): HttpProblem {
  return new HttpProblem(
    'body-too-large',
    `The request body is larger than ${limitBytes} bytes. Send fewer observations per request, or ask the operator to raise --body-limit.`,
    { limit_bytes: limitBytes },
  );
}

/**
 * The bodies being received at once, across every route that reads one. A body holds an upload
 * slot from its first byte to its last, and no longer; a client sending slowly holds only that,
 * never a worker or a place in the waiting line, and is cut at the deadline.
 */
export interface UploadAllowance {
  /** bodies being received now */
  readonly inProgress: number;
  /** the most bytes one body has held at once while it was received (its chunks and its buffer) */
  readonly peakHeldBytes: number;
}

/** Share of the declared length that must arrive before a buffer of the declared length is made. */
const DECLARED_TRUST_SHARE = 8;

/**
 * Set on a request by its route before the body is read: called once the declared length is
 * trusted, it may return a shared buffer of that length (src/http/arriving.ts) to receive the
 * body into, for work that reads the body while it arrives; it is told when the body ends whole
 * (`complete`) or not (`fail`). Null: the body is received as any other.
 */
export const READ_WHILE_ARRIVING = Symbol('read while arriving');
export type ArrivalStart = (declared: number) => ArrivingBody | null;
type ArrivalRequest = FastifyRequest & { [READ_WHILE_ARRIVING]?: ArrivalStart };

export interface BodyOptions {
  /** largest accepted body, bytes */
  limitBytes: number;
  /** bodies received at once; one more is answered 503 before it is read */
  uploads: number;
  /** time allowed for a whole body to arrive, milliseconds; a slower sender gets 408 and the connection is closed */
  uploadTimeoutMs: number;
  /** seconds a turned-away client is asked to wait */
  retryAfterS: number;
}

type BodyDone = (err: Error | null, body?: Uint8Array, peakHeld?: number) => void;

/**
 * One body on its way in: its chunks, its deadline and its listeners, until it ends one way or
 * another (whole, too long, too short, too slow, broken, or abandoned by the client); `done` is
 * called exactly once.
 */
class BodyReceipt {
  private readonly chunks: Buffer[] = [];
  private received = 0;
  /** the declared-size buffer, once enough of the body has arrived to trust its Content-Length */
  private whole: Buffer | null = null;
  /** the shared buffer `whole` is, when the body is read while it arrives */
  private arriving: ArrivingBody | null = null;
  /** bytes held in `chunks` */
  private chunked = 0;
  private peakHeld = 0;
  private finished = false;
  private readonly deadline: NodeJS.Timeout;

  /** `declared` is the Content-Length when it is a whole number, else null. */
  constructor(
    private readonly payload: NodeJS.ReadableStream,
    private readonly declared: number | null,
    private readonly options: BodyOptions,
    private readonly done: BodyDone,
    private readonly arrivalStart: ArrivalStart | undefined,
  ) {
    this.deadline = setTimeout(this.onDeadline, options.uploadTimeoutMs);
    this.deadline.unref();
    payload.on('data', this.onData);
    payload.on('end', this.onEnd);
    payload.on('error', this.onError);
    payload.on('close', this.onClose);
    payload.resume();
  }

  private finish(err: Error | null, body?: Uint8Array): void {
    if (this.finished) return;
    this.finished = true;
    clearTimeout(this.deadline);
    this.payload.removeListener('data', this.onData);
    this.payload.removeListener('end', this.onEnd);
    this.payload.removeListener('error', this.onError);
    this.payload.removeListener('close', this.onClose);
    this.chunks.length = 0;
    this.whole = null;
    if (err) this.arriving?.fail();
    else this.arriving?.complete();
    this.arriving = null;
    this.done(err, body, this.peakHeld);
  }

  private readonly onDeadline = (): void => {
    const { uploadTimeoutMs } = this.options;
    this.finish(
      new HttpProblem(
        'request-timeout',
        `The request body did not arrive within ${uploadTimeoutMs} ms (${this.received} bytes came); send it faster or in smaller parts, or ask the operator to raise --upload-timeout-ms.`,
        { upload_timeout_ms: uploadTimeoutMs },
        { connection: 'close' },
      ),
    );
    // stop reading: what is still on its way is not wanted
    this.payload.pause();
  };

  private readonly onData = (chunk: Buffer | string): void => {
    const bytes = typeof chunk === 'string' ? Buffer.from(chunk) : chunk;
    const next = this.received + bytes.length;
    if (next > this.options.limitBytes) {
      this.finish(tooLarge(this.options.limitBytes));
      return;
    }
    if (this.declared !== null && next > this.declared) {
      this.finish(new HttpProblem('bad-request', 'The request body is longer than its Content-Length header says.'));
      return;
    }
    if (this.whole) {
      bytes.copy(this.whole, this.received);
    } else {
      this.chunks.push(bytes);
      this.chunked += bytes.length;
      if (this.declared !== null && next * DECLARED_TRUST_SHARE >= this.declared) {
        // enough has arrived to believe the declared length: one buffer of that size from here on
        this.arriving = this.arrivalStart?.(this.declared) ?? null;
        this.whole = this.arriving ? this.arriving.buffer : ownBuffer(this.declared);
        this.peakHeld = Math.max(this.peakHeld, this.chunked + this.declared);
        this.joinChunksInto(this.whole);
      }
    }
    this.received = next;
    this.arriving?.filled(next);
    this.peakHeld = Math.max(this.peakHeld, this.chunked + (this.whole ? this.whole.length : 0));
  };

  /** Copies the kept chunks into `target` from its start and lets them go. */
  private joinChunksInto(target: Buffer): void {
    let at = 0;
    for (const c of this.chunks) {
      c.copy(target, at);
      at += c.length;
    }
    this.chunks.length = 0;
    this.chunked = 0;
  }

  private readonly onEnd = (): void => {
    if (this.declared !== null && this.received !== this.declared) {
      this.finish(new HttpProblem('bad-request', 'The request body is shorter than its Content-Length header says.'));
      return;
    }
    let body = this.whole;
    if (!body) {
      // no length declared (or none yet trusted): one copy into a buffer of its own
      body = ownBuffer(this.received);
      this.peakHeld = Math.max(this.peakHeld, this.chunked + this.received);
      this.joinChunksInto(body);
    }
    // a buffer of its own, which can be transferred to a worker as it is
    this.finish(null, new Uint8Array(body.buffer, body.byteOffset, this.received));
  };

  private readonly onError = (err: Error): void => {
    this.finish(new HttpProblem('bad-request', `The request body could not be received: ${err.message}`));
  };

  // the client went away in the middle: the slot is free at once
  private readonly onClose = (): void => {
    this.finish(new HttpProblem('bad-request', 'The client closed the connection before its body arrived.'));
  };
}

/**
 * A Fastify content-type parser that yields the body as a Uint8Array in its own ArrayBuffer.
 * Bodies over `limitBytes` are refused (413) before they are read when Content-Length says so,
 * and as soon as the count passes the limit otherwise. Nothing is allocated from what
 * Content-Length declares until an eighth of it has arrived, so a client declaring 256 MiB and
 * sending little costs little. Each body takes an upload slot
 * (503 with Retry-After when all are taken) and must arrive within `uploadTimeoutMs` (408).
 */
export function rawBodyParser(options: BodyOptions): { parser: (request: FastifyRequest, payload: NodeJS.ReadableStream, done: BodyDone) => void; allowance: UploadAllowance } {
  const { limitBytes } = options;
  let uploading = 0;
  let peakHeldBytes = 0;
  const allowance: UploadAllowance = {
    get inProgress() {
      return uploading;
    },
    get peakHeldBytes() {
      return peakHeldBytes;
    },
  };
  const parser = (request: FastifyRequest, payload: NodeJS.ReadableStream, done: BodyDone): void => {
    const header = request.headers['content-length'];
    const declared = header === undefined ? NaN : Number(header);
    if (declared > limitBytes) {
      done(tooLarge(limitBytes));
      return;
    }
    if (uploading >= options.uploads) {
      // the body stays unread: the answer closes the connection
      done(
        new HttpProblem('overloaded', `${options.uploads} request bodies are being received already; retry later.`, {}, { 'retry-after': String(options.retryAfterS), connection: 'close' }),
      );
      return;
    }
    uploading++;
    const known = Number.isSafeInteger(declared) && declared >= 0;
    new BodyReceipt(
      payload,
      known ? declared : null,
      options,
      (err, body, held = 0) => {
        uploading--;
        peakHeldBytes = Math.max(peakHeldBytes, held);
        done(err, body);
      },
      (request as ArrivalRequest)[READ_WHILE_ARRIVING],
    );
  };
  return { parser, allowance };
}
