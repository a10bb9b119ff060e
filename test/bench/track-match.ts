/**
 * Benchmark (not a test): CPU time of matching two runs of 5,000 hotspots with 850,000 members
 * (each hotspot's members shifted by 7 ids, so most stay in their hotspot), the size of a stored
 * run's tracks stage at 1,000,000 observations. With a second checkout, both codes alternate in
 * one process and must give the same result:
 *
 *   node --import tsx test/bench/track-match.ts [path/to/other/checkout/src/tracks/match.ts]
 */
import { matchRuns as after, type RunHotspot } from '../../src/tracks/match.js';

const other = process.argv[2];
const before: typeof after | null = other ? ((await import(other)) as { matchRuns: typeof after }).matchRuns : null;
const H = 5000, PER = 170;
const box = (k: number): RunHotspot['hull'] => ({ type: 'Polygon', coordinates: [[[k, 0], [k + 0.01, 0], [k + 0.01, 0.01], [k, 0.01], [k, 0]]] });
const mk = (shift: number, track: boolean): RunHotspot[] => Array.from({ length: H }, (_, h) => ({
  hotspotId: h + 1, trackId: track ? `t${h + 1}` : null, hull: box(h), centre: [h, 0] as [number, number], count: PER, areaKm2: 1, densityPerKm2: PER,
  members: Array.from({ length: PER }, (_, k) => `b${(h * PER + k + shift) % (H * PER)}`),
}));
const prev = mk(0, true), cur = mk(7, false);
const cpu = (f: () => unknown) => { const t = process.cpuUsage(); f(); const d = process.cpuUsage(t); return (d.user + d.system) / 1e6; };
if (before !== null) {
  const same = JSON.stringify(before(prev, cur)) === JSON.stringify(after(prev, cur));
  if (!same) throw new Error(`${other} gives another result`);
}
for (let k = 0; k < 4; k++) {
  const b = before === null ? '' : `${other}: ${cpu(() => before(prev, cur)).toFixed(3)} s CPU, `;
  console.log(`${b}this checkout: ${cpu(() => after(prev, cur)).toFixed(3)} s CPU`);
}
