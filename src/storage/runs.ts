/** Run ids, the default claim lease, what an interrupted run says, the store's clock, and stored hotspots as read. */
import type { RunHotspot } from './store.js';

/** "r" and at least six digits. */
export function formatRunId(seq: number): string {
  return `r${String(seq).padStart(6, '0')}`;
}

/** The sequence number of a run id, or null when the text is not a run id. */
export function parseRunId(runId: string): number | null {
  const m = typeof runId === 'string' ? /^r(\d{1,15})$/.exec(runId) : null;
  return m === null ? null : Number(m[1]);
}

/**
 * A claim's lease when the claimer names none, milliseconds. The run queue passes its own
 * (src/jobs/lease.ts); this default fits a caller that renews every 10 s.
 */
export const DEFAULT_LEASE_MS = 15_000;

/**
 * What a run says after its process stopped `times` times before it finished: queued again, or
 * (at the limit) failed, with what the user can do.
 */
export function interruptedMessage(times: number, failed: boolean): string {
  const head = `interrupted ${times} time${times === 1 ? '' : 's'}: the process running it stopped before it finished`;
  return failed
    ? `${head}; not tried again. A run this large may need more memory than the service has: narrow it (a shorter window, a where condition) or ask the operator to look at the service log for this run`
    : `${head}; queued again`;
}

export function nowIso(): string {
  return new Date().toISOString();
}

/** Statuses a run never leaves. */
const FINISHED: ReadonlySet<string> = new Set(['succeeded', 'failed', 'cancelled']);

/**
 * Finished runs as last read, by sequence number and update time, so that asking for the latest
 * run of a dataset again and again (every `runs/latest/…` GET, every observation post placing its
 * points) reads the row's key and update time only, not its settings and summary JSON each time.
 * A finished run's row no longer changes; the update time is compared all the same, so a row
 * changed by any process is read again. Runs handed out are frozen (deeply), as they are shared.
 */
export class FinishedRuns<R extends { status: string }> {
  private readonly runs = new Map<number, { updated: string; run: R }>();
  constructor(private readonly max = 64) {}

  /** The run of `seq` updated at `updated`, from memory when kept, else from `read` (kept when finished). */
  async get(seq: number, updated: string, read: () => Promise<R | null>): Promise<R | null> {
    const hit = this.runs.get(seq);
    if (hit !== undefined && hit.updated === updated) return hit.run;
    const run = await read();
    if (run === null || !FINISHED.has(run.status)) return run;
    deepFreeze(run);
    this.runs.delete(seq);
    this.runs.set(seq, { updated, run });
    if (this.runs.size > this.max) this.runs.delete(this.runs.keys().next().value!);
    return run;
  }
}

function deepFreeze(v: unknown): void {
  if (v === null || typeof v !== 'object' || Object.isFrozen(v)) return;
  Object.freeze(v);
  for (const x of Object.values(v)) deepFreeze(x);
}

/**
 * A stored hotspot as read back, its core members parsed from their JSON text only when asked
 * for: matching a run's tracks reads the previous run's members, never its core members, which
 * are most of the members again (half the parsing of a million member ids).
 */
/**
 * A stored member list (the `JSON.stringify` of the ids, `count` of them) read back. A text of
 * that form without a backslash holds no escape, so every id is the text between two `","`
 * (a quote inside an id would be escaped): split in one go, about half the time of `JSON.parse`
 * for the million ids a large run's previous hotspots hold (0.15 against 0.33 s of CPU,
 * measured). Any other text, or one that does not split into `count` ids, is parsed.
 */
export function parseMembers(text: string, count: number): string[] {
  if (text.length >= 4 && text.charCodeAt(0) === 91 && text.charCodeAt(1) === 34 && text.endsWith('"]') && !text.includes('\\')) {
    const ids = text.slice(2, -2).split('","');
    if (ids.length === count) return ids;
  }
  return JSON.parse(text) as string[];
}

export function storedHotspot(hotspotId: number, trackId: string | null, members: string[], coreMembersText: string, hull: string, figures: Record<string, unknown> | null): RunHotspot {
  let core: string[] | null = null;
  return {
    hotspotId,
    trackId,
    members,
    get coreMembers(): string[] {
      return (core ??= JSON.parse(coreMembersText) as string[]);
    },
    set coreMembers(v: string[]) {
      core = v;
    },
    hull,
    figures,
  };
}
