/** The priority of worker threads (src/workers/entry.ts lowers it as each starts). */
import { getPriority, setPriority } from 'node:os';

/**
 * The nice value each worker thread gives itself as it starts: the heavy work (clustering, storing
 * large posts, stored runs) yields the processor to the main thread, whose event loop answers
 * every request and must not wait behind it (test/bench/soak-results.md: on two shared cores the
 * main thread lost the processor for up to half a second at a time). On Linux the nice value
 * belongs to a thread, not to the whole process ("under the current Linux/NPTL implementation of
 * POSIX threads, the nice value is a per-thread attribute", source: setpriority(2),
 * https://man7.org/linux/man-pages/man2/setpriority.2.html), and threads a worker starts inherit
 * it. The value 10 is common practice for background work (nice(1)'s default increment).
 */
export const WORKER_NICE = 10;

/** Lowers this thread's priority to WORKER_NICE; where that is not possible the thread keeps its own. */
export function lowerThreadPriority(): void {
  try {
    // pid 0: the calling thread (see above)
    if (getPriority(0) < WORKER_NICE) setPriority(0, WORKER_NICE);
  } catch {
    // not allowed or not supported here: the work runs at the process's priority
  }
}
