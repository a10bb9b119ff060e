/**
 * The write side of stored result layers: what `saveRunResult` accepts for a layer, checked, and
 * handed to the engine piece by piece, so that a layer produced on demand (a million point
 * features) is stored as it is produced and never held whole in memory.
 */
import { cutText } from './layer-pieces.js';
import type { LayerSource, RunHotspot } from './store.js';
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

/**
 * A result's hotspots as the data of `COPY run_hotspots (run_seq, hotspot_id, track_id, members,
 * core_members, member_count, hull, figures) FROM STDIN (FORMAT binary)`: per hotspot a tuple of
 * eight fields (bigint, integer, text or NULL, text, text, integer, text, jsonb or NULL). Text in
 * binary form is its UTF-8 bytes; jsonb is the version byte 1 and the JSON text, which the
 * server reads with the same parser as jsonb's text input (source:
 * https://www.postgresql.org/docs/15/datatype-json.html and jsonb_recv in PostgreSQL's
 * src/backend/utils/adt/jsonb.c). The member lists of a million observations are some 20 MB of
 * JSON text: as elements of a text[] parameter every quote in them had to be escaped by the
 * driver and parsed back by the server (2 s of this process's CPU and 3.7 s in all for 900,000
 * members, measured), where here they go out as their bytes.
 */
export function* pgHotspotCopyData(seq: number, hotspots: readonly RunHotspot[]): Generator<Buffer, void, undefined> {
  // tuples gathered into buffers of about a MiB: a message per field cost more than the fields
  const CHUNK = 1 << 20;
  let out = Buffer.allocUnsafe(CHUNK);
  let at = PG_COPY_HEAD.copy(out, 0);
  for (const h of hotspots) {
    const track = h.trackId === null ? null : h.trackId;
    const members = JSON.stringify(h.members);
    const core = JSON.stringify(h.coreMembers);
    const figures = h.figures === null || h.figures === undefined ? null : JSON.stringify(h.figures);
    // at most 3 bytes of UTF-8 per UTF-16 unit
    const most = 2 + 12 + 8 + 3 * 4 + 8 + 4 + 5 + 3 * ((track?.length ?? 0) + members.length + core.length + h.hull.length + (figures?.length ?? 0));
    if (at + most > out.length) {
      yield out.subarray(0, at);
      out = Buffer.allocUnsafe(Math.max(CHUNK, most));
      at = 0;
    }
    at = out.writeInt16BE(8, at);
    at = out.writeInt32BE(8, at);
    at = out.writeBigInt64BE(BigInt(seq), at);
    at = out.writeInt32BE(4, at);
    at = out.writeInt32BE(h.hotspotId, at);
    at = textField(out, at, track);
    at = textField(out, at, members);
    at = textField(out, at, core);
    at = out.writeInt32BE(4, at);
    at = out.writeInt32BE(h.members.length, at);
    at = textField(out, at, h.hull);
    if (figures === null) at = out.writeInt32BE(-1, at);
    else {
      const n = out.write(figures, at + 5, 'utf8');
      out.writeInt32BE(n + 1, at);
      out[at + 4] = 1; // jsonb binary format version
      at += 5 + n;
    }
  }
  if (at + 2 > out.length) {
    yield out.subarray(0, at);
    out = Buffer.allocUnsafe(2);
    at = 0;
  }
  at += PG_COPY_TRAILER.copy(out, at);
  yield out.subarray(0, at);
}

/** Writes a text field (its byte length, then its UTF-8 bytes; −1 for NULL) at `at`; returns where it ends. */
function textField(out: Buffer, at: number, text: string | null): number {
  if (text === null) return out.writeInt32BE(-1, at);
  const n = out.write(text, at + 4, 'utf8');
  out.writeInt32BE(n, at);
  return at + 4 + n;
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
