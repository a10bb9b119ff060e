/**
 * Run hooks for a service without track matching or notices: every hotspot starts its own track
 * (`t`, the run id, `-`, the hotspot number, for example "tr000012-3"), no changes are reported,
 * and nothing is sent after a run.
 */
import type { RunHooks } from './hooks.js';

/** Hooks that give each hotspot a fresh track id and do nothing after a run. */
export function defaultHooks(): RunHooks {
  return {
    async assignTracks(ctx, hotspots) {
      return { trackIds: hotspots.map((h) => `t${ctx.run.id}-${h.hotspot.hotspotId}`), changes: null };
    },
    async afterRun() {
      // nothing to tell
    },
  };
}
