/**
 * Storing one posted batch and saying where its observations stand, the same on the main thread
 * (small posts) and in a job thread (large posts, src/jobs/job-worker.ts): the batch is stored in
 * one transaction of the store's, and the first MAX_PLACEMENTS stored observations are placed
 * against the latest succeeded run's hotspots (src/run/which-hotspot.ts).
 */
import type { HullGeometry } from '../geometry/hull.js';
import type { RecordBatch, RejectedFeature } from '../ingest/records.js';
import { WhichHotspot, type LookupHotspot, type Placement } from '../run/which-hotspot.js';
import type { IngestResult, Store } from '../storage/store.js';

/** A post of a collection is answered with the placement of at most this many observations. */
export const MAX_PLACEMENTS = 1000;

/** Which-hotspot lookups kept (one per dataset and run). */
const KEPT_LOOKUPS = 8;

/**
 * The latest succeeded run of each dataset as a WhichHotspot (its hotspots' core members, hulls
 * and sizes), built once per run and kept until a newer run succeeds. `scope` names the database
 * when one lookup serves several (run ids are unique only within one database).
 */
export class HotspotLookup {
  private readonly cache = new Map<string, WhichHotspot>();

  private async build(store: Store, scope: string, datasetId: string, runId: string, epsMeters: number): Promise<WhichHotspot> {
    const key = `${scope}\u0000${datasetId}\u0000${runId}`;
    const hit = this.cache.get(key);
    if (hit !== undefined) return hit;
    const hotspots = await store.getRunHotspots(runId);
    const pos = await store.getPositions(datasetId, hotspots.flatMap((h) => h.coreMembers));
    const lookup: LookupHotspot[] = hotspots.map((h) => {
      const lon: number[] = [];
      const lat: number[] = [];
      for (const id of h.coreMembers) {
        const p = pos.get(id);
        if (p === undefined) continue; // retracted since the run
        lon.push(p.lon);
        lat.push(p.lat);
      }
      const area = Number(h.figures?.area_km2);
      return { hotspotId: h.hotspotId, trackId: h.trackId, hull: JSON.parse(h.hull) as HullGeometry, count: h.members.length, areaKm2: Number.isFinite(area) ? area : null, coreLon: lon, coreLat: lat };
    });
    const which = new WhichHotspot(lookup, epsMeters);
    this.cache.set(key, which);
    if (this.cache.size > KEPT_LOOKUPS) this.cache.delete(this.cache.keys().next().value!);
    return which;
  }

  /** Where each position stands against the latest succeeded run's hotspots; `run` is null when the dataset has none. */
  async place(store: Store, scope: string, datasetId: string, positions: readonly { lon: number; lat: number }[]): Promise<{ run: string | null; placements: Placement[] | null }> {
    const run = await store.latestRun(datasetId);
    const eps = Number((run?.summary?.parameters as Record<string, unknown> | undefined)?.eps);
    if (run === null || !(eps > 0)) return { run: null, placements: null };
    const which = await this.build(store, scope, datasetId, run.id, eps);
    return { run: run.id, placements: positions.map((p) => which.place(p.lon, p.lat)) };
  }
}

/** What storing a batch came to: all the answer to the post needs, small enough to pass between threads. */
export interface StoredBatch {
  result: IngestResult;
  /** features the reader rejected (only with `partial`) */
  rejected: RejectedFeature[];
  /** records read */
  count: number;
  /** the post index of each id in `result.conflicts` */
  conflictIndex: (number | null)[];
  /** the first MAX_PLACEMENTS records read: post index and id */
  shown: { index: number; id: string }[];
  /** the latest succeeded run placed against; null when none or nothing was placed */
  latestRun: string | null;
  /** placements of `shown`, in order; null when the dataset has no succeeded run or nothing was stored */
  placements: Placement[] | null;
}

/** The store refused or failed on the batch: nothing of it was stored. `cause` is the store's error. */
export class BatchNotStored extends Error {
  constructor(override readonly cause: unknown) {
    super(cause instanceof Error ? cause.message : String(cause));
    this.name = 'BatchNotStored';
  }
}

/**
 * Stores a read batch in one transaction and places its first observations (see the header).
 * @throws BatchNotStored when the store refuses or fails (nothing stored); a failure while placing
 * (the batch is stored then) is thrown as it is
 */
export async function storeBatch(store: Store, lookup: HotspotLookup, scope: string, datasetId: string, batch: RecordBatch, options: { replace: boolean; partial: boolean }): Promise<StoredBatch> {
  let result: IngestResult;
  try {
    result = await store.ingest(datasetId, batch.records, { ...options, rejected: batch.rejected.map((r) => ({ index: r.index, reason: r.message })) });
  } catch (err) {
    throw new BatchNotStored(err);
  }
  const indexOf = new Map<string, number>();
  batch.records.forEach((r, k) => indexOf.has(r.id) || indexOf.set(r.id, batch.indices[k]!));
  const shownRecords = batch.records.slice(0, MAX_PLACEMENTS);
  const placed = result.stored && shownRecords.length > 0 ? await lookup.place(store, scope, datasetId, shownRecords) : { run: null, placements: null };
  return {
    result,
    rejected: batch.rejected,
    count: batch.records.length,
    conflictIndex: result.conflicts.map((id) => indexOf.get(id) ?? null),
    shown: shownRecords.map((r, k) => ({ index: batch.indices[k]!, id: r.id })),
    latestRun: placed.run,
    placements: placed.placements,
  };
}
