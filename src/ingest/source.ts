/**
 * Where the bytes of an input live: in memory (a request body, stdin, a test) or in a file that is
 * read in chunks when needed, so that a large file is never held whole. The byte reader keeps
 * each feature as offsets into its source; the point layers read the bytes back through a window.
 */
import { closeSync, openSync, readSync, statSync } from 'node:fs';

/** The input bytes, read through windows. */
export interface ByteSource {
  /** length in bytes */
  readonly size: number;
  /** A fresh window on the bytes (each reader its own, so reads in order stay sequential). */
  window(): ByteWindow;
}

/** Closes the files of InputFile objects no longer used. */
const closing = new FinalizationRegistry((fd: number) => {
  try {
    closeSync(fd);
  } catch {
    // already closed
  }
});

/** A file named on the command line, read in chunks and never held whole. */
export class InputFile implements ByteSource {
  readonly size: number;
  /**
   * @param windowBytes bytes the byte reader scans at a time (at least 16; small values are for
   *   tests of features cut at window edges)
   * @param size the length in bytes, for a subclass whose bytes come from elsewhere than the file
   *   system (it then overrides `readInto` and `readAll`); by default the file's size
   */
  constructor(
    readonly path: string,
    readonly windowBytes = 4 << 20,
    size?: number,
  ) {
    if (!Number.isInteger(windowBytes) || windowBytes < 16) throw new RangeError(`windowBytes must be a whole number ≥ 16, got ${windowBytes}`);
    this.size = size ?? statSync(path).size;
  }
  window(): ByteWindow {
    return new ByteWindow(new Uint8Array(0), 0, this);
  }
  /** the open file, -1 before the first read; closed when this object is collected */
  private fd = -1;
  /** Reads bytes from `at` into `into[pos …]` until it is full or the file ends; returns the bytes read. */
  readInto(into: Uint8Array, pos: number, at: number): number {
    if (this.fd === -1) {
      this.fd = openSync(this.path, 'r');
      closing.register(this, this.fd);
    }
    let total = 0;
    while (pos + total < into.length) {
      const got = readSync(this.fd, into, pos + total, into.length - pos - total, at + total);
      if (got === 0) break;
      total += got;
    }
    return total;
  }
  /** The whole file (for the readers that need all of it at once). */
  readAll(): Buffer {
    const out = Buffer.allocUnsafe(this.size);
    const got = this.readInto(out, 0, 0);
    return got === this.size ? out : out.subarray(0, got);
  }
}

/** Bytes already in memory. */
export class MemorySource implements ByteSource {
  readonly size: number;
  constructor(readonly bytes: Uint8Array) {
    this.size = bytes.length;
  }
  window(): ByteWindow {
    return new ByteWindow(this.bytes, 0, null);
  }
}

/** Bytes read per chunk when a window moves forward over a file, and the least read at a jump. */
const CHUNK = 1 << 20;
const JUMP = 4 << 10;

/**
 * A view on part of a source: after `need(s, e)`, bytes [s, e) of the source are
 * `buf[s - base … e - base)`. Reading on in order reads the file a chunk at a time; a jump
 * elsewhere (one feature looked up) reads only a few KiB there.
 */
export class ByteWindow {
  private memory: Uint8Array;
  constructor(
    public buf: Uint8Array,
    public base: number,
    private readonly file: InputFile | null,
  ) {
    this.memory = buf;
  }
  need(s: number, e: number): void {
    if (s >= this.base && e <= this.base + this.buf.length) return;
    if (this.file === null) throw new RangeError(`bytes ${s}–${e} lie outside the input`);
    const onward = s >= this.base && s <= this.base + this.buf.length + CHUNK;
    const length = Math.min(Math.max(onward ? CHUNK : JUMP, e - s), this.file.size - s);
    if (this.memory.length < length) this.memory = new Uint8Array(Math.max(length, CHUNK));
    this.buf = this.memory.subarray(0, length);
    const got = this.file.readInto(this.buf, 0, s);
    if (got < e - s) throw new RangeError(`${this.file.path} changed while it was read`);
    this.base = s;
  }
}
