/**
 * Brute-force DBSCAN, the oracle for tests: O(n²) haversine distances, no index, no cleverness.
 * Applies the same documented rules as src/core/dbscan.ts (inclusive eps with the same 1 µm
 * slack, min_points counting the point itself, weighted core test, hotspots as connected
 * components of core points numbered by their lowest core index, border to the nearest core
 * point with ties to the lower hotspot number).
 * source: Ester, Kriegel, Sander, Xu (1996), "A density-based algorithm for discovering clusters
 * in large spatial databases with noise", KDD-96, definitions 1–5; haversine formula.
 */
import { haversineMeters } from '../../src/core/haversine.js';
import { ROLE_BORDER, ROLE_CORE, ROLE_NOISE, type Clustering, type PointSet } from '../../src/core/types.js';

/** Tolerance the product adds to eps, metres. */
const SLACK_M = 1e-6;

/** Brute-force DBSCAN with great-circle distances in metres; see the file header for the rules. */
export function bruteDbscan(points: PointSet, epsMeters: number, minPoints: number): Clustering {
  const { n, lon, lat, weight } = points;
  const limit = epsMeters + SLACK_M;
  const dist = (i: number, j: number): number => haversineMeters(lon[i], lat[i], lon[j], lat[j]);
  const isCore = new Array<boolean>(n).fill(false);
  for (let i = 0; i < n; i++) {
    let sum = 0;
    for (let j = 0; j < n; j++) if (dist(i, j) <= limit) sum += weight ? weight[j] : 1;
    isCore[i] = sum >= minPoints;
  }
  // connected components of core points by breadth-first search, started from the lowest index
  // not yet reached, which numbers hotspots by their lowest core index
  const labels = new Int32Array(n).fill(-1);
  let count = 0;
  for (let s = 0; s < n; s++) {
    if (!isCore[s] || labels[s] >= 0) continue;
    const queue = [s];
    labels[s] = count;
    while (queue.length > 0) {
      const i = queue.pop()!;
      for (let j = 0; j < n; j++) {
        if (isCore[j] && labels[j] < 0 && dist(i, j) <= limit) {
          labels[j] = count;
          queue.push(j);
        }
      }
    }
    count++;
  }
  const roles = new Uint8Array(n);
  for (let i = 0; i < n; i++) {
    if (isCore[i]) {
      roles[i] = ROLE_CORE;
      continue;
    }
    let best = -1;
    let bestD = Infinity;
    for (let j = 0; j < n; j++) {
      if (!isCore[j]) continue;
      const d = dist(i, j);
      if (d > limit) continue;
      if (d < bestD || (d === bestD && labels[j] < best)) {
        bestD = d;
        best = labels[j];
      }
    }
    labels[i] = best;
    roles[i] = best >= 0 ? ROLE_BORDER : ROLE_NOISE;
  }
  return { labels, roles, count };
}
