/**
 * Charts drawn with Observable Plot as SVG: the k-distance curve with its knee and the chosen
 * eps, the OPTICS reachability plot with its threshold, and a track's history.
 */
import * as Plot from '@observablehq/plot';

export interface KDistance {
  k: number;
  min_points: number;
  eps_m: number | null;
  knee_index: number | null;
  message: string;
  curve: { rank: number[]; meters: number[] };
}

export interface ChartHandle {
  svg: Element;
  /** the value (metres) at a vertical pixel position within the chart */
  metresAt(y: number): number | undefined;
}

function handle(figure: (SVGSVGElement | HTMLElement) & Plot.Plot): ChartHandle {
  const y = figure.scale('y');
  return { svg: figure, metresAt: (py) => (y && y.invert ? Number(y.invert(py)) : undefined) };
}

/**
 * The top of the k-distance chart, metres: four times the knee (the far tail of isolated points
 * would otherwise flatten the bend into the axis), or the whole curve when there is no knee.
 */
export function kDistanceTop(kd: KDistance, epsM: number | null): number {
  const max = Math.max(...kd.curve.meters, 1);
  const wanted = kd.eps_m === null ? max : Math.min(max, 4 * kd.eps_m);
  return Math.max(wanted, (epsM ?? 0) * 1.1);
}

/** The k-distance curve (metres against rank), the knee marked with a ring, and eps as a rule. */
export function kDistanceChart(kd: KDistance, epsM: number | null, width: number): ChartHandle {
  const rows = kd.curve.rank.map((rank, i) => ({ rank, meters: kd.curve.meters[i] }));
  const knee = kd.knee_index === null || kd.eps_m === null ? [] : [{ rank: kd.knee_index, meters: kd.eps_m }];
  const top = kDistanceTop(kd, epsM);
  const figure = Plot.plot({
    width,
    height: 240,
    marginLeft: 56,
    clip: true,
    ariaLabel: `${kd.k}-distance curve`,
    ariaDescription: kd.message,
    x: { label: `observations, by distance to their ${kd.k}th nearest neighbour`, grid: false },
    y: { label: 'metres', grid: true, domain: [0, top] },
    marks: [
      Plot.lineY(rows, { x: 'rank', y: 'meters', stroke: '#2c7088', strokeWidth: 2 }),
      Plot.ruleY(epsM === null ? [] : [epsM], { stroke: '#111', strokeDasharray: '4 3', ariaLabel: 'chosen eps', className: 'eps-rule' }),
      Plot.dot(knee, { x: 'rank', y: 'meters', r: 6, stroke: '#111', strokeWidth: 2, fill: '#fbf5d3', ariaLabel: 'knee', className: 'knee-marker' }),
      Plot.text(knee, { x: 'rank', y: 'meters', text: (d: { meters: number }) => `knee ${Number(d.meters.toPrecision(4))} m`, dx: -10, dy: -12, textAnchor: 'end' }),
    ],
  });
  return handle(figure as (SVGSVGElement | HTMLElement) & Plot.Plot);
}

export interface ReachabilityRow {
  order: number;
  reachability: number | null;
  hotspot: number | null;
}

/**
 * The reachability plot: one bar per observation in OPTICS order, its height the reachability
 * distance (undefined ones drawn at the top, hatched as a line), with the extraction threshold.
 */
export function reachabilityChart(rows: ReachabilityRow[], thresholdM: number | null, maxEpsM: number, width: number): ChartHandle {
  const top = maxEpsM;
  const data = rows.map((r) => ({ order: r.order, height: r.reachability === null ? top : Math.min(r.reachability, top), undefinedReach: r.reachability === null, clustered: r.hotspot !== null }));
  const figure = Plot.plot({
    width,
    height: 240,
    marginLeft: 56,
    ariaLabel: 'OPTICS reachability plot',
    x: { label: 'observations in OPTICS order', axis: 'bottom' },
    y: { label: 'reachability, metres', grid: true, domain: [0, top] },
    marks: [
      Plot.rectY(data, { x1: (d: { order: number }) => d.order, x2: (d: { order: number }) => d.order + 1, y: 'height', fill: (d: { clustered: boolean }) => (d.clustered ? '#2c7088' : '#b9c2c7') }),
      Plot.ruleY(thresholdM === null ? [] : [thresholdM], { stroke: '#111', strokeDasharray: '4 3', className: 'threshold-rule', ariaLabel: 'extraction threshold' }),
    ],
  });
  return handle(figure as (SVGSVGElement | HTMLElement) & Plot.Plot);
}

export interface TrackEntry {
  run_id: string;
  count: number;
  area_km2: number | null;
}

/** A track's history: observations and area per run, two small line charts side by side. */
export function trackCharts(history: TrackEntry[], width: number): Element {
  const wrap = document.createElement('div');
  wrap.className = 'track-charts';
  const rows = history.map((h, i) => ({ i, run: h.run_id, count: h.count, area: h.area_km2 }));
  const common = { width: Math.max(160, Math.floor(width / 2) - 8), height: 130, marginLeft: 44, x: { label: 'run', ticks: rows.length, tickFormat: (i: number) => rows[i]?.run.slice(-3) ?? '' } };
  wrap.append(
    Plot.plot({ ...common, ariaLabel: 'observations per run', y: { label: 'observations', grid: true, zero: true }, marks: [Plot.line(rows, { x: 'i', y: 'count', stroke: '#2c7088' }), Plot.dot(rows, { x: 'i', y: 'count', fill: '#2c7088' })] }),
    Plot.plot({ ...common, ariaLabel: 'area per run', y: { label: 'km²', grid: true, zero: true }, marks: [Plot.line(rows.filter((r) => r.area !== null), { x: 'i', y: 'area', stroke: '#28386a' }), Plot.dot(rows.filter((r) => r.area !== null), { x: 'i', y: 'area', fill: '#28386a' })] }),
  );
  return wrap;
}
