/**
 * A request body read while it arrives. The main thread copies each chunk into one
 * SharedArrayBuffer of the declared length and moves a fill mark forward; a worker thread reads
 * the same memory behind the mark, waiting with Atomics.wait when it catches up. The body is
 * held once (the worker reads it through a window of a few MiB, as the command line reads a file).
 *
 * The worker's answer counts only once the whole body has arrived: a body that is cut short, too
 * long or abandoned ends as `failed`, and the main thread answers with the upload's own problem,
 * as it would have without reading early. A worker that waits for bytes gives its thread back
 * (`yield`) when another request needs one; that request is then read after its upload, as any
 * other.
 */
import { InputFile } from '../ingest/source.js';

/**
 * Control words: bytes filled so far, the state of the upload, a request to give the thread back,
 * a count of the changes a worker is woken for (what it waits on, so no wake-up is missed), and
 * the fill mark the worker waits for (it is not woken for every chunk before that).
 */
const FILLED = 0;
const STATE = 1;
const YIELD = 2;
const SEQ = 3;
const WANT = 4;
const WORDS = 5;

const ARRIVING = 0;
const COMPLETE = 1;
const FAILED = 2;

/** What a worker needs to read a body while it arrives (both buffers are shared, never copied). */
export interface ArrivingShare {
  bytes: SharedArrayBuffer;
  control: SharedArrayBuffer;
}

/** Why a worker stopped reading a body that was still arriving. */
export class ArrivalStopped extends Error {
  constructor(readonly why: 'failed' | 'yielded') {
    super(why === 'failed' ? 'the request body did not arrive whole' : 'the thread was wanted for another request');
    this.name = 'ArrivalStopped';
  }
}

/** The main thread's side: the buffer the chunks are copied into, and the fill mark. */
export class ArrivingBody {
  /** the whole declared length, filled from the start */
  readonly buffer: Buffer;
  readonly share: ArrivingShare;
  private readonly control: Int32Array;

  /** @param onFail called when the upload fails, with whether every declared byte had come */
  constructor(
    size: number,
    private readonly onFail: (allIn: boolean) => void = () => undefined,
  ) {
    const bytes = new SharedArrayBuffer(size);
    const control = new SharedArrayBuffer(WORDS * 4);
    this.buffer = Buffer.from(bytes);
    this.share = { bytes, control };
    this.control = new Int32Array(control);
  }

  private wake(): void {
    Atomics.add(this.control, SEQ, 1);
    Atomics.notify(this.control, SEQ);
  }

  /** The first `n` bytes of the buffer hold the body. */
  filled(n: number): void {
    Atomics.store(this.control, FILLED, n);
    if (n >= Atomics.load(this.control, WANT)) this.wake();
  }

  /** The body arrived whole (every byte of the buffer). */
  complete(): void {
    if (Atomics.compareExchange(this.control, STATE, ARRIVING, COMPLETE) === ARRIVING) this.wake();
  }

  /** The body will not arrive whole; a worker reading it stops. */
  fail(): void {
    if (Atomics.compareExchange(this.control, STATE, ARRIVING, FAILED) !== ARRIVING) return;
    this.wake();
    this.onFail(Atomics.load(this.control, FILLED) >= this.buffer.length);
  }

  /** Asks a worker waiting for bytes to give its thread back; true when the upload is still going. */
  askToYield(): boolean {
    if (Atomics.load(this.control, STATE) !== ARRIVING) return false;
    Atomics.store(this.control, YIELD, 1);
    this.wake();
    return true;
  }

  get arriving(): boolean {
    return Atomics.load(this.control, STATE) === ARRIVING;
  }
}

/**
 * The worker's side: the body as an input "file" for the byte readers, which ask for bytes in
 * order through windows (src/ingest/source.ts); each read waits until the bytes it needs are in.
 */
export class ArrivingSource extends InputFile {
  private readonly control: Int32Array;
  private readonly bytes: Uint8Array;

  constructor(share: ArrivingShare) {
    super('request body', 4 << 20, share.bytes.byteLength);
    this.control = new Int32Array(share.control);
    this.bytes = new Uint8Array(share.bytes);
  }

  /** Waits until the first `end` bytes are in (or the upload ended); throws ArrivalStopped. */
  private waitFor(end: number): void {
    const c = this.control;
    // stored before the fill mark is read: a chunk that reaches it then wakes this thread
    Atomics.store(c, WANT, end);
    for (;;) {
      const seq = Atomics.load(c, SEQ);
      const state = Atomics.load(c, STATE);
      if (state === FAILED) throw new ArrivalStopped('failed');
      if (Atomics.load(c, FILLED) >= end || state === COMPLETE) return;
      if (Atomics.load(c, YIELD) === 1) throw new ArrivalStopped('yielded');
      // the main thread counts and notifies every change; the timeout is only a backstop
      Atomics.wait(c, SEQ, seq, 1000);
    }
  }

  /**
   * Whether every byte of the declared length is in (waiting for nothing). Whether the body then
   * ended there, or went on and was refused, only the main thread knows: it uses a worker's answer
   * only for a body that arrived whole.
   */
  get allIn(): boolean {
    return Atomics.load(this.control, FILLED) >= this.size;
  }

  override readInto(into: Uint8Array, pos: number, at: number): number {
    const end = Math.min(this.size, at + (into.length - pos));
    if (end <= at) return 0;
    this.waitFor(end);
    into.set(this.bytes.subarray(at, end), pos);
    return end - at;
  }

  override readAll(): Buffer {
    this.waitFor(this.size);
    return Buffer.from(this.bytes.buffer, 0, this.size);
  }
}
