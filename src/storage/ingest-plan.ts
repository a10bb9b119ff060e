/**
 * The ingest classification both engines share: which records of a batch are new, duplicate,
 * replaced or conflicting, so that the two engines differ only in their SQL.
 */
import type { IngestOptions, IngestResult, ObservationRecord } from './store.js';

/** What one ingest call will do, decided from the batch and the hashes already stored for its ids. */
export interface IngestPlan {
  result: IngestResult;
  insert: ObservationRecord[];
  replace: ObservationRecord[];
}

/** The distinct ids of a batch, in first-seen order. */
export function batchIds(records: ObservationRecord[]): string[] {
  const seen = new Set<string>();
  for (const r of records) seen.add(r.id);
  return [...seen];
}

/**
 * Classifies a batch against the stored hashes (`stored`: id → content hash for the batch's ids
 * already in the dataset). Lists keep batch order.
 */
export function planIngest(records: ObservationRecord[], stored: Map<string, string>, options: IngestOptions): IngestPlan {
  const first = new Map<string, ObservationRecord>();
  const inBatchConflict = new Set<string>();
  const duplicates: string[] = [];
  for (const r of records) {
    const f = first.get(r.id);
    if (f === undefined) first.set(r.id, r);
    else if (f.contentHash === r.contentHash) duplicates.push(r.id);
    else inBatchConflict.add(r.id);
  }
  const accepted: string[] = [];
  const replaced: string[] = [];
  const conflicts: string[] = [];
  const insert: ObservationRecord[] = [];
  const replace: ObservationRecord[] = [];
  for (const [id, r] of first) {
    if (inBatchConflict.has(id)) {
      conflicts.push(id);
      continue;
    }
    const hash = stored.get(id);
    if (hash === undefined) {
      accepted.push(id);
      insert.push(r);
    } else if (hash === r.contentHash) {
      duplicates.push(id);
    } else if (options.replace) {
      replaced.push(id);
      replace.push(r);
    } else {
      conflicts.push(id);
    }
  }
  // duplicates found in the batch pass come before those found against the store; restore batch order
  if (duplicates.length > 1) {
    const order = new Map<string, number>();
    records.forEach((r, i) => order.has(r.id) || order.set(r.id, i));
    duplicates.sort((a, b) => (order.get(a) as number) - (order.get(b) as number));
  }
  const rejected = options.rejected?.length ?? 0;
  const stored_ = options.partial || (conflicts.length === 0 && rejected === 0);
  return {
    result: { accepted, duplicates, replaced, conflicts, stored: stored_ },
    insert: stored_ ? insert : [],
    replace: stored_ ? replace : [],
  };
}
