/**
 * What happens around a stored run besides clustering: giving hotspots their track ids before the
 * result is saved, and telling the outside world once the run is over. The run executor calls
 * these hooks; the tracking and notice modules provide them.
 */
import type { ResultHotspot } from '../run/cluster.js';
import type { Dataset, Run, RunStatus, Store } from '../storage/store.js';
import type { TrackSettings } from '../tracks/match.js';

export interface RunContext {
  store: Store;
  dataset: Dataset;
  run: Run;
}

/** A finished run's hotspot with its members named by observation id. */
export interface FinishedHotspot {
  hotspot: ResultHotspot;
  /** observation ids of all members */
  memberIds: string[];
  /** observation ids of the core members */
  coreIds: string[];
}

export interface TrackAssignment {
  /** one track id per hotspot, in the order given */
  trackIds: string[];
  /** how tracks changed against the previous successful run (stored in the run summary as `changes`), null for a first run */
  changes: Record<string, unknown> | null;
}

export interface RunOutcome {
  status: Extract<RunStatus, 'succeeded' | 'failed' | 'cancelled'>;
  summary: Record<string, unknown> | null;
  error: string | null;
}

export interface RunHooks {
  /** Before the result is saved: a track id for every hotspot. */
  assignTracks(ctx: RunContext, hotspots: FinishedHotspot[]): Promise<TrackAssignment>;
  /** After the run is final. Errors are logged by the caller and never change the run's outcome. */
  afterRun(ctx: RunContext, outcome: RunOutcome): Promise<void>;
  /**
   * Set when `assignTracks` is src/jobs/tracking.ts's with these thresholds and nothing else: a run
   * executed in a job thread then matches its tracks there, with the thread's own store
   * connection, instead of sending its hotspots back to the main thread (whose event loop the
   * matching held up to a second for a run of 65 000 points, test/bench/soak-results.md).
   */
  readonly tracksInThread?: Partial<TrackSettings>;
}
