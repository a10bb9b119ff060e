/**
 * The write side of stored result layers: what `saveRunResult` accepts for a layer, checked, and
 * handed to the engine piece by piece, so that a layer produced on demand (a million point
 * features) is stored as it is produced and never held whole in memory.
 */
import { cutText } from './layer-pieces.js';
import type { LayerSource } from './store.js';
import { StoreError } from './store.js';

/** "PGCOPY\n\377\r\n\0", flags 0 and no header extension: the head of a binary COPY (source: https://www.postgresql.org/docs/15/sql-copy.html, "Binary Format") */
const PG_COPY_HEAD = Buffer.from([0x50, 0x47, 0x43, 0x4f, 0x50, 0x59, 0x0a, 0xff, 0x0d, 0x0a, 0x00, 0, 0, 0, 0, 0, 0, 0, 0]);
/** the file trailer: a field count of −1 */
const PG_COPY_TRAILER = Buffer.from([0xff, 0xff]);

/**
 * A result's layer pieces as the data of `COPY run_layer_parts (run_seq, layer, part, body) FROM
 * STDIN (FORMAT binary)`: per piece a tuple of four fields (bigint, text, integer, text; text in
 * binary form is its bytes), the body passed on as it came, never copied into a larger buffer.
 */
export function* pgLayerCopyData(seq: number, sources: readonly (readonly [string, () => Iterable<string | Uint8Array>])[]): Generator<Buffer, void, undefined> {
  yield PG_COPY_HEAD;
  for (const [name, pieces] of sources) {
    const layer = Buffer.from(name, 'utf8');
    let part = 0;
    for (const piece of pieces()) {
      const body = typeof piece === 'string' ? Buffer.from(piece, 'utf8') : (piece as Buffer);
      const head = Buffer.allocUnsafe(2 + 4 + 8 + 4 + layer.length + 4 + 4 + 4);
      let at = head.writeInt16BE(4, 0);
      at = head.writeInt32BE(8, at);
      at = head.writeBigInt64BE(BigInt(seq), at);
      at = head.writeInt32BE(layer.length, at);
      at += layer.copy(head, at);
      at = head.writeInt32BE(4, at);
      at = head.writeInt32BE(part++, at);
      head.writeInt32BE(body.length, at);
      yield head;
      yield body;
    }
  }
  yield PG_COPY_TRAILER;
}

function invalid(layer: string): StoreError {
  return new StoreError('invalid', `result layer ${layer} must be GeoJSON text, whole or in pieces`);
}

/**
 * A layer's pieces in order, checked: a whole text is cut into pieces of about a MiB, pieces
 * given as an array are kept as given (at least one), and pieces given by an iterable are read
 * one at a time as the engine stores them (each a string or UTF-8 bytes; none at all stores one
 * empty piece). What cannot be checked before the first piece is read (a piece of another type)
 * throws StoreError 'invalid' while storing, inside the engine's transaction, so nothing is stored.
 * @throws StoreError 'invalid' at once for a value that is none of these
 */
export function layerSource(layer: string, v: unknown): () => Iterable<string | Uint8Array> {
  if (typeof v === 'string') return () => cutText(v);
  if (Array.isArray(v)) {
    if (v.length === 0 || !v.every((x) => typeof x === 'string')) throw invalid(layer);
    return () => v as string[];
  }
  if (v === null || typeof v !== 'object' || typeof (v as Iterable<unknown>)[Symbol.iterator] !== 'function' || ArrayBuffer.isView(v)) throw invalid(layer);
  const source = v as LayerSource;
  return function* () {
    let any = false;
    for (const piece of source) {
      if (typeof piece !== 'string' && !(piece instanceof Uint8Array)) throw invalid(layer);
      any = true;
      // a Buffer over the same bytes: what the engines' drivers bind as bytes
      yield typeof piece === 'string' || Buffer.isBuffer(piece) ? piece : Buffer.from(piece.buffer, piece.byteOffset, piece.byteLength);
    }
    if (!any) yield '';
  };
}

/**
 * Text chunks gathered into pieces of at least `bytes` bytes of UTF-8 (whole chunks only, so no
 * character is ever cut), each in a buffer of its own: the form in which a run hands a layer
 * made on demand to the store. The time spent producing the chunks and encoding them is added
 * to `spent.ms`, so that a caller can tell producing a layer from storing it.
 */
export function* utf8Pieces(chunks: Iterable<string>, bytes: number, spent: { ms: number } = { ms: 0 }): Generator<Uint8Array, void, undefined> {
  // room for a whole piece and one more chunk of up to 64 Ki characters at 3 bytes each
  const room = bytes + 3 * 65_536;
  let buf = Buffer.allocUnsafeSlow(room);
  let at = 0;
  let given = false;
  const it = chunks[Symbol.iterator]();
  for (;;) {
    const t = performance.now();
    const next = it.next();
    if (next.done) {
      spent.ms += performance.now() - t;
      break;
    }
    const chunk = next.value;
    const most = chunk.length * 3;
    if (at + most > buf.length) {
      // the chunk might not fit: give what there is, then a buffer large enough for it
      if (at > 0) {
        spent.ms += performance.now() - t;
        yield buf.subarray(0, at);
        given = true;
      }
      buf = Buffer.allocUnsafeSlow(Math.max(room, most));
      at = 0;
    }
    at += buf.write(chunk, at, 'utf8');
    spent.ms += performance.now() - t;
    if (at >= bytes) {
      yield buf.subarray(0, at);
      given = true;
      buf = Buffer.allocUnsafeSlow(room);
      at = 0;
    }
  }
  if (at > 0 || !given) yield buf.subarray(0, at);
}

/**
 * Byte chunks handed on as pieces as they are (a layer that writes its own bytes in chunks of
 * about a MiB), with the time spent producing them added to `spent.ms`, as utf8Pieces does.
 */
export function* timedPieces(chunks: Iterable<Uint8Array>, spent: { ms: number }): Generator<Uint8Array, void, undefined> {
  const it = chunks[Symbol.iterator]();
  for (;;) {
    const t = performance.now();
    const next = it.next();
    spent.ms += performance.now() - t;
    if (next.done) return;
    yield next.value;
  }
}
