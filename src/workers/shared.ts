/**
 * Typed arrays in shared memory. The byte readers keep their per-feature columns in them, so that
 * the worker writing the point layers (src/cli/layer-thread.ts) is handed the columns without a
 * copy: a structured clone of a view on a SharedArrayBuffer shares its memory. Reading and
 * writing them costs the same as ordinary typed arrays; they are zero-filled like them.
 */
export function sharedFloat64(length: number): Float64Array {
  return new Float64Array(new SharedArrayBuffer(length * 8));
}

export function sharedUint32(length: number): Uint32Array {
  return new Uint32Array(new SharedArrayBuffer(length * 4));
}

export function sharedUint8(length: number): Uint8Array {
  return new Uint8Array(new SharedArrayBuffer(length));
}
