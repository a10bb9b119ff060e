/**
 * The Monte Carlo test's calibration: under a true null the share of runs with any hotspot at
 * p ≤ 0.05 must stay inside the binomial band of 0.05; planted hotspots get the smallest p there
 * is; and the result does not depend on the number of threads. Seeds are fixed (ROOST_TEST_SEED
 * varies them).
 */
import { describe, expect, it } from 'vitest';
import { pointSet, type PointSet } from '../../src/core/types.js';
import { clusterPoints } from '../../src/run/cluster.js';
import { resolveSettings, type ClusterSettings } from '../../src/run/settings.js';
import { hotspotStatistics, monteCarloPValues, simulatedMaxima, type ChanceSpec } from '../../src/trust/chance.js';
import { insideArea, insideAreaFast, placeUniform, readStudyArea, studyArea, type StudyArea } from '../../src/trust/study-area.js';
import { hotspotHull } from '../../src/geometry/hull.js';
import { randomStream } from '../../src/trust/random.js';
import { runTrials } from '../../src/trust/trials.js';
import { discPositions, rng } from '../reference/seeded.js';

const SEED = Number(process.env.ROOST_TEST_SEED ?? 20261203);
console.log(`chance tests: seed ${SEED} (set ROOST_TEST_SEED to vary)`);

const RAD = Math.PI / 180;
// a box of about 10 km × 10 km at 50° N
const BOX = { west: 8, east: 8.14, south: 50, north: 50.09 };
const boxGeometry = {
  type: 'Polygon' as const,
  coordinates: [[[BOX.west, BOX.south], [BOX.east, BOX.south], [BOX.east, BOX.north], [BOX.west, BOX.north], [BOX.west, BOX.south]]],
};

/** n points uniform on the sphere in BOX, by the test's own generator (not the product's sampler). */
function uniformInBox(n: number, seed: number, weighted = false): PointSet {
  const r = rng(seed);
  const lon: number[] = [];
  const lat: number[] = [];
  const w: number[] = [];
  const z0 = Math.sin(BOX.south * RAD);
  const z1 = Math.sin(BOX.north * RAD);
  for (let i = 0; i < n; i++) {
    lon.push(BOX.west + (BOX.east - BOX.west) * r.next());
    lat.push(Math.asin(z0 + (z1 - z0) * r.next()) / RAD);
    w.push(0.5 + r.next());
  }
  return pointSet(lon, lat, weighted ? w : null);
}

function csrSpec(points: PointSet, settings: ClusterSettings, area: StudyArea, seed: number): ChanceSpec {
  return { settings, seed, model: 'csr', n: points.n, weight: points.weight, area, poolLon: null, poolLat: null };
}

/** The smallest p-value of a run's hotspots (1 when it has none). */
function smallestP(points: PointSet, spec: ChanceSpec, sims: number): number {
  const observed = hotspotStatistics(clusterPoints(points, spec.settings.epsMeters, spec.settings), points.weight);
  const p = monteCarloPValues(observed, simulatedMaxima(spec, 0, sims));
  return p.length === 0 ? 1 : Math.min(...p);
}

/** P(X ≤ k) for X ~ Binomial(n, p), summed term by term. */
function binomialCdf(k: number, n: number, p: number): number {
  let term = Math.pow(1 - p, n);
  let sum = term;
  for (let i = 1; i <= k; i++) {
    term *= ((n - i + 1) / i) * (p / (1 - p));
    sum += term;
  }
  return sum;
}

/** The central 99 % interval of Binomial(n, p): [lo, hi] with P(X < lo) ≤ 0.005 and P(X > hi) ≤ 0.005. */
function band99(n: number, p: number): [number, number] {
  let lo = 0;
  while (binomialCdf(lo, n, p) <= 0.005) lo++;
  let hi = n;
  while (hi > 0 && 1 - binomialCdf(hi - 1, n, p) <= 0.005) hi--;
  return [lo, hi];
}

describe('csr null model', () => {
  it('places points uniformly by area on the sphere, all inside the area', () => {
    // a box from the equator to 60° N: by area, the share below 30° N is
    // (sin 30° − sin 0°) / (sin 60° − sin 0°) = 0.5 / 0.866 = 0.577 (Archimedes' hat-box theorem)
    const area = studyArea({ type: 'Polygon', coordinates: [[[0, 0], [10, 0], [10, 60], [0, 60], [0, 0]]] }, 'polygon given');
    const n = 20000;
    const lon = new Float64Array(n);
    const lat = new Float64Array(n);
    placeUniform(area, n, randomStream(SEED, 1, 0), lon, lat);
    let below = 0;
    for (let i = 0; i < n; i++) {
      expect(insideArea(area, lon[i], lat[i])).toBe(true);
      if (lat[i] < 30) below++;
    }
    const expected = 0.5 / Math.sin(60 * RAD);
    // 4 standard errors of a share from 20,000 draws
    expect(Math.abs(below / n - expected)).toBeLessThan(4 * Math.sqrt((expected * (1 - expected)) / n));
  });

  it('places the very same points with the band index as with a test of every edge (same distribution, bit for bit)', () => {
    // the study area csr uses by default: the buffered convex hull of the observations, its edges
    // broken into pieces within 0.05 m of the arc (hundreds of vertices); and a polygon with a hole
    const r = rng(SEED);
    const obs = Array.from({ length: 2000 }, () => [9 + 2 * r.next(), 50 + 1.5 * r.next()] as const);
    const hull = studyArea(hotspotHull(Float64Array.from(obs, (p) => p[0]), Float64Array.from(obs, (p) => p[1]), { kind: 'convex', bufferMeters: 125 }), 'convex hull of all observations');
    expect(hull.lon.length).toBeGreaterThan(200);
    const holed = readStudyArea(JSON.stringify({ type: 'Polygon', coordinates: [[[0, 0], [4, 0], [4, 3], [2, 5], [0, 3], [0, 0]], [[1, 1], [3, 1], [2, 2.5], [1, 1]]] }));
    for (const area of [hull, holed]) {
      const n = 20000;
      const fast = [new Float64Array(n), new Float64Array(n)] as const;
      const slow = [new Float64Array(n), new Float64Array(n)] as const;
      placeUniform(area, n, randomStream(SEED, 1, 3), fast[0], fast[1]);
      placeUniform(area, n, randomStream(SEED, 1, 3), slow[0], slow[1], insideArea);
      expect(fast[0]).toEqual(slow[0]);
      expect(fast[1]).toEqual(slow[1]);
      // and the same answer for points on and near the vertices, where bands meet
      for (let i = 0; i < area.lon.length; i += 7) {
        for (const [dx, dy] of [[0, 0], [1e-9, 0], [0, -1e-9], [-1e-9, 1e-9]]) {
          expect(insideAreaFast(area, area.lon[i] + dx, area.lat[i] + dy)).toBe(insideArea(area, area.lon[i] + dx, area.lat[i] + dy));
        }
      }
    }
  });

  it('keeps the share of runs with any hotspot at p ≤ 0.05 inside its binomial band (count statistic)', () => {
    // n = 300 runs of 100 uniform points in the box, 19 simulations each (p ≤ 0.05 only when no
    // simulation reaches the largest hotspot). Under the null the share is at most 0.05: it is
    // exactly 0.05 for a continuous statistic, and a little less with counts, whose ties count
    // against the hotspot. Band: the central 99 % interval of Binomial(300, 0.05), [6, 25].
    const runs = 300;
    const settings = resolveSettings({ eps: 500, min_points: 4 });
    const area = studyArea(boxGeometry, 'polygon given');
    let any = 0;
    let withHotspots = 0;
    for (let r = 0; r < runs; r++) {
      const points = uniformInBox(100, SEED + r);
      const observed = hotspotStatistics(clusterPoints(points, 500, settings), null);
      if (observed.length > 0) withHotspots++;
      if (smallestP(points, csrSpec(points, settings, area, SEED + 7 * r), 19) <= 0.05) any++;
    }
    const [lo, hi] = band99(runs, 0.05);
    expect([lo, hi]).toEqual([6, 25]);
    console.log(`csr, count: ${any} of ${runs} runs with a hotspot at p ≤ 0.05 (band ${lo}–${hi}); ${withHotspots} runs had hotspots`);
    expect(withHotspots).toBeGreaterThan(runs * 0.8); // the test is not passed by finding nothing
    expect(any).toBeGreaterThanOrEqual(lo);
    expect(any).toBeLessThanOrEqual(hi);
  });

  it('keeps the share inside its binomial band with a weight statistic (no ties)', () => {
    const runs = 300;
    const settings = resolveSettings({ eps: 500, min_points: 4, weight: 'w' });
    const area = studyArea(boxGeometry, 'polygon given');
    let any = 0;
    for (let r = 0; r < runs; r++) {
      const points = uniformInBox(100, SEED + 1000 + r, true);
      if (smallestP(points, csrSpec(points, settings, area, SEED + 11 * r), 19) <= 0.05) any++;
    }
    const [lo, hi] = band99(runs, 0.05);
    console.log(`csr, weight: ${any} of ${runs} runs with a hotspot at p ≤ 0.05 (band ${lo}–${hi})`);
    expect(any).toBeGreaterThanOrEqual(lo);
    expect(any).toBeLessThanOrEqual(hi);
  });

  it('gives planted hotspots the smallest possible p, 1 / (1 + simulations)', () => {
    const background = uniformInBox(200, SEED + 5);
    const a = discPositions(SEED + 6, 30, 8.03, 50.03, 120);
    const b = discPositions(SEED + 7, 25, 8.1, 50.06, 120);
    const points = pointSet([...background.lon, ...a.lon, ...b.lon], [...background.lat, ...a.lat, ...b.lat]);
    const settings = resolveSettings({ eps: 300, min_points: 5 });
    const area = studyArea(boxGeometry, 'polygon given');
    const observed = hotspotStatistics(clusterPoints(points, 300, settings), null);
    const p = monteCarloPValues(observed, simulatedMaxima(csrSpec(points, settings, area, SEED), 0, 99));
    const planted = [...observed.keys()].filter((h) => observed[h] >= 25);
    expect(planted.length).toBe(2);
    for (const h of planted) expect(p[h]).toBe(1 / 100);
  });

  it('gives the same p-values on 1 and on 2 threads', async () => {
    const points = uniformInBox(300, SEED + 9);
    const settings = resolveSettings({ eps: 400, min_points: 4 });
    const spec = csrSpec(points, settings, studyArea(boxGeometry, 'polygon given'), 7);
    const one = await runTrials({ kind: 'chance', spec }, 23, 1);
    const two = await runTrials({ kind: 'chance', spec }, 23, 2);
    expect(Array.from(two)).toEqual(Array.from(one));
    const again = await runTrials({ kind: 'chance', spec: { ...spec, seed: 8 } }, 23, 1);
    expect(Array.from(again)).not.toEqual(Array.from(one));
  });

  it('reads a study area given by the user and says what is wrong with a bad one', () => {
    const area = readStudyArea(JSON.stringify({ type: 'Feature', properties: {}, geometry: boxGeometry }));
    expect(area.areaKm2).toBeGreaterThan(90);
    expect(area.areaKm2).toBeLessThan(110);
    expect(() => readStudyArea('{"type":"Point","coordinates":[0,0]}')).toThrow(/study_area: the study area must be a Polygon or MultiPolygon/);
    expect(() => readStudyArea('{"type":"Polygon","coordinates":[[[0,0],[1,0],[0,1]]]}')).toThrow(/ring 0: a ring needs at least 4/);
    expect(() => readStudyArea('nope')).toThrow(/is not JSON/);
  });
});

describe('effort null model', () => {
  /** Places along a few paths (where observers walk), cases a random 100 of them, the rest effort. */
  function effortRun(seed: number): { cases: PointSet; poolLon: Float64Array; poolLat: Float64Array } {
    const r = rng(seed);
    const lon: number[] = [];
    const lat: number[] = [];
    for (let path = 0; path < 3; path++) {
      const lat0 = BOX.south + 0.015 + 0.03 * path;
      for (let i = 0; i < 200; i++) {
        lon.push(BOX.west + 0.02 + 0.04 * r.next()); // a 3 km stretch of path
        lat.push(lat0 + 0.0008 * r.normal()); // within some 90 m of it
      }
    }
    // a random labelling: shuffle the 600 places, the first 100 are the cases
    const order = lon.map((_, i) => i);
    for (let i = order.length - 1; i > 0; i--) {
      const j = r.int(i + 1);
      [order[i], order[j]] = [order[j], order[i]];
    }
    const poolLon = Float64Array.from(order, (i) => lon[i]);
    const poolLat = Float64Array.from(order, (i) => lat[i]);
    return { cases: pointSet(poolLon.subarray(0, 100), poolLat.subarray(0, 100)), poolLon, poolLat };
  }

  it('finds no hotspot significant beyond the binomial band when cases are drawn from the effort points', () => {
    // n = 200 runs, 19 simulations each; band: the central 99 % interval of Binomial(200, 0.05), [3, 19].
    // The same cases under csr are mostly significant: the hotspots only mirror the paths.
    const runs = 200;
    const settings = resolveSettings({ eps: 250, min_points: 5 });
    const area = studyArea(boxGeometry, 'polygon given');
    let anyEffort = 0;
    let anyCsr = 0;
    for (let r = 0; r < runs; r++) {
      const { cases, poolLon, poolLat } = effortRun(SEED + 3000 + r);
      const spec: ChanceSpec = { settings, seed: SEED + r, model: 'effort', n: cases.n, weight: null, area: null, poolLon, poolLat };
      if (smallestP(cases, spec, 19) <= 0.05) anyEffort++;
      if (r < 40 && smallestP(cases, csrSpec(cases, settings, area, SEED + r), 19) <= 0.05) anyCsr++;
    }
    const [lo, hi] = band99(runs, 0.05);
    expect([lo, hi]).toEqual([3, 19]);
    console.log(`effort: ${anyEffort} of ${runs} runs with a hotspot at p ≤ 0.05 (band ${lo}–${hi}); under csr ${anyCsr} of 40`);
    expect(anyEffort).toBeGreaterThanOrEqual(lo);
    expect(anyEffort).toBeLessThanOrEqual(hi);
    expect(anyCsr).toBeGreaterThan(30);
  });
});
