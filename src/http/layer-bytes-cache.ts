/**
 * Whole stored result layers kept in memory as their bytes, the most recently sent first, up to a
 * bound on the bytes held: a map or a client polling `runs/latest/points` asks for the same layer
 * again and again, and reading it from the store each time (SQLite: a MiB piece is a chain of
 * overflow pages) was the largest cost of the service's main thread under the soak benchmark.
 * A stored layer never changes once its run has succeeded, so a run and layer name its bytes.
 * A layer is kept only once it has been read whole; larger layers than `maxLayerBytes` never are.
 */
import type { Buffer } from 'node:buffer';
import type { LayerName } from '../run/layers.js';
import type { Run, Store } from '../storage/store.js';

export class LayerBytesCache {
  private readonly entries = new Map<string, { pieces: Buffer[]; bytes: number }>();
  private held = 0;
  constructor(
    readonly maxBytes = 64 * 1024 * 1024,
    readonly maxLayerBytes = 32 * 1024 * 1024,
  ) {}

  /** bytes held now */
  get bytes(): number {
    return this.held;
  }

  /** The layer's pieces, from memory when kept, else from the store (kept once read whole); null when the run has no stored result. */
  async pieces(store: Store, run: Run, layer: LayerName): Promise<AsyncIterable<Buffer> | Buffer[] | null> {
    // the dataset and finish time too: a run id alone would name another run's layer if ids were ever reused
    const key = `${run.datasetId}\u0000${run.id}\u0000${run.finishedAt ?? ''}\u0000${layer}`;
    const hit = this.entries.get(key);
    if (hit !== undefined) {
      this.entries.delete(key);
      this.entries.set(key, hit);
      return hit.pieces;
    }
    const read = await store.getRunLayerBytes(run.id, layer);
    if (read === null) return null;
    const keep = (pieces: Buffer[], bytes: number): void => this.keep(key, pieces, bytes);
    const maxLayerBytes = this.maxLayerBytes;
    return (async function* () {
      const seen: Buffer[] = [];
      let bytes = 0;
      for await (const p of read) {
        bytes += p.length;
        if (bytes <= maxLayerBytes) seen.push(p);
        yield p;
      }
      if (bytes <= maxLayerBytes) keep(seen, bytes);
    })();
  }

  private keep(key: string, pieces: Buffer[], bytes: number): void {
    if (this.entries.has(key)) return;
    this.entries.set(key, { pieces, bytes });
    this.held += bytes;
    for (const [k, v] of this.entries) {
      if (this.held <= this.maxBytes) break;
      this.entries.delete(k);
      this.held -= v.bytes;
    }
  }
}
