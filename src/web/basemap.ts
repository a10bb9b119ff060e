/**
 * The map itself: MapLibre GL JS with Roost's offline background (Natural Earth land and
 * coastlines from the world-atlas package, public domain, plus a graticule), or an operator's
 * own style when the service was started with --basemap-style. No glyphs or sprites are used,
 * so the offline map needs nothing beyond this bundle.
 */
import * as maplibregl from 'maplibre-gl';
import type { Map as MapLibreMap, StyleSpecification } from 'maplibre-gl';
import { feature, mesh } from 'topojson-client';
import type { GeometryCollection, Topology } from 'topojson-specification';
import land from 'world-atlas/land-50m.json';

type Geo = GeoJSON.FeatureCollection | GeoJSON.Feature | GeoJSON.Geometry;

/** Graticule lines every `step` degrees (meridians from pole to pole, parallels round the globe). */
export function graticule(step: number): GeoJSON.FeatureCollection {
  const features: GeoJSON.Feature[] = [];
  for (let lon = -180; lon <= 180; lon += step) {
    const coords: [number, number][] = [];
    for (let lat = -85; lat <= 85; lat += 5) coords.push([lon, lat]);
    features.push({ type: 'Feature', properties: { kind: 'meridian', value: lon }, geometry: { type: 'LineString', coordinates: coords } });
  }
  for (let lat = -80; lat <= 80; lat += step) {
    const coords: [number, number][] = [];
    for (let lon = -180; lon <= 180; lon += 5) coords.push([lon, lat]);
    features.push({ type: 'Feature', properties: { kind: 'parallel', value: lat }, geometry: { type: 'LineString', coordinates: coords } });
  }
  return { type: 'FeatureCollection', features };
}

/** The offline style: sea, land, coastlines and two graticules (10° always, 1° when zoomed in). */
export function offlineStyle(): StyleSpecification {
  const topo = land as unknown as Topology<{ land: GeometryCollection }>;
  const landGeo = feature(topo, topo.objects.land) as Geo;
  const coast = mesh(topo, topo.objects.land) as Geo;
  return {
    version: 8,
    sources: {
      land: { type: 'geojson', data: landGeo as GeoJSON.FeatureCollection, attribution: 'Land: Natural Earth (public domain)' },
      coast: { type: 'geojson', data: coast as GeoJSON.Geometry },
      grid10: { type: 'geojson', data: graticule(10) },
      grid1: { type: 'geojson', data: graticule(1) },
    },
    layers: [
      { id: 'sea', type: 'background', paint: { 'background-color': '#dfe6ea' } },
      { id: 'land', type: 'fill', source: 'land', paint: { 'fill-color': '#f7f6f2' } },
      { id: 'grid1', type: 'line', source: 'grid1', minzoom: 5, paint: { 'line-color': '#b8c2c8', 'line-width': 0.5 } },
      { id: 'grid10', type: 'line', source: 'grid10', paint: { 'line-color': '#9aa6ad', 'line-width': 0.8 } },
      { id: 'coast', type: 'line', source: 'coast', paint: { 'line-color': '#6f7b82', 'line-width': 1 } },
    ],
  };
}

/** Opens a map in `container`; `styleUrl` (an operator's style) replaces the offline background. */
export function openMap(container: HTMLElement, styleUrl: string | null): MapLibreMap {
  const map = new maplibregl.Map({
    container,
    style: styleUrl || offlineStyle(),
    center: [0, 20],
    zoom: 1,
    attributionControl: { compact: true },
    // keeps the drawing readable by screenshots and tests
    canvasContextAttributes: { preserveDrawingBuffer: true },
  });
  map.addControl(new maplibregl.NavigationControl({ showCompass: false }), 'top-right');
  map.addControl(new maplibregl.ScaleControl({ unit: 'metric', maxWidth: 120 }), 'bottom-left');
  return map;
}

export { maplibregl };
