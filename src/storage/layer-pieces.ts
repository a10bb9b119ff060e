/** Result layers cut into pieces of about a MiB for storing, and read back piece by piece. */

/** Characters per stored piece of a result layer: about 1 MiB of ASCII text. */
export const LAYER_PIECE_CHARS = 1 << 20;
/** Stored pieces read per query when a layer is served: a few MiB in memory at a time. */
export const LAYER_PIECES_PER_READ = 8;

/** Cuts a text into pieces of at most `size` characters, never between the two halves of a surrogate pair. */
export function cutText(text: string, size = LAYER_PIECE_CHARS): string[] {
  const out: string[] = [];
  for (let at = 0; at < text.length; ) {
    let end = Math.min(text.length, at + size);
    const last = text.charCodeAt(end - 1);
    if (end < text.length && last >= 0xd800 && last <= 0xdbff) end--;
    out.push(text.slice(at, end));
    at = end;
  }
  return out.length > 0 ? out : [''];
}

/**
 * A stored layer read piece by piece through `read(fromPart, count)`: null when it has no piece,
 * else its pieces in order. Each read is its own query, so a result saved again while a layer is
 * being served could mix; a run's result is saved once, before the run is marked succeeded.
 */
export async function storedPieces<T extends string | Buffer>(read: (fromPart: number, count: number) => Promise<T[]> | T[], perRead = LAYER_PIECES_PER_READ): Promise<AsyncIterable<T> | null> {
  const first = await read(0, perRead);
  if (first.length === 0) return null;
  return (async function* () {
    let batch = first;
    let at = 0;
    for (;;) {
      yield* batch;
      if (batch.length < perRead) return;
      at += batch.length;
      // the event loop gets a turn between two reads (each is synchronous on SQLite): a layer
      // read whole (to index it, or for a client on a fast socket) does not hold it throughout
      await new Promise<void>((resolve) => setImmediate(resolve));
      batch = await read(at, perRead);
      if (batch.length === 0) return;
    }
  })();
}

/**
 * Stored pieces read per query when a layer is served as bytes: each read copies its pieces out of
 * the database on the main thread, so fewer at a time keep that pause short (about 2 ms a MiB).
 */
export const LAYER_BYTE_PIECES_PER_READ = 2;

/** All pieces joined, or null. */
export async function joinPieces(pieces: AsyncIterable<string> | null): Promise<string | null> {
  if (pieces === null) return null;
  const parts: string[] = [];
  for await (const p of pieces) parts.push(p);
  return parts.join('');
}
