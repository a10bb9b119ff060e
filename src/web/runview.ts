/**
 * One run drawn on the map: hotspot hulls shaded by density or count (legend with numbers),
 * centres, noise points (shown on request) and the marks of change since the previous run.
 * Shared by the service's page and the report.
 */
import type { GeoJSONSource, Map as MapLibreMap } from 'maplibre-gl';
import { colourOf, roundSig, shadeClasses, type ShadeClass } from './palette.js';
import { drawMark, markSvg, TRANSITION_MARKS, type TransitionKind } from './transitions.js';

export type FC = GeoJSON.FeatureCollection<GeoJSON.Geometry, Record<string, unknown>>;

export type ShadeBy = 'density_per_km2' | 'count';

export const SHADE_LABELS: Record<ShadeBy, string> = {
  density_per_km2: 'observations per km²',
  count: 'observations',
};

const EMPTY: FC = { type: 'FeatureCollection', features: [] };

export interface RunLayers {
  hotspots: FC;
  centres: FC;
  noise: FC | null;
  /** the changes layer of this run against the one before (GeoJSON from /changes), or null */
  changes: FC | null;
}

/** Adds the (empty) sources and layers of a run once the style has loaded. */
export function prepareRunLayers(map: MapLibreMap): void {
  for (const [kind, mark] of Object.entries(TRANSITION_MARKS)) {
    if (!map.hasImage(`mark-${kind}`)) map.addImage(`mark-${kind}`, drawMark(mark.shape), { pixelRatio: 2 });
  }
  for (const id of ['hotspots', 'centres', 'noise', 'gone', 'marks']) map.addSource(id, { type: 'geojson', data: EMPTY });
  map.addLayer({ id: 'noise', type: 'circle', source: 'noise', layout: { visibility: 'none' }, paint: { 'circle-radius': 2.2, 'circle-color': '#55606a', 'circle-opacity': 0.7 } });
  map.addLayer({ id: 'hotspot-fill', type: 'fill', source: 'hotspots', paint: { 'fill-color': ['get', 'shade'], 'fill-opacity': 0.8 } });
  map.addLayer({ id: 'hotspot-line', type: 'line', source: 'hotspots', paint: { 'line-color': '#1d2a33', 'line-width': 1.2 } });
  map.addLayer({
    id: 'hotspot-selected',
    type: 'line',
    source: 'hotspots',
    filter: ['==', ['get', 'hotspot_id'], -1],
    paint: { 'line-color': '#111111', 'line-width': 3.5 },
  });
  map.addLayer({ id: 'gone', type: 'line', source: 'gone', paint: { 'line-color': '#1d2a33', 'line-width': 1.5, 'line-dasharray': [2, 2] } });
  map.addLayer({ id: 'centres', type: 'circle', source: 'centres', paint: { 'circle-radius': 3, 'circle-color': '#111111', 'circle-stroke-color': '#ffffff', 'circle-stroke-width': 1 } });
  map.addLayer({
    id: 'marks',
    type: 'symbol',
    source: 'marks',
    layout: { 'icon-image': ['concat', 'mark-', ['get', 'transition']], 'icon-allow-overlap': true, 'icon-offset': [0, -14] },
  });
}

/** Sets the shade of every hull (`shade` property) and returns the legend classes. */
export function shadeHotspots(hotspots: FC, by: ShadeBy): { data: FC; classes: ShadeClass[] } {
  const classes = shadeClasses(hotspots.features.map((f) => Number(f.properties[by])));
  const data: FC = {
    ...hotspots,
    features: hotspots.features.map((f) => ({ ...f, properties: { ...f.properties, shade: colourOf(Number(f.properties[by]), classes) } })),
  };
  return { data, classes };
}

/** A hotspot's centre: `centre_lon`/`centre_lat` in layers, `centre` as a pair in summaries and changes. */
export function centreOf(p: Record<string, unknown>): [number, number] | undefined {
  if (Array.isArray(p.centre)) return p.centre as [number, number];
  if (typeof p.centre_lon === 'number' && typeof p.centre_lat === 'number') return [p.centre_lon, p.centre_lat];
  return undefined;
}

/** Point features at each changed hotspot's centre, carrying its transition kind. */
function markPoints(changes: FC | null): FC {
  if (!changes) return EMPTY;
  const features: GeoJSON.Feature<GeoJSON.Geometry, Record<string, unknown>>[] = [];
  for (const f of changes.features) {
    const centre = centreOf(f.properties);
    if (!Array.isArray(centre) || f.properties.transition === 'survival') continue;
    features.push({ type: 'Feature', geometry: { type: 'Point', coordinates: centre }, properties: { transition: f.properties.transition, hotspot_id: f.properties.hotspot_id } });
  }
  return { type: 'FeatureCollection', features };
}

/** Puts a run's layers on the map; returns the legend classes of the shading. */
export function showRun(map: MapLibreMap, layers: RunLayers, by: ShadeBy): ShadeClass[] {
  const { data, classes } = shadeHotspots(layers.hotspots, by);
  (map.getSource('hotspots') as GeoJSONSource).setData(data);
  (map.getSource('centres') as GeoJSONSource).setData(layers.centres);
  (map.getSource('noise') as GeoJSONSource).setData(layers.noise ?? EMPTY);
  const gone: FC = { type: 'FeatureCollection', features: (layers.changes?.features ?? []).filter((f) => f.properties.transition === 'disappearance') };
  (map.getSource('gone') as GeoJSONSource).setData(gone);
  (map.getSource('marks') as GeoJSONSource).setData(markPoints(layers.changes));
  return classes;
}

export function setNoiseVisible(map: MapLibreMap, visible: boolean): void {
  map.setLayoutProperty('noise', 'visibility', visible ? 'visible' : 'none');
}

export function selectHotspot(map: MapLibreMap, hotspotId: number | null): void {
  map.setFilter('hotspot-selected', ['==', ['get', 'hotspot_id'], hotspotId ?? -1]);
}

/** Fits the map to a collection's bbox (or its features' coordinates). */
export function fitTo(map: MapLibreMap, fc: FC, animate = false): void {
  const b = fc.bbox;
  if (b && b.length >= 4) {
    map.fitBounds([[b[0], b[1]], [b[2], b[3]]], { padding: 40, animate, maxZoom: 16 });
  }
}

const fmt = new Intl.NumberFormat('en', { maximumSignificantDigits: 4 });

/** The legend: one row per class with its colour and its numbers, and the marks of change. */
export function legendHtml(classes: ShadeClass[], by: ShadeBy, withChanges: boolean): string {
  const rows = classes
    .map((c) => {
      const range = c.min === c.max ? fmt.format(roundSig(c.max, 3)) : `${fmt.format(roundSig(c.min))} – ${fmt.format(roundSig(c.max))}`;
      return `<li><span class="swatch" style="background:${c.colour}" aria-hidden="true"></span><span class="range">${range}</span></li>`;
    })
    .join('');
  const marks = withChanges
    ? `<p class="legend-title">Since the previous run</p><ul class="legend-marks">${(Object.keys(TRANSITION_MARKS) as TransitionKind[])
        .filter((k) => k !== 'survival')
        .map((k) => `<li>${markSvg(TRANSITION_MARKS[k].shape)} ${k}: ${TRANSITION_MARKS[k].word}${k === 'disappearance' ? ' (dashed outline)' : ''}</li>`)
        .join('')}</ul>`
    : '';
  return `<p class="legend-title">Hotspot shade: ${SHADE_LABELS[by]}</p><ul class="legend-classes">${rows}</ul>
    <p class="legend-note"><span class="dot" aria-hidden="true"></span> centre${''}</p>${marks}`;
}

/** The figures of one hotspot as a definition list (the same names as the API). */
export const FIGURE_FIELDS: [string, string][] = [
  ['hotspot_id', 'hotspot'],
  ['track_id', 'track'],
  ['count', 'observations'],
  ['core_count', 'core'],
  ['border_count', 'border'],
  ['weight', 'weight'],
  ['area_km2', 'area, km²'],
  ['density_per_km2', 'per km²'],
  ['radius_m', 'radius, m'],
  ['centre', 'centre (lon, lat)'],
  ['centre_lon', 'centre longitude'],
  ['centre_lat', 'centre latitude'],
  ['medoid_id', 'medoid'],
  ['first_observed_at', 'first seen'],
  ['last_observed_at', 'last seen'],
];

export function escapeHtml(s: string): string {
  return s.replace(/[&<>"']/g, (c) => `&#${c.charCodeAt(0)};`);
}

export function figuresHtml(p: Record<string, unknown>): string {
  const rows = FIGURE_FIELDS.filter(([k]) => p[k] !== undefined && p[k] !== null)
    .map(([k, label]) => {
      const v = p[k];
      const text = Array.isArray(v) ? v.join(', ') : String(v);
      return `<dt>${label}</dt><dd data-field="${k}">${escapeHtml(text)}</dd>`;
    })
    .join('');
  // counts by category: an object in summaries, one count_<value> field each in layers
  const cats =
    p.categories && typeof p.categories === 'object'
      ? Object.entries(p.categories as Record<string, number>)
      : Object.entries(p)
          .filter(([k]) => k.startsWith('count_'))
          .map(([k, v]) => [k.slice('count_'.length), v as number] as [string, number]);
  const catHtml = cats.length ? `<dt>by category</dt><dd data-field="categories">${cats.map(([k, n]) => `${escapeHtml(k)} ${n}`).join(', ')}</dd>` : '';
  return `<dl class="figures">${rows}${catHtml}</dl>`;
}

/** The table of every hotspot's main figures (the report's, and the page's keyboard route to each hotspot). */
export function hotspotRows(hotspots: FC, withButtons: boolean): string {
  return hotspots.features
    .map((f) => {
      const p = f.properties;
      const id = String(p.hotspot_id);
      const first = withButtons ? `<button type="button" class="pick" data-hotspot="${id}" aria-label="Show hotspot ${id}">${id}</button>` : id;
      return `<tr><td>${first}</td><td>${p.count}</td><td>${fmt.format(Number(p.area_km2))}</td><td>${fmt.format(Number(p.density_per_km2))}</td><td>${fmt.format(Number(p.radius_m))}</td></tr>`;
    })
    .join('');
}

export const HOTSPOT_TABLE_HEAD = '<thead><tr><th scope="col">hotspot</th><th scope="col">observations</th><th scope="col">area, km²</th><th scope="col">per km²</th><th scope="col">radius, m</th></tr></thead>';
