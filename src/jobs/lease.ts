/**
 * Run leases: how long a claimed run stays its claimer's, and how soon another process takes it
 * over when the claimer dies.
 *
 * With a heartbeat of H milliseconds (default 10 000, `--run-heartbeat-ms`):
 * - a claim holds the run for 1.5 H, and the claimer renews that lease every H;
 * - every process with a run queue looks for runs whose lease ran out every H / 4, puts them
 *   back in the queue (or fails them after MAX_INTERRUPTIONS) and claims from the queue at once.
 *
 * So a run whose process died (SIGKILL, out of memory, a lost machine) is running again in another
 * process, or in the same one restarted, at most 1.5 H + H / 4 = 1.75 H after its last renewal,
 * which is within 2 H of the death: 20 s with the default. A process whose renewal comes more than
 * H / 2 late (an event loop held up that long, a database that stopped answering) may lose its run
 * to another process; its own writes to the run then fail (they carry its claim id), it stops the
 * run and leaves it to the new claimer, so a run is never finished twice. Its own look for stopped
 * runs first renews the leases of the runs it executes, so a process never takes its own run back
 * after a long step held its event loop.
 */
import type { Run, Store } from '../storage/store.js';

/** Default time between lease renewals, milliseconds. */
export const DEFAULT_HEARTBEAT_MS = 10_000;

/** Times a run's process may stop under it before the run is failed instead of queued again. */
export const MAX_INTERRUPTIONS = 3;

/** A claim's lease for a heartbeat, milliseconds. */
export function leaseMs(heartbeatMs: number): number {
  return Math.ceil(heartbeatMs * 1.5);
}

/** Time between looks for runs whose lease ran out, milliseconds. */
export function takeoverScanMs(heartbeatMs: number): number {
  return Math.max(1, Math.floor(heartbeatMs / 4));
}

/**
 * Renews the lease of a run this process claimed every heartbeat, until `stop()`. `onLost` is
 * called once when the store says the run is no longer this claim's (cancelled, finished
 * elsewhere or taken over); a renewal that fails for another reason (the database briefly
 * unreachable) is tried again at the next beat.
 */
export function keepLease(store: Store, run: Run, heartbeatMs: number, onLost: () => void, onError: (err: unknown) => void = () => undefined): { stop(): void } {
  const claim = run.workerId;
  if (claim === null) throw new RangeError(`run ${run.id} has no claim to renew`);
  let stopped = false;
  let busy = false;
  const timer = setInterval(() => {
    if (stopped || busy) return;
    busy = true;
    store
      .renewRunLease(run.id, claim, leaseMs(heartbeatMs))
      .then(
        (held) => {
          if (!held && !stopped) {
            stopped = true;
            clearInterval(timer);
            onLost();
          }
        },
        (err: unknown) => onError(err),
      )
      .finally(() => (busy = false));
  }, heartbeatMs);
  timer.unref();
  return {
    stop() {
      stopped = true;
      clearInterval(timer);
    },
  };
}
