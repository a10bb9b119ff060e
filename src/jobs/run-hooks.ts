/**
 * The run hooks the service uses: track ids before a result is saved (tracking.ts) and the notice
 * of change after a run (notify.ts). Notices are sent in the background so that a slow receiver
 * does not hold a run slot; `idle()` waits for those under way and `close()` stops their retries.
 */
import type { TrackSettings } from '../tracks/match.js';
import type { RunHooks } from './hooks.js';
import { notifyRun, resolveWebhookSettings, type DeliveryReport, type NoticeLog, type WebhookSettings } from './notify.js';
import { assignTracks } from './tracking.js';

export interface RoostHookOptions {
  /** tracking thresholds; default DEFAULT_TRACK_SETTINGS */
  trackSettings?: Partial<TrackSettings>;
  /** notice retries and time limits; default DEFAULT_WEBHOOK_SETTINGS */
  webhook?: Partial<WebhookSettings>;
  /** base URL for absolute links in notices (for example https://roost.example.org); null: paths */
  publicUrl?: string | null;
  log?: NoticeLog;
  /** told of every notice's outcome (for tests and metrics) */
  onNotice?: (runId: string, report: DeliveryReport) => void;
  /** told of every failed attempt that will be tried again, before the wait (for tests and metrics) */
  onAttempt?: (runId: string, report: DeliveryReport) => void;
}

export interface RoostHooks extends RunHooks {
  /** Resolves once every notice under way has been delivered or given up. */
  idle(): Promise<void>;
  /** Stops waiting between attempts and aborts attempts under way; then resolves like idle(). */
  close(): Promise<void>;
}

/** Run hooks with tracks and notices. Throws a RangeError for bad webhook settings. */
export function createRoostHooks(options: RoostHookOptions = {}): RoostHooks {
  const webhook = resolveWebhookSettings(options.webhook);
  const pending = new Set<Promise<void>>();
  const stop = new AbortController();
  return {
    assignTracks: (ctx, hotspots) => assignTracks(ctx, hotspots, options.trackSettings),
    tracksInThread: { ...options.trackSettings },
    async afterRun(ctx, outcome) {
      if (stop.signal.aborted) return;
      // the dataset as it is now: a webhook changed or removed during the run is respected
      const dataset = await ctx.store.getDataset(ctx.dataset.id);
      if (dataset === null || dataset.webhook === null) return;
      const p = notifyRun(dataset, ctx.run, outcome, { settings: webhook, publicUrl: options.publicUrl ?? null, log: options.log, signal: stop.signal, onAttempt: (rep) => options.onAttempt?.(ctx.run.id, rep) }).then(
        (report) => {
          if (report) options.onNotice?.(ctx.run.id, report);
        },
        (err: unknown) => options.log?.warn({ err, run: ctx.run.id }, 'run notice failed'),
      );
      pending.add(p);
      void p.finally(() => pending.delete(p));
    },
    async idle() {
      while (pending.size > 0) await Promise.all([...pending]);
    },
    async close() {
      stop.abort();
      await this.idle();
    },
  };
}
