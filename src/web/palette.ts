/**
 * Roost's own sequential palette for shading hotspots, light (least) to dark (most). Chosen here:
 * lightness falls steadily from step to step (CIE L* from about 96 to 25, at least 8 units a step), so the order reads the
 * same with any colour vision and in greyscale; the hue drifts from straw through green and teal
 * to indigo only to help tell neighbouring steps apart. No red, no diverging hot/cold scheme.
 */
export const SEQUENTIAL = ['#fbf5d3', '#c8dc96', '#8cc895', '#4aa496', '#2c7088', '#28386a'] as const;

/** One class of the legend: values from `min` to `max` (inclusive) are painted `colour`. */
export interface ShadeClass {
  min: number;
  max: number;
  colour: string;
}

/** Rounds to `digits` significant figures (legend numbers people read). */
export function roundSig(v: number, digits = 2): number {
  if (v === 0 || !Number.isFinite(v)) return v;
  return Number(v.toPrecision(digits));
}

/**
 * Classes of equal count over the values (at most SEQUENTIAL.length), with bounds rounded to two
 * significant figures for the legend; every value falls in exactly one class.
 */
export function shadeClasses(values: number[]): ShadeClass[] {
  const sorted = values.filter(Number.isFinite).sort((a, b) => a - b);
  if (sorted.length === 0) return [];
  const steps = Math.min(SEQUENTIAL.length, sorted.length);
  const uppers: number[] = [];
  for (let c = 1; c <= steps; c++) {
    const v = sorted[Math.min(sorted.length - 1, Math.ceil((c * sorted.length) / steps) - 1)];
    if (uppers.length === 0 || v > uppers[uppers.length - 1]) uppers.push(v);
  }
  // spread the colours over the whole ramp when there are fewer classes than steps
  const pick = (i: number, n: number): string => SEQUENTIAL[n === 1 ? SEQUENTIAL.length - 1 : Math.round((i * (SEQUENTIAL.length - 1)) / (n - 1))];
  return uppers.map((max, i) => ({ min: i === 0 ? sorted[0] : uppers[i - 1], max, colour: pick(i, uppers.length) }));
}

/** The colour of `v`: the first class whose upper bound reaches it. */
export function colourOf(v: number, classes: ShadeClass[]): string {
  for (const c of classes) if (v <= c.max) return c.colour;
  return classes.length ? classes[classes.length - 1].colour : SEQUENTIAL[0];
}
