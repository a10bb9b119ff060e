import { describe, expect, it } from 'vitest';
import { colourOf, SEQUENTIAL, shadeClasses } from '../../src/web/palette.js';

/** sRGB hex to linear RGB. source: IEC 61966-2-1 (sRGB) transfer function. */
function linear(hex: string): [number, number, number] {
  const c = [1, 3, 5].map((i) => parseInt(hex.slice(i, i + 2), 16) / 255);
  return c.map((v) => (v <= 0.04045 ? v / 12.92 : ((v + 0.055) / 1.055) ** 2.4)) as [number, number, number];
}

/** CIE 1976 L* of linear RGB. source: CIE 15 (L* from Y), Y with the sRGB/Rec. 709 luminance weights. */
function lightness([r, g, b]: [number, number, number]): number {
  const y = 0.2126 * r + 0.7152 * g + 0.0722 * b;
  return y > 216 / 24389 ? 116 * Math.cbrt(y) - 16 : (24389 / 27) * y;
}

/**
 * Colour-vision-deficiency simulation matrices for linear RGB at full severity.
 * source: Machado, Oliveira & Fernandes 2009, "A Physiologically-based Model for Simulation of
 * Color Vision Deficiency", IEEE TVCG 15(6), Table 1, severity 1.0 (values from memory).
 */
const MACHADO: Record<string, number[][]> = {
  protanopia: [
    [0.152286, 1.052583, -0.204868],
    [0.114503, 0.786281, 0.099216],
    [-0.003882, -0.048116, 1.051998],
  ],
  deuteranopia: [
    [0.367322, 0.860646, -0.227968],
    [0.280085, 0.672501, 0.047413],
    [-0.01182, 0.04294, 0.968881],
  ],
  tritanopia: [
    [1.255528, -0.076749, -0.178779],
    [-0.078411, 0.930809, 0.147602],
    [0.004733, 0.691367, 0.3039],
  ],
};

const simulate = (m: number[][], c: [number, number, number]): [number, number, number] =>
  m.map((row) => Math.min(1, Math.max(0, row[0] * c[0] + row[1] * c[1] + row[2] * c[2]))) as [number, number, number];

describe('the sequential palette', () => {
  it('falls in lightness at every step, by at least 8 L* units', () => {
    const l = SEQUENTIAL.map((h) => lightness(linear(h)));
    for (let i = 1; i < l.length; i++) expect(l[i - 1] - l[i], `${SEQUENTIAL[i - 1]} → ${SEQUENTIAL[i]}`).toBeGreaterThanOrEqual(8);
  });

  it('keeps that order, with steps of at least 6 L* units, for protanopia, deuteranopia and tritanopia', () => {
    for (const [name, m] of Object.entries(MACHADO)) {
      const l = SEQUENTIAL.map((h) => lightness(simulate(m, linear(h))));
      for (let i = 1; i < l.length; i++) expect(l[i - 1] - l[i], `${name}: step ${i}`).toBeGreaterThanOrEqual(6);
    }
  });

  it('has no red end: no colour whose red channel leads green and blue by much (no hot/cold scheme)', () => {
    for (const h of SEQUENTIAL) {
      const [r, g, b] = [1, 3, 5].map((i) => parseInt(h.slice(i, i + 2), 16));
      expect(r - Math.max(g, b), h).toBeLessThan(40);
    }
  });
});

describe('shade classes', () => {
  it('put every value in exactly one class, lightest for the smallest, darkest for the largest', () => {
    const values = [5, 1, 9, 120, 33, 33, 7, 64, 2, 15, 1000];
    const classes = shadeClasses(values);
    expect(classes.length).toBe(SEQUENTIAL.length);
    for (const v of values) expect(classes.filter((c) => v >= c.min && v <= c.max && (c === classes[0] || v > c.min)).length, String(v)).toBe(1);
    expect(colourOf(1, classes)).toBe(SEQUENTIAL[0]);
    expect(colourOf(1000, classes)).toBe(SEQUENTIAL[SEQUENTIAL.length - 1]);
  });

  it('spread fewer classes over the whole ramp, and one value takes the darkest', () => {
    expect(shadeClasses([3]).map((c) => c.colour)).toEqual([SEQUENTIAL[SEQUENTIAL.length - 1]]);
    const two = shadeClasses([1, 2]);
    expect(two.map((c) => c.colour)).toEqual([SEQUENTIAL[0], SEQUENTIAL[SEQUENTIAL.length - 1]]);
    expect(shadeClasses([])).toEqual([]);
  });
});
