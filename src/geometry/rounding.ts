/**
 * How figures are rounded for output. Figures that can be small (areas, densities, distances,
 * weights, ratios) keep a number of significant figures, not of decimals: a 1,200,000 km² hotspot
 * of 311 observations has a density of 0.000257 per km², which three decimals would print as 0,
 * and a hull of 0.78 m² is 7.8e-7 km², which six decimals would print as 0.000001.
 */

/** Significant figures kept by `roundSignificant` by default. */
export const SIGNIFICANT_FIGURES = 7;

/**
 * x rounded to `digits` significant figures (7 by default); 0, NaN and ±Infinity come back
 * unchanged, and −0 comes back as 0.
 */
export function roundSignificant(x: number, digits = SIGNIFICANT_FIGURES): number {
  if (x === 0 || !Number.isFinite(x)) return x === 0 ? 0 : x;
  const r = Number(x.toPrecision(digits));
  return r === 0 ? 0 : r;
}

/** x rounded to `decimals` places after the point (for positions and times, whose scale is fixed); −0 comes back as 0. */
export function roundDecimals(x: number, decimals: number): number {
  const f = 10 ** decimals;
  const r = Math.round(x * f) / f;
  return r === 0 ? 0 : r;
}

/**
 * A distance in metres for output: seven significant figures, and nothing below a micrometre,
 * where only floating-point noise lives (positions themselves are written to about 1 cm).
 */
export function roundMeters(x: number): number {
  return roundSignificant(roundDecimals(x, 6));
}
