import { describe, expect, it } from 'vitest';
import { medoidIndex, sphericalMean } from '../../src/geometry/centre.js';

const RAD = Math.PI / 180;
const f64 = (a: number[]): Float64Array => Float64Array.from(a);

describe('sphericalMean', () => {
  it('puts the centre of points ringed around the North Pole at the pole', () => {
    const c = sphericalMean(f64([0, 90, 180, -90]), f64([89, 89, 89, 89]));
    expect(c.lat).toBeCloseTo(90, 9);
  });

  it('puts the centre of points ringed around the South Pole at the pole', () => {
    const c = sphericalMean(f64([10, 130, -110]), f64([-88, -88, -88]));
    expect(c.lat).toBeCloseTo(-90, 9);
  });

  it('keeps the centre of points either side of ±180° on the antimeridian', () => {
    const c = sphericalMean(f64([179, -179]), f64([10, 10]));
    expect(Math.abs(c.lon)).toBeCloseTo(180, 9);
    // the midpoint of the great-circle arc bulges poleward: tan φm = tan φ / cos(Δλ/2)
    // source: spherical trigonometry (Napier's rules for the right spherical triangle)
    expect(c.lat).toBeCloseTo(Math.atan(Math.tan(10 * RAD) / Math.cos(1 * RAD)) / RAD, 9);
  });

  it('weights members: weight 3 pulls like three copies', () => {
    const weighted = sphericalMean(f64([0, 10]), f64([0, 0]), f64([1, 3]));
    const copies = sphericalMean(f64([0, 10, 10, 10]), f64([0, 0, 0, 0]));
    expect(weighted.lon).toBeCloseTo(copies.lon, 12);
    expect(weighted.lat).toBeCloseTo(0, 12);
    // hand formula: the summed vector on the equator is (1 + 3 cos 10°, 3 sin 10°)
    expect(weighted.lon).toBeCloseTo(Math.atan2(3 * Math.sin(10 * RAD), 1 + 3 * Math.cos(10 * RAD)) / RAD, 12);
  });

  it('averages only the given members', () => {
    const lon = f64([100, 0, 50, 2]);
    const lat = f64([-40, 0, 60, 0]);
    const c = sphericalMean(lon, lat, null, Int32Array.of(1, 3));
    expect(c.lon).toBeCloseTo(1, 12);
    expect(c.lat).toBeCloseTo(0, 12);
  });

  it('falls back to the first heaviest member when the mean vector vanishes', () => {
    // antipodes
    expect(sphericalMean(f64([0, 180]), f64([0, 0]))).toEqual({ lon: 0, lat: 0 });
    expect(sphericalMean(f64([0, 180]), f64([0, 0]), null, Int32Array.of(1, 0))).toEqual({ lon: 180, lat: 0 });
    // three points evenly around the equator sum to zero up to rounding
    expect(sphericalMean(f64([-120, 0, 120]), f64([0, 0, 0]), f64([1, 1, 1]))).toEqual({ lon: -120, lat: 0 });
    // all weights zero
    expect(sphericalMean(f64([5, 6]), f64([7, 8]), f64([0, 0]))).toEqual({ lon: 5, lat: 7 });
  });

  it('rejects an empty member list', () => {
    expect(() => sphericalMean(f64([1]), f64([1]), null, new Int32Array(0))).toThrow(/at least one member/);
  });
});

describe('medoidIndex', () => {
  it('picks the member nearest to the centre', () => {
    const lon = f64([0, 0.9, 3, -2]);
    const lat = f64([0, 0.1, 0, 0]);
    expect(medoidIndex(lon, lat, { lon: 1, lat: 0 })).toBe(1);
  });

  it('breaks ties by the lowest input index, whatever the member order', () => {
    // (0, 0) and (2, 0) are exactly 1° of longitude from (1, 0) on the equator
    const lon = f64([5, 0, 7, 2]);
    const lat = f64([5, 0, 7, 0]);
    expect(medoidIndex(lon, lat, { lon: 1, lat: 0 }, Int32Array.of(3, 1))).toBe(1);
    expect(medoidIndex(lon, lat, { lon: 1, lat: 0 })).toBe(1);
    // duplicates of the same position
    expect(medoidIndex(f64([4, 4, 4]), f64([4, 4, 4]), { lon: 0, lat: 0 }, Int32Array.of(2, 0, 1))).toBe(0);
  });

  it('measures across ±180° and at the pole', () => {
    expect(medoidIndex(f64([170, -179.5, 179]), f64([0, 0, 0]), { lon: 180, lat: 0 })).toBe(1);
    expect(medoidIndex(f64([0, 45, 90]), f64([80, 89.9, 85]), { lon: -135, lat: 90 })).toBe(1);
  });

  it('rejects an empty member list', () => {
    expect(() => medoidIndex(f64([1]), f64([1]), { lon: 0, lat: 0 }, new Int32Array(0))).toThrow(/at least one member/);
  });
});
