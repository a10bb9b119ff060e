/**
 * The service's map page: `/` lists the datasets, `/datasets/{id}` shows a dataset's runs on a
 * map with the charts for choosing eps. Everything comes from the service's own API.
 */
import './style.css';
import workerUrl from 'maplibre-gl/dist/maplibre-gl-worker.mjs?url';
import type { Map as MapLibreMap, MapLayerMouseEvent } from 'maplibre-gl';
import { ApiError, getJson, storedKey, storeKey } from './api.js';
import { maplibregl, openMap } from './basemap.js';
import { kDistanceChart, kDistanceTop, reachabilityChart, trackCharts, type KDistance } from './charts.js';
import {
  escapeHtml,
  figuresHtml,
  fitTo,
  HOTSPOT_TABLE_HEAD,
  hotspotRows,
  legendHtml,
  prepareRunLayers,
  selectHotspot,
  setNoiseVisible,
  showRun,
  type FC,
  type ShadeBy,
} from './runview.js';
import { sweepGrid, sweepTableHtml, type Sweep } from './sweep.js';
import { markSvg, TRANSITION_MARKS, type TransitionKind } from './transitions.js';

maplibregl.setWorkerUrl(workerUrl);

declare global {
  interface Window {
    /** the page's map, for people poking at it in the console and for the browser tests */
    roostMap?: MapLibreMap;
  }
}

interface Dataset {
  id: string;
  name: string;
  settings: Record<string, unknown>;
}
interface Run {
  id: string;
  status: string;
  created_at: string;
  finished_at: string | null;
  settings: Record<string, unknown>;
  summary: Record<string, unknown> | null;
}

const app = document.getElementById('app')!;
const basemapStyle = document.querySelector<HTMLMetaElement>('meta[name="roost-basemap-style"]')?.content || null;
const enc = encodeURIComponent;

function setState(state: string): void {
  document.body.dataset.state = state;
}

function fail(err: unknown): void {
  if (err instanceof ApiError && (err.status === 401 || err.status === 403)) return askForKey(err);
  app.innerHTML = `<p class="error" role="alert">${escapeHtml((err as Error).message ?? String(err))}</p>`;
  setState('error');
}

/** The form for an API key, shown when the service asks for one (or refuses the one given). */
function askForKey(err: ApiError): void {
  const had = storedKey() !== null;
  app.innerHTML = `<section class="landing"><h1>An API key is needed</h1>
    <p role="alert">${escapeHtml(err.message)}</p>
    <form id="key-form" class="key-form">
      <label for="api-key">API key</label>
      <input type="password" id="api-key" autocomplete="off" required />
      <button type="submit">Use this key</button>
    </form>
    <p class="note">The key is kept in this browser tab only, until it is closed.${had ? ' The key given before was refused.' : ''}</p></section>`;
  document.getElementById('key-form')!.addEventListener('submit', (e) => {
    e.preventDefault();
    storeKey((document.getElementById('api-key') as HTMLInputElement).value);
    location.reload();
  });
  (document.getElementById('api-key') as HTMLInputElement).focus();
  setState('key-needed');
}

/** Says in the header whether a key is in use, with a button to forget it. */
function showKeyState(): void {
  const header = document.querySelector('header.top')!;
  header.querySelector('.key-state')?.remove();
  if (storedKey() === null) return;
  const span = document.createElement('span');
  span.className = 'key-state';
  span.innerHTML = 'API key in use <button type="button" id="forget-key">Forget the key</button>';
  header.append(span);
  document.getElementById('forget-key')!.addEventListener('click', () => {
    storeKey(null);
    location.reload();
  });
}

async function landing(): Promise<void> {
  document.title = 'Roost: datasets';
  const { datasets } = await getJson<{ datasets: Dataset[] }>('/v1/datasets');
  const items = datasets.map((d) => `<li><a href="/datasets/${enc(d.id)}">${escapeHtml(d.name || d.id)}</a> <code>${escapeHtml(d.id)}</code></li>`).join('');
  app.innerHTML = `<section class="landing"><h1>Datasets</h1>${
    datasets.length ? `<ul id="datasets">${items}</ul>` : '<p>No datasets yet. <code>POST /v1/datasets</code> creates one; <code>npm start -- --demo</code> stores the demo.</p>'
  }<p class="note">The API is described at <a href="/docs">/docs</a> (<a href="/openapi.yaml">openapi.yaml</a>).</p></section>`;
  setState('ready');
}

const fmt = (v: number): string => new Intl.NumberFormat('en', { maximumSignificantDigits: 4 }).format(v);

async function datasetPage(id: string): Promise<void> {
  const dataset = await getJson<Dataset>(`/v1/datasets/${enc(id)}`);
  document.title = `Roost: ${dataset.name || dataset.id}`;
  const { runs: allRuns } = await getJson<{ runs: Run[] }>(`/v1/datasets/${enc(id)}/runs?limit=100`);
  const runs = allRuns.filter((r) => r.status === 'succeeded');
  const minPoints = Number(dataset.settings.min_points ?? 5);

  app.innerHTML = `<div class="layout">
    <aside class="side" aria-label="Dataset, runs and hotspots">
      <h1>${escapeHtml(dataset.name || dataset.id)}</h1>
      <div class="controls">
        <label for="run-picker">Run</label>
        <select id="run-picker">${runs.map((r) => `<option value="${r.id}">${r.id} · ${new Date(r.finished_at ?? r.created_at).toISOString().slice(0, 16).replace('T', ' ')} UTC · ${(r.summary?.figures as { hotspots?: number } | undefined)?.hotspots ?? '?'} hotspots</option>`).join('')}</select>
        <label for="shade-by">Shade by</label>
        <select id="shade-by"><option value="density_per_km2">observations per km²</option><option value="count">observations</option></select>
        <label for="noise-toggle">Noise points</label>
        <span><input type="checkbox" id="noise-toggle" /> <span id="noise-count" class="note"></span></span>
      </div>
      ${runs.length ? '' : '<p class="note">This dataset has no finished run yet.</p>'}
      <section class="legend" id="legend" aria-label="Legend"></section>
      <section id="changes" class="changes" aria-label="Changes since the previous run"></section>
      <section id="hotspot-panel" aria-live="polite" aria-label="Selected hotspot"><p class="note">Click a hotspot on the map, or pick one below, to see its figures and history.</p></section>
      <h2>Hotspots</h2>
      <table id="hotspot-table">${HOTSPOT_TABLE_HEAD}<tbody></tbody></table>
      <section id="run-notes"></section>
      <section id="choose-eps" aria-label="Choosing eps">
        <h2>Choosing eps</h2>
        <div class="controls">
          <label for="min-points">min_points</label>
          <input type="number" id="min-points" min="2" max="1000" step="1" value="${minPoints}" />
        </div>
        <div id="kdist-chart" class="chart"></div>
        <p id="kdist-message" class="note"></p>
        <div class="controls">
          <label for="eps-handle">eps, metres</label>
          <input type="range" id="eps-handle" min="1" max="1000" step="1" value="100" />
          <label for="eps-value">eps (type)</label>
          <input type="number" id="eps-value" min="0" step="any" />
        </div>
        <p id="eps-preview" class="preview" aria-live="polite"></p>
        <button type="button" id="run-with-eps">Run with this eps</button>
        <p id="run-status" class="note" aria-live="polite"></p>
      </section>
      <section id="sweep" aria-label="Other settings">
        <h2>Other settings</h2>
        <p class="note">Clusters the dataset at eps and min_points around its own setting (${escapeHtml(String(dataset.settings.eps ?? '?'))} m, ${minPoints}) and counts hotspots and noise for each. This costs some work on the service, so it runs only when asked.</p>
        <button type="button" id="sweep-button">Try other settings</button>
        <p id="sweep-status" class="note" aria-live="polite"></p>
        <div id="sweep-result"></div>
      </section>
      <section id="reachability" hidden aria-label="OPTICS reachability"><h2>Reachability (OPTICS)</h2><div id="reach-chart" class="chart"></div><p id="reach-note" class="note"></p></section>
    </aside>
    <div class="map" id="map" role="region" aria-label="Map of hotspots"></div>
  </div>`;

  const map = openMap(document.getElementById('map')!, basemapStyle);
  window.roostMap = map;
  await new Promise<void>((resolve) => (map.loaded() ? resolve() : map.once('load', () => resolve())));
  prepareRunLayers(map);

  const picker = document.getElementById('run-picker') as HTMLSelectElement;
  const shadeBy = document.getElementById('shade-by') as HTMLSelectElement;
  const noiseToggle = document.getElementById('noise-toggle') as HTMLInputElement;
  const panel = document.getElementById('hotspot-panel')!;
  let current: { run: Run; hotspots: FC; centres: FC; noise: FC | null; changes: FC | null } | null = null;

  const drawLegend = (classes: ReturnType<typeof showRun>) => {
    document.getElementById('legend')!.innerHTML = legendHtml(classes, shadeBy.value as ShadeBy, current?.changes !== null);
  };

  const showHotspot = async (hotspotId: number) => {
    if (!current) return;
    const f = current.hotspots.features.find((x) => Number(x.properties.hotspot_id) === hotspotId);
    if (!f) return;
    selectHotspot(map, hotspotId);
    const p = f.properties;
    panel.innerHTML = `<h2>Hotspot ${hotspotId}</h2>${figuresHtml(p)}<div id="track-chart"></div>`;
    const track = p.track_id;
    if (typeof track === 'string') {
      const t = await getJson<{ history: { run_id: string; count: number; area_km2: number | null }[] }>(`/v1/datasets/${enc(id)}/tracks/${enc(track)}`);
      const box = document.getElementById('track-chart');
      if (box) {
        box.innerHTML = `<h3 class="legend-title">Track ${escapeHtml(track)}: ${t.history.length} run(s)</h3>`;
        box.append(trackCharts(t.history, panel.clientWidth || 360));
      }
    }
  };

  map.on('click', 'hotspot-fill', (e: MapLayerMouseEvent) => {
    const id = Number(e.features?.[0]?.properties?.hotspot_id);
    if (Number.isFinite(id)) void showHotspot(id);
  });
  map.on('mouseenter', 'hotspot-fill', () => (map.getCanvas().style.cursor = 'pointer'));
  map.on('mouseleave', 'hotspot-fill', () => (map.getCanvas().style.cursor = ''));
  document.getElementById('hotspot-table')!.addEventListener('click', (e) => {
    const b = (e.target as HTMLElement).closest('button.pick') as HTMLButtonElement | null;
    if (b) void showHotspot(Number(b.dataset.hotspot));
  });

  const loadRun = async (runId: string, fit: boolean) => {
    setState('loading');
    const run = runs.find((r) => r.id === runId)!;
    const base = `/v1/datasets/${enc(id)}/runs/${enc(runId)}`;
    const [hotspots, centres] = await Promise.all([getJson<FC>(`${base}/hotspots`), getJson<FC>(`${base}/centres`)]);
    const earlier = runs.some((r) => Number(r.id.slice(1)) < Number(runId.slice(1)));
    const changes = earlier ? await getJson<FC>(`/v1/datasets/${enc(id)}/changes?to=${enc(runId)}&format=geojson`) : null;
    const noise = noiseToggle.checked ? await getJson<FC>(`${base}/noise`) : null;
    current = { run, hotspots, centres, noise, changes };
    drawLegend(showRun(map, current, shadeBy.value as ShadeBy));
    setNoiseVisible(map, noiseToggle.checked);
    const figures = (run.summary?.figures ?? {}) as Record<string, number>;
    document.getElementById('noise-count')!.textContent = figures.noise === undefined ? '' : `${figures.noise} of ${figures.observations}`;
    document.querySelector('#hotspot-table tbody')!.innerHTML = hotspotRows(hotspots, true);
    const cs = document.getElementById('changes')!;
    if (changes) {
      const items = changes.features
        .filter((f) => f.properties.transition !== 'survival')
        .map((f) => {
          const kind = f.properties.transition as TransitionKind;
          return `<li>${markSvg(TRANSITION_MARKS[kind].shape)} hotspot ${f.properties.hotspot_id} (${escapeHtml(String(f.properties.track_id))}): ${kind}, ${TRANSITION_MARKS[kind].word}</li>`;
        });
      const survived = changes.features.filter((f) => f.properties.transition === 'survival').length;
      cs.innerHTML = `<h2>Since the previous run</h2><ul>${items.join('')}<li>${markSvg('circle')} ${survived} hotspot(s) carried on</li></ul>`;
    } else cs.innerHTML = '<p class="note">This is the first run: there is nothing earlier to compare it with.</p>';
    const warnings = (run.summary?.warnings ?? []) as { message: string }[];
    const cautions = (run.summary?.cautions ?? []) as string[];
    const params = run.summary?.parameters as Record<string, unknown> | undefined;
    document.getElementById('run-notes')!.innerHTML =
      `<h2>Parameters</h2><p class="note">${params ? Object.entries(params).filter(([, v]) => v !== null && !(Array.isArray(v) && v.length === 0)).map(([k, v]) => `${escapeHtml(k)} ${escapeHtml(JSON.stringify(v))}`).join(' · ') : ''}</p>` +
      (warnings.length ? `<h2>Warnings</h2><ul class="warnings">${warnings.map((w) => `<li>${escapeHtml(w.message)}</li>`).join('')}</ul>` : '') +
      `<h2>Read with care</h2><ul class="cautions">${cautions.map((c) => `<li>${escapeHtml(typeof c === 'string' ? c : JSON.stringify(c))}</li>`).join('')}</ul>`;
    panel.innerHTML = '<p class="note">Click a hotspot on the map, or pick one below, to see its figures and history.</p>';
    selectHotspot(map, null);
    await showReachability(run);
    if (fit) fitTo(map, hotspots.features.length ? hotspots : centres);
    await new Promise<void>((resolve) => map.once('idle', () => resolve()));
    setState('ready');
  };

  const showReachability = async (run: Run) => {
    const section = document.getElementById('reachability')!;
    const params = (run.summary?.parameters ?? {}) as Record<string, unknown>;
    if (params.method !== 'optics') {
      section.hidden = true;
      return;
    }
    section.hidden = false;
    const points = await getJson<FC>(`/v1/datasets/${enc(id)}/runs/${enc(run.id)}/points`);
    const rows = points.features
      .map((f) => ({ order: Number(f.properties.optics_order), reachability: f.properties.reachability_m as number | null, hotspot: f.properties.hotspot_id as number | null }))
      .filter((r) => Number.isFinite(r.order))
      .sort((a, b) => a.order - b.order);
    const eps = Number(params.eps);
    const maxEps = Number(params.optics_max_eps ?? 3 * eps);
    const threshold = params.optics_extraction === 'xi' ? null : eps;
    const box = document.getElementById('reach-chart')!;
    box.replaceChildren(reachabilityChart(rows, threshold, maxEps, box.clientWidth || 380).svg);
    document.getElementById('reach-note')!.textContent =
      threshold === null ? `Hotspots cut by the ξ method (ξ = ${String(params.xi ?? 0.05)}): valleys between steep drops and rises, no single threshold.` : `Hotspots cut at eps ${fmt(eps)} m (dashed line): each valley below it is a hotspot.`;
  };

  picker.addEventListener('change', () => void loadRun(picker.value, false).catch(fail));
  shadeBy.addEventListener('change', () => current && drawLegend(showRun(map, current, shadeBy.value as ShadeBy)));
  noiseToggle.addEventListener('change', async () => {
    setState('loading');
    if (current && noiseToggle.checked && current.noise === null) {
      current.noise = await getJson<FC>(`/v1/datasets/${enc(id)}/runs/${enc(current.run.id)}/noise`);
      showRun(map, current, shadeBy.value as ShadeBy);
    }
    const drawn = new Promise<void>((resolve) => map.once('idle', () => resolve()));
    setNoiseVisible(map, noiseToggle.checked);
    map.triggerRepaint();
    await drawn;
    setState('ready');
  });

  await setupEpsChooser(id, dataset);
  setupSweep(id, dataset, minPoints);
  if (runs.length) await loadRun(runs[0].id, true);
  else setState('ready');
}

/** The k-distance curve of the stored observations, its knee, and the eps handle with a preview. */
async function setupEpsChooser(id: string, dataset: Dataset): Promise<void> {
  const chartBox = document.getElementById('kdist-chart')!;
  const handle = document.getElementById('eps-handle') as HTMLInputElement;
  const typed = document.getElementById('eps-value') as HTMLInputElement;
  const minPointsInput = document.getElementById('min-points') as HTMLInputElement;
  const preview = document.getElementById('eps-preview')!;
  let kd: KDistance | null = null;
  let eps: number | null = null;
  let chart: ReturnType<typeof kDistanceChart> | null = null;
  let previewSeq = 0;

  const draw = () => {
    if (!kd) return;
    chart = kDistanceChart(kd, eps, chartBox.clientWidth || 380);
    chartBox.replaceChildren(chart.svg);
  };
  const showPreview = async () => {
    if (eps === null || !kd) return;
    const seq = ++previewSeq;
    preview.textContent = `At eps ${fmt(eps)} m: counting…`;
    const p = await getJson<{ preview: { eps_m: number; hotspots: number; noise: number; observations: number } }>(
      `/v1/datasets/${enc(id)}/k-distance?min_points=${kd.min_points}&eps=${eps}`,
    );
    if (seq !== previewSeq) return;
    const share = p.preview.observations ? (100 * p.preview.noise) / p.preview.observations : 0;
    preview.textContent = `At eps ${fmt(p.preview.eps_m)} m with min_points ${kd.min_points}: ${p.preview.hotspots} hotspot(s), ${p.preview.noise} noise (${share.toFixed(1)} % of ${p.preview.observations}).`;
    preview.dataset.hotspots = String(p.preview.hotspots);
    preview.dataset.noise = String(p.preview.noise);
  };
  let timer: ReturnType<typeof setTimeout> | undefined;
  const setEps = (v: number, fromHandle = false) => {
    eps = Math.max(0.01, Number(v.toPrecision(4)));
    if (!fromHandle) handle.value = String(Math.round(eps));
    typed.value = String(eps);
    draw();
    clearTimeout(timer);
    timer = setTimeout(() => void showPreview().catch((e: Error) => (preview.textContent = e.message)), 150);
  };
  const load = async () => {
    const mp = Math.max(2, Math.round(Number(minPointsInput.value) || 5));
    kd = await getJson<KDistance>(`/v1/datasets/${enc(id)}/k-distance?min_points=${mp}`);
    document.getElementById('kdist-message')!.textContent = kd.message;
    const top = kDistanceTop(kd, null);
    handle.max = String(Math.ceil(top));
    handle.min = '1';
    setEps(kd.eps_m ?? Number(dataset.settings.eps ?? top / 2));
  };
  handle.addEventListener('input', () => setEps(Number(handle.value), true));
  typed.addEventListener('change', () => Number(typed.value) > 0 && setEps(Number(typed.value)));
  minPointsInput.addEventListener('change', () => void load().catch((e: Error) => (preview.textContent = e.message)));
  chartBox.addEventListener('click', (e) => {
    if (!chart) return;
    const rect = (chart.svg as SVGSVGElement).getBoundingClientRect();
    const scale = rect.height / ((chart.svg as SVGSVGElement).viewBox?.baseVal?.height || rect.height);
    const v = chart.metresAt((e.clientY - rect.top) / scale);
    if (v !== undefined && v > 0) setEps(v);
  });
  document.getElementById('run-with-eps')!.addEventListener('click', async () => {
    const status = document.getElementById('run-status')!;
    if (eps === null || !kd) return;
    try {
      const run = await getJson<{ id: string }>(`/v1/datasets/${enc(id)}/runs`, {
        method: 'POST',
        headers: { 'content-type': 'application/json' },
        body: JSON.stringify({ settings: { eps, min_points: kd.min_points } }),
      });
      status.textContent = `Run ${run.id} queued with eps ${fmt(eps)} m; this page reloads when it has finished.`;
      for (;;) {
        await new Promise((r) => setTimeout(r, 1000));
        const r = await getJson<{ status: string; progress: number }>(`/v1/datasets/${enc(id)}/runs/${enc(run.id)}`);
        if (r.status === 'succeeded') return location.reload();
        if (r.status === 'failed' || r.status === 'cancelled') {
          status.textContent = `Run ${run.id} ${r.status}.`;
          return;
        }
        status.textContent = `Run ${run.id}: ${r.status} ${r.progress} %`;
      }
    } catch (err) {
      status.textContent = (err as Error).message;
    }
  });
  await load();
}

/** The sensitivity table, fetched when the visitor asks for it. */
function setupSweep(id: string, dataset: Dataset, minPoints: number): void {
  const button = document.getElementById('sweep-button') as HTMLButtonElement;
  const status = document.getElementById('sweep-status')!;
  const result = document.getElementById('sweep-result')!;
  const section = document.getElementById('sweep')!;
  const eps = Number(dataset.settings.eps);
  if (!(eps > 0)) {
    button.disabled = true;
    status.textContent = 'The dataset has no eps setting to sweep around.';
    return;
  }
  button.addEventListener('click', async () => {
    const grid = sweepGrid(eps, minPoints);
    button.disabled = true;
    section.setAttribute('aria-busy', 'true');
    section.dataset.state = 'loading';
    status.className = 'note';
    status.removeAttribute('role');
    status.textContent = `Clustering at ${grid.eps.length * grid.minPoints.length} settings…`;
    try {
      const sweep = await getJson<Sweep>(`/v1/datasets/${enc(id)}/sweep?eps=${grid.eps.join(',')}&min_points=${grid.minPoints.join(',')}`);
      result.innerHTML = sweepTableHtml(sweep, { eps, minPoints });
      status.textContent = `${sweep.settings.length} settings clustered.`;
      section.dataset.state = 'ready';
    } catch (err) {
      status.className = 'error';
      status.setAttribute('role', 'alert');
      status.textContent = `The sweep failed: ${(err as Error).message}`;
      section.dataset.state = 'error';
    } finally {
      button.disabled = false;
      section.removeAttribute('aria-busy');
    }
  });
}

async function route(): Promise<void> {
  showKeyState();
  const m = /^\/datasets\/([^/]+)\/?$/.exec(location.pathname);
  if (m) await datasetPage(decodeURIComponent(m[1]));
  else await landing();
}

route().catch(fail);
