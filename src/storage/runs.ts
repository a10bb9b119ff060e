/** Run ids, the default claim lease, what an interrupted run says, and the store's clock. */

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
