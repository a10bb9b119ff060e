/**
 * The report's script: reads the data inlined in report.html and draws the map, the figures,
 * the k-distance or reachability plot, the warnings, the cautions and the parameters. The
 * MapLibre worker is inlined too and started from a blob, so nothing is fetched.
 */
import './style.css';
import workerSource from 'maplibre-gl/dist/maplibre-gl-worker.mjs?raw';
import { maplibregl, openMap } from './basemap.js';
import { kDistanceChart, reachabilityChart, type KDistance } from './charts.js';
import type { ReportData as SharedReportData } from '../report/report-data.js';
import { escapeHtml, fitTo, HOTSPOT_TABLE_HEAD, hotspotRows, legendHtml, prepareRunLayers, setNoiseVisible, showRun, type FC } from './runview.js';

/** The report's data as this script reads it: layers as FeatureCollections, the k-distance answer with its preview. */
type ReportData = SharedReportData<FC, KDistance & { preview: { hotspots: number; noise: number } | null }>;

declare global {
  interface Window {
    roostMap?: import('maplibre-gl').Map;
  }
}

function start(): void {
  const data = JSON.parse(document.getElementById('roost-report-data')!.textContent!) as ReportData;
  maplibregl.setWorkerUrl(URL.createObjectURL(new Blob([workerSource], { type: 'text/javascript' })));
  const s = data.summary;
  const figures = (s.figures ?? {}) as Record<string, unknown>;
  const params = (s.parameters ?? {}) as Record<string, unknown>;
  const warnings = (s.warnings ?? []) as { message: string }[];
  const cautions = (s.cautions ?? []) as unknown[];
  const root = document.getElementById('report')!;
  const ce = figures.clark_evans as Record<string, unknown> | undefined;
  root.innerHTML = `<h1>${escapeHtml(data.title)}</h1>
  <p class="note">Roost ${escapeHtml(data.roost_version)} · report written ${escapeHtml(data.generated_at)}${data.run ? ` · run ${escapeHtml(data.run.id)} of ${escapeHtml(data.run.created_at)}` : ''}</p>
  <p id="report-counts"><strong data-field="hotspots">${String(figures.hotspots)}</strong> hotspot(s) ·
    ${String(figures.clustered)} of ${String(figures.observations)} observations in hotspots · ${String(figures.noise)} noise${
      ce && ce.computed ? ` · Clark–Evans R ${String(ce.R)} (${escapeHtml(String(ce.pattern))})` : ''
    }</p>
  <div class="map" id="map" role="region" aria-label="Map of hotspots"></div>
  <div class="cols">
    <section><div class="legend" id="legend" aria-label="Legend"></div>
      <p class="controls"><label for="noise-toggle">Noise points</label><input type="checkbox" id="noise-toggle" checked /></p>
      ${data.noise_left_out ? `<p class="note">${data.noise_left_out} noise points are left off the map to keep this file small.</p>` : ''}
    </section>
    <section id="chart-section"><h2 id="chart-title"></h2><div id="chart" class="chart"></div><p id="chart-note" class="note"></p></section>
  </div>
  <h2>Hotspots</h2>
  <table id="hotspot-table">${HOTSPOT_TABLE_HEAD}<tbody>${hotspotRows(data.hotspots, false)}</tbody></table>
  <h2>Parameters</h2>
  <dl class="figures">${Object.entries(params)
    .filter(([, v]) => v !== null && !(Array.isArray(v) && v.length === 0))
    .map(([k, v]) => `<dt>${escapeHtml(k)}</dt><dd>${escapeHtml(typeof v === 'string' ? v : JSON.stringify(v))}</dd>`)
    .join('')}</dl>
  ${warnings.length ? `<h2>Warnings</h2><ul class="warnings">${warnings.map((w) => `<li>${escapeHtml(w.message)}</li>`).join('')}</ul>` : '<h2>Warnings</h2><p class="note">None.</p>'}
  <h2>Read with care</h2><ul class="cautions">${cautions.map((c) => `<li>${escapeHtml(typeof c === 'string' ? c : JSON.stringify(c))}</li>`).join('')}</ul>`;

  const width = document.getElementById('chart')!.clientWidth || 420;
  if (data.kdistance) {
    document.getElementById('chart-title')!.textContent = 'k-distance curve';
    document.getElementById('chart')!.append(kDistanceChart(data.kdistance, Number(params.eps), width).svg);
    document.getElementById('chart-note')!.textContent = `${data.kdistance.message} This run used eps ${String(params.eps)} m (dashed line).`;
  } else if (data.reachability) {
    document.getElementById('chart-title')!.textContent = 'Reachability (OPTICS)';
    const rows = data.reachability.map(([order, reachability, hotspot]) => ({ order, reachability, hotspot }));
    const eps = Number(params.eps);
    const threshold = params.optics_extraction === 'xi' ? null : eps;
    document.getElementById('chart')!.append(reachabilityChart(rows, threshold, Number(params.optics_max_eps ?? 3 * eps), width).svg);
    document.getElementById('chart-note')!.textContent = threshold === null ? 'Hotspots cut by the ξ method.' : `Hotspots cut at eps ${eps} m (dashed line).`;
  }

  const map = openMap(document.getElementById('map')!, null);
  window.roostMap = map;
  map.once('load', () => {
    prepareRunLayers(map);
    const classes = showRun(map, { hotspots: data.hotspots, centres: data.centres, noise: data.noise, changes: null }, 'density_per_km2');
    document.getElementById('legend')!.innerHTML = legendHtml(classes, 'density_per_km2', false);
    setNoiseVisible(map, true);
    fitTo(map, data.hotspots.features.length ? data.hotspots : data.centres);
    map.once('idle', () => (document.body.dataset.state = 'ready'));
  });
  document.getElementById('noise-toggle')!.addEventListener('change', (e) => setNoiseVisible(map, (e.target as HTMLInputElement).checked));
}

start();
