/**
 * Reads a run's input from PostgreSQL with one `COPY (…) TO STDOUT (FORMAT binary)`: one
 * statement, one snapshot, and numbers as big-endian doubles instead of decimal text.
 *
 * The bytes are taken off the connection's socket directly (as pg-copy-streams does) and copied
 * into a staging buffer of a few MiB. There the protocol's message headers are squeezed out and
 * the rows are parsed in place: each row's numbers go into typed arrays, and its id and feature
 * text are moved down next to the previous row's, so that the staged region ends up holding only
 * text. The region is kept as bytes (a copy, the staging buffer is used again): ids are decoded
 * from it one by one, and feature texts stay bytes, cut out by offset (PackedTexts keeps the
 * offsets, so a million feature texts do not become a million strings, and the points layer is
 * written from their bytes). Bytes that are not UTF-8 are decoded as before: one decoding call
 * per region into a single string, ids and texts cut out of it.
 *
 * Why not pg-copy-streams: it hands out one Buffer per row and then copies them into a new
 * zero-filled Buffer, which cost about 0.45 s of CPU per 1 000 000 rows, a quarter of the whole
 * load (test/bench/storage-results.md). The framing here is a few lines over bytes already staged.
 *
 * Formats: https://www.postgresql.org/docs/15/sql-copy.html ("Binary Format") and
 * https://www.postgresql.org/docs/15/protocol-message-formats.html (CopyData, CopyDone).
 */
import { isAscii } from 'node:buffer';
import type { Socket } from 'node:net';
import { grown, PackedTexts, RunColumns } from './columns.js';
import type { RunInput } from './store.js';

/** The select list the COPY must carry, in this order (the observations aliased `o`). */
export const RUN_COPY_COLUMNS = 'o.seq::float8, o.lon, o.lat, o.observed_at::float8, o.weight, o.obs_id, o.feature';
const FIELDS = 7;
const NUMBERS = 5;

/** "PGCOPY\n\377\r\n\0": the binary COPY signature */
const SIGNATURE = Buffer.from([0x50, 0x47, 0x43, 0x4f, 0x50, 0x59, 0x0a, 0xff, 0x0d, 0x0a, 0x00]);
/** signature, flags (int32), header extension length (int32) */
const HEADER_BYTES = SIGNATURE.length + 8;
/** staging buffer size; it grows when a single row or message is larger */
const STAGE_BYTES = 4 << 20;
const SPACE = 0x20;

/** protocol message types met during COPY OUT */
const COPY_DATA = 0x64; // 'd'
const COPY_DONE = 0x63; // 'c'
const COPY_OUT_RESPONSE = 0x48; // 'H'
const NOTICE = 0x4e; // 'N'
const PARAMETER_STATUS = 0x53; // 'S'
const NOTIFICATION = 0x41; // 'A'

/**
 * Parses binary COPY rows into a run's input. Feed it either the COPY stream's own bytes
 * (`push`) or the raw protocol messages of a COPY OUT (`pushMessages`), then call `finish`.
 */
export class RunCopyReader {
  private stage = Buffer.allocUnsafe(STAGE_BYTES);
  private view = new DataView(this.stage.buffer, this.stage.byteOffset, this.stage.length);
  /**
   * stage layout: [0, packed) ids and texts of the complete rows · [parsed, copyEnd) COPY bytes
   * not yet a whole row · [rawStart, used) protocol bytes not yet framed
   */
  private packed = 0;
  private parsed = 0;
  private copyEnd = 0;
  private rawStart = 0;
  private used = 0;
  private headerSeen = false;
  private ended = false;
  /** set by pushMessages once CopyDone or a message ending the COPY arrived: the bytes after it */
  private leftover: Buffer | null = null;
  /** a row that could not be parsed: the rest of the COPY is read and dropped, `finish` throws this */
  private failure: Error | null = null;
  private readonly cols = new RunColumns(1 << 16);
  private readonly texts = new PackedTexts();
  private readonly idParts: string[][] = [];
  /** per row of the staged region: where its id and feature text lie in the stage */
  private idStart: Int32Array = new Int32Array(1 << 14);
  private idEnd: Int32Array = new Int32Array(1 << 14);
  private textStart: Int32Array = new Int32Array(1 << 14);
  private textEnd: Int32Array = new Int32Array(1 << 14);
  private regionRows = 0;
  /** the current row's numbers, NaN for NULL */
  private readonly nums = new Float64Array(NUMBERS);

  /** Adds bytes of the COPY stream itself. */
  push(chunk: Buffer): void {
    this.take(chunk, false);
  }

  /**
   * Adds raw protocol bytes of a COPY OUT. Returns null while the COPY goes on; once it is over
   * (CopyDone, or a message such as ErrorResponse that ends it), the bytes that follow, which
   * belong to the connection again.
   */
  pushMessages(chunk: Buffer): Buffer | null {
    this.take(chunk, true);
    return this.leftover;
  }

  finish(): RunInput {
    if (this.failure !== null) throw this.failure;
    if (!this.ended) throw new Error('the COPY stream ended before its trailer');
    this.flushRegion();
    const cols = this.cols;
    cols.ids = this.idParts.length === 1 ? (this.idParts[0] as string[]) : ([] as string[]).concat(...this.idParts);
    if (cols.ids.length !== cols.length || this.texts.length !== cols.length) throw new Error('COPY rows and texts differ in number');
    // Without ORDER BY the rows come in the order the table holds them, which is seq order unless
    // rows were replaced (an UPDATE writes the new version elsewhere); sorting here is cheaper
    // than letting the server walk the index.
    const order = cols.sortBySeq();
    if (order !== null) this.texts.permute(order);
    return cols.finish(this.texts);
  }

  private take(chunk: Buffer, framed: boolean): void {
    let at = 0;
    while (at < chunk.length && this.leftover === null) {
      if (this.used === this.stage.length) this.makeRoom();
      const n = Math.min(chunk.length - at, this.stage.length - this.used);
      chunk.copy(this.stage, this.used, at, at + n);
      this.used += n;
      at += n;
      if (!framed) {
        this.copyEnd = this.rawStart = this.used;
        this.parseRows();
        continue;
      }
      this.frame();
      if (this.failure !== null) continue;
      try {
        this.parseRows();
      } catch (e) {
        // stay in step with the server: frame (and drop) the rest of the COPY
        this.failure = e as Error;
        this.packed = this.parsed = this.copyEnd = 0;
        this.regionRows = 0;
      }
    }
    if (this.leftover !== null && at < chunk.length) this.leftover = Buffer.concat([this.leftover, chunk.subarray(at)]);
  }

  /** Moves each complete CopyData payload next to the COPY bytes before it, squeezing out the message header. */
  private frame(): void {
    const b = this.stage;
    const v = this.view;
    while (this.leftover === null && this.rawStart + 5 <= this.used) {
      const type = b[this.rawStart] as number;
      const size = v.getInt32(this.rawStart + 1);
      const end = this.rawStart + 1 + size;
      if (type === COPY_DATA || type === COPY_OUT_RESPONSE || type === NOTICE || type === PARAMETER_STATUS || type === NOTIFICATION) {
        if (end > this.used) return;
        if (type === COPY_DATA && this.failure === null) {
          b.copyWithin(this.copyEnd, this.rawStart + 5, end);
          this.copyEnd += end - this.rawStart - 5;
        }
        this.rawStart = end;
      } else if (type === COPY_DONE) {
        this.leftover = Buffer.from(b.subarray(Math.min(end, this.used), this.used));
      } else {
        // ErrorResponse or anything else: the COPY is over and the connection's reader takes it
        this.leftover = Buffer.from(b.subarray(this.rawStart, this.used));
      }
    }
  }

  /** Frees the stage: decodes the complete rows and keeps the rest; grows the stage when nothing could be freed. */
  private makeRoom(): void {
    this.flushRegion();
    const tail = this.copyEnd - this.parsed;
    const raw = this.used - this.rawStart;
    const target = tail + raw === this.stage.length ? Buffer.allocUnsafe(this.stage.length * 2) : this.stage;
    this.stage.copy(target, 0, this.parsed, this.copyEnd);
    this.stage.copy(target, tail, this.rawStart, this.used);
    if (target !== this.stage) {
      this.stage = target;
      this.view = new DataView(target.buffer, target.byteOffset, target.length);
    }
    this.parsed = 0;
    this.copyEnd = tail;
    this.rawStart = tail;
    this.used = tail + raw;
  }

  private parseRows(): void {
    const b = this.stage;
    const v = this.view;
    const end = this.copyEnd;
    let off = this.parsed;
    if (!this.headerSeen) {
      if (end < HEADER_BYTES) return;
      if (!b.subarray(0, SIGNATURE.length).equals(SIGNATURE)) throw new Error('not a binary COPY stream (signature missing)');
      const ext = v.getUint32(SIGNATURE.length + 4);
      if (end < HEADER_BYTES + ext) return;
      off = HEADER_BYTES + ext;
      this.headerSeen = true;
    }
    const cols = this.cols;
    const nums = this.nums;
    let w = this.packed;
    while (!this.ended && off + 2 <= end) {
      const fields = v.getInt16(off);
      if (fields === -1) {
        off += 2;
        this.ended = true;
        break;
      }
      if (fields !== FIELDS) throw new Error(`COPY row with ${fields} fields, expected ${FIELDS}`);
      let p = off + 2;
      let complete = true;
      for (let f = 0; f < NUMBERS; f++) {
        if (p + 4 > end) {
          complete = false;
          break;
        }
        const len = v.getInt32(p);
        p += 4;
        if (len < 0) nums[f] = NaN;
        else if (len !== 8) throw new Error(`COPY number field of ${len} bytes, expected 8`);
        else if (p + 8 > end) {
          complete = false;
          break;
        } else {
          nums[f] = v.getFloat64(p);
          p += 8;
        }
      }
      if (!complete || p + 4 > end) break;
      const idLen = v.getInt32(p);
      const idAt = p + 4;
      p = idAt + idLen;
      if (p + 4 > end) break;
      const textLen = v.getInt32(p);
      p += 4 + textLen;
      if (p > end) break;
      if (idLen < 0 || textLen < 0) throw new Error('COPY row without an id or a feature text');
      cols.row(nums[0] as number, nums[1] as number, nums[2] as number, nums[3] as number, nums[4] as number);
      const r = this.regionRows++;
      if (r === this.idStart.length) this.growRegion();
      // id, text length and text move down to the end of the packed text; the length's four
      // bytes become spaces
      b.copyWithin(w, idAt, p);
      this.idStart[r] = w;
      this.idEnd[r] = w + idLen;
      const gap = w + idLen;
      b[gap] = b[gap + 1] = b[gap + 2] = b[gap + 3] = SPACE;
      this.textStart[r] = gap + 4;
      w = this.textEnd[r] = gap + 4 + textLen;
      off = p;
    }
    this.packed = w;
    this.parsed = off;
  }

  /** Turns the staged complete rows into strings: ids as strings, texts as spans of one string. */
  private flushRegion(): void {
    const rows = this.regionRows;
    if (rows === 0) return;
    const b = this.stage;
    const bytes = this.packed;
    const ids: string[] = new Array(rows);
    const kept = Buffer.from(b.subarray(0, bytes));
    if (this.texts.addSpanBytes(kept, this.textStart.slice(0, rows), this.textEnd.slice(0, rows), rows)) {
      // the texts stay bytes, to be written into the points layer as they are (src/run/cluster.ts)
      for (let k = 0; k < rows; k++) ids[k] = kept.toString('utf8', this.idStart[k], this.idEnd[k]);
    } else if (isAscii(b.subarray(0, bytes))) {
      // one byte, one character: byte offsets are string offsets
      const s = b.toString('latin1', 0, bytes);
      for (let k = 0; k < rows; k++) ids[k] = s.slice(this.idStart[k], this.idEnd[k]);
      this.texts.addSpans(s, this.textStart.slice(0, rows), this.textEnd.slice(0, rows), rows);
    } else {
      const s = b.toString('utf8', 0, bytes);
      const starts = new Int32Array(rows);
      const ends = new Int32Array(rows);
      if (utf16Offsets(b, this.idStart, this.idEnd, this.textStart, this.textEnd, rows, starts, ends, ids, s, bytes)) {
        this.texts.addSpans(s, starts, ends, rows);
      } else {
        // bytes that are not valid UTF-8 shift the offsets unpredictably: decode row by row
        const texts: string[] = new Array(rows);
        for (let k = 0; k < rows; k++) {
          ids[k] = b.toString('utf8', this.idStart[k], this.idEnd[k]);
          texts[k] = b.toString('utf8', this.textStart[k], this.textEnd[k]);
        }
        this.texts.addEach(texts);
      }
    }
    this.idParts.push(ids);
    this.regionRows = 0;
    this.packed = 0;
  }

  private growRegion(): void {
    const size = this.idStart.length * 2;
    this.idStart = grown(this.idStart, size);
    this.idEnd = grown(this.idEnd, size);
    this.textStart = grown(this.textStart, size);
    this.textEnd = grown(this.textEnd, size);
  }
}

/**
 * Converts the byte offsets of UTF-8 text in `b` to offsets in its decoded string `s`: every
 * continuation byte (10xxxxxx) adds no UTF-16 unit, and every 4-byte sequence (lead 11110xxx)
 * adds two. The bytes between spans are ASCII, so only the spans are walked. Fills the ids and
 * the text offsets; returns false when the counts do not add up to `s` (invalid UTF-8, which
 * the decoder replaces).
 */
function utf16Offsets(
  b: Buffer,
  idStart: Int32Array,
  idEnd: Int32Array,
  textStart: Int32Array,
  textEnd: Int32Array,
  rows: number,
  starts: Int32Array,
  ends: Int32Array,
  ids: string[],
  s: string,
  bytes: number,
): boolean {
  let shift = 0;
  const walk = (from: number, to: number): void => {
    for (let i = from; i < to; i++) {
      const c = b[i] as number;
      if (c < 0x80) continue;
      if ((c & 0xc0) === 0x80) shift--;
      else if (c >= 0xf0) shift++;
    }
  };
  for (let k = 0; k < rows; k++) {
    const a = (idStart[k] as number) + shift;
    walk(idStart[k] as number, idEnd[k] as number);
    ids[k] = s.slice(a, (idEnd[k] as number) + shift);
    starts[k] = (textStart[k] as number) + shift;
    walk(textStart[k] as number, textEnd[k] as number);
    ends[k] = (textEnd[k] as number) + shift;
  }
  return s.length === bytes + shift;
}

/** What this query needs of pg's connection object (pg does not export the type). */
interface PgConnection {
  stream: Socket;
  query(text: string): void;
}

/**
 * A query object for pg's `client.query(…)` (its "submittable" form) that runs a COPY … TO STDOUT
 * (FORMAT binary) and reads the rows off the socket itself. While the COPY lasts it takes the
 * socket's data listener from pg's message reader and hands it back, with the bytes after
 * CopyDone, when the COPY is over; CommandComplete, errors and ReadyForQuery then reach pg as usual.
 */
export class RunCopyQuery {
  readonly result: Promise<RunInput>;
  private resolve!: (input: RunInput) => void;
  private reject!: (err: Error) => void;
  private readonly reader = new RunCopyReader();
  private failed = false;
  private connection: PgConnection | null = null;
  private pgListener: ((chunk: Buffer) => void) | null = null;

  /** @param text a `COPY (SELECT RUN_COPY_COLUMNS …) TO STDOUT (FORMAT binary)` statement */
  constructor(private readonly text: string) {
    this.result = new Promise((resolve, reject) => {
      this.resolve = resolve;
      this.reject = reject;
    });
  }

  /** Called by pg when the query's turn comes; an error returned is handed back to handleError. */
  submit(connection: PgConnection): Error | undefined {
    this.connection = connection;
    const listeners = connection.stream.listeners('data') as ((chunk: Buffer) => void)[];
    if (listeners.length !== 1) return new Error(`expected pg to have one data listener on its socket, found ${listeners.length}`);
    this.pgListener = listeners[0] as (chunk: Buffer) => void;
    connection.stream.removeListener('data', this.pgListener);
    connection.stream.on('data', this.onData);
    connection.query(this.text);
    return undefined;
  }

  private readonly onData = (chunk: Buffer): void => {
    const rest = this.reader.pushMessages(chunk);
    if (rest !== null) this.detach(rest);
  };

  private detach(rest: Buffer): void {
    const c = this.connection;
    const pgListener = this.pgListener;
    if (c === null || pgListener === null) return;
    c.stream.removeListener('data', this.onData);
    c.stream.on('data', pgListener);
    this.pgListener = null;
    if (rest.length > 0) pgListener(rest);
  }

  /** The server's ErrorResponse, or the connection failing. */
  handleError(err: Error): void {
    this.failed = true;
    this.detach(Buffer.alloc(0));
    this.reject(err);
  }

  handleCommandComplete(): void {}

  handleReadyForQuery(): void {
    if (this.failed) return;
    try {
      this.resolve(this.reader.finish());
    } catch (e) {
      this.reject(e as Error);
    }
  }
}
