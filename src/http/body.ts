/**
 * Request bodies are collected as raw bytes and never parsed on the main thread: a worker reads
 * them. When the client declares Content-Length, the bytes are copied chunk by chunk into one
 * buffer of that size as they arrive, so no large copy ever blocks the event loop; the buffer
 * owns its memory and can be transferred to a worker without copying.
 */
import type { FastifyRequest } from 'fastify';
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

/** Smallest first allocation when the size is not declared, in bytes. */
const FIRST_CHUNK_BYTES = 64 * 1024;

/**
 * A Fastify content-type parser that yields the body as a Uint8Array in its own ArrayBuffer,
 * refusing (413) bodies over `limitBytes` before reading them when Content-Length says so, and
 * as soon as the count passes the limit otherwise.
 */
export function rawBodyParser(limitBytes: number) {
  return (request: FastifyRequest, payload: NodeJS.ReadableStream, done: (err: Error | null, body?: Uint8Array) => void): void => {
    const header = request.headers['content-length'];
    const declared = header === undefined ? NaN : Number(header);
    if (declared > limitBytes) {
      done(tooLarge(limitBytes));
      return;
    }
    const known = Number.isSafeInteger(declared) && declared >= 0;
    let buffer = ownBuffer(known ? declared : Math.min(FIRST_CHUNK_BYTES, limitBytes));
    let received = 0;
    let finished = false;

    const finish = (err: Error | null, body?: Uint8Array): void => {
      if (finished) return;
      finished = true;
      payload.removeListener('data', onData);
      payload.removeListener('end', onEnd);
      payload.removeListener('error', onError);
      done(err, body);
    };
    const onData = (chunk: Buffer | string): void => {
      const bytes = typeof chunk === 'string' ? Buffer.from(chunk) : chunk;
      const next = received + bytes.length;
      if (next > limitBytes) {
        finish(tooLarge(limitBytes));
        return;
      }
      if (next > buffer.length) {
        if (known) {
          finish(new HttpProblem('bad-request', 'The request body is longer than its Content-Length header says.'));
          return;
        }
        // growing by doubling keeps the total copying linear in the body size
        const grown = ownBuffer(Math.min(limitBytes, Math.max(next, buffer.length * 2)));
        buffer.copy(grown, 0, 0, received);
        buffer = grown;
      }
      bytes.copy(buffer, received);
      received = next;
    };
    const onEnd = (): void => {
      if (known && received !== declared) {
        finish(new HttpProblem('bad-request', 'The request body is shorter than its Content-Length header says.'));
        return;
      }
      // a view on the exact bytes; with a declared length it spans the whole ArrayBuffer
      finish(null, new Uint8Array(buffer.buffer, buffer.byteOffset, received));
    };
    const onError = (err: Error): void => {
      finish(new HttpProblem('bad-request', `The request body could not be received: ${err.message}`));
    };
    payload.on('data', onData);
    payload.on('end', onEnd);
    payload.on('error', onError);
    payload.resume();
  };
}
