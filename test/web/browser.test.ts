/// <reference lib="dom" />
/// <reference lib="dom.iterable" />
/**
 * The map page and the report in a real browser: Debian's chromium driven by playwright-core
 * (no browser download). Screenshots of each page go to test-screenshots/ (not committed) so a
 * person can look at them. On a developer's machine without /usr/bin/chromium the suite says it
 * is skipped and why; under CI=true a missing browser fails the run.
 */
import { existsSync, mkdirSync, mkdtempSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { fileURLToPath } from 'node:url';
import type { FastifyInstance } from 'fastify';
import { chromium, type Browser, type Page } from 'playwright-core';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { issueKey } from '../../src/auth/keys.js';
import { buildApp } from '../../src/http/app.js';
import { DEMO_DATASET, seedDemo } from '../../src/http/routes/demo.js';
import { testConfig } from '../http/helper.js';
import { isCi } from '../reference/postgres.js';

const CHROMIUM = '/usr/bin/chromium';
export const SCREENSHOTS = fileURLToPath(new URL('../../test-screenshots/', import.meta.url));
const missing = existsSync(CHROMIUM) ? null : `${CHROMIUM} is missing (apt-get install chromium)`;
if (missing !== null && isCi()) throw new Error(`the browser suite cannot run under CI: ${missing}`);
if (missing !== null) console.warn(`browser suite skipped: ${missing}`);

type Json = Record<string, any>;

declare global {
  interface Window {
    /** the page's map (src/web/page.ts and report.ts) */
    roostMap?: import('maplibre-gl').Map;
  }
}

async function finished(base: string, url: string, timeoutMs = 60_000): Promise<Json> {
  const end = Date.now() + timeoutMs;
  for (;;) {
    const run = (await (await fetch(base + url)).json()) as Json;
    if (run.status === 'succeeded' || run.status === 'failed' || run.status === 'cancelled') return run;
    if (Date.now() > end) throw new Error(`run still ${String(run.status)} after ${timeoutMs} ms`);
    await new Promise((r) => setTimeout(r, 50));
  }
}

describe.skipIf(missing !== null)(`the map page in chromium${missing ? ` (skipped: ${missing})` : ''}`, () => {
  let app: FastifyInstance;
  let base: string;
  let browser: Browser;
  let latest: Json;
  const errors: string[] = [];

  const open = async (path: string): Promise<Page> => {
    const page = await browser.newPage({ viewport: { width: 1400, height: 900 } });
    page.on('console', (m) => {
      if (m.type() === 'error') errors.push(`${path}: ${m.text()}`);
    });
    page.on('pageerror', (e) => errors.push(`${path}: ${e.message}`));
    await page.goto(base + path);
    await page.waitForSelector('body[data-state="ready"]', { timeout: 60_000 });
    return page;
  };

  beforeAll(async () => {
    mkdirSync(SCREENSHOTS, { recursive: true });
    console.info(`screenshots: ${SCREENSHOTS}`);
    app = await buildApp({ config: testConfig({ port: 0 }), logger: false });
    await app.listen({ port: 0, host: '127.0.0.1' });
    const address = app.server.address() as { port: number };
    base = `http://127.0.0.1:${address.port}`;
    const first = await seedDemo(app);
    expect((await finished(base, `/v1/datasets/${DEMO_DATASET}/runs/${first}`)).status).toBe('succeeded');
    // a second run at another eps, so the page has changes to mark and two runs to pick from
    const second = (await (await fetch(`${base}/v1/datasets/${DEMO_DATASET}/runs`, { method: 'POST', headers: { 'content-type': 'application/json' }, body: '{"settings":{"eps":95}}' })).json()) as Json;
    latest = await finished(base, `/v1/datasets/${DEMO_DATASET}/runs/${second.id}`);
    expect(latest.status).toBe('succeeded');
    browser = await chromium.launch({ executablePath: CHROMIUM, args: ['--headless', '--no-sandbox', '--disable-gpu'] });
  });
  afterAll(async () => {
    await browser?.close();
    await app?.close();
  });

  it('lists the datasets at /', async () => {
    const page = await open('/');
    await page.screenshot({ path: join(SCREENSHOTS, 'landing.png') });
    expect(await page.getAttribute(`#datasets a[href="/datasets/${DEMO_DATASET}"]`, 'href')).toBe(`/datasets/${DEMO_DATASET}`);
    await page.close();
    expect(errors).toEqual([]);
  });

  it('draws every hotspot of the latest run, shows a clicked one with the API figures, and marks the knee at the suggested eps', async () => {
    const page = await open(`/datasets/${DEMO_DATASET}`);
    await page.screenshot({ path: join(SCREENSHOTS, 'dataset.png') });
    const api = (await (await fetch(`${base}/v1/datasets/${DEMO_DATASET}/runs/latest/hotspots`)).json()) as Json;
    const want = (api.features as Json[]).map((f) => Number(f.properties.hotspot_id)).sort((a, b) => a - b);
    // the features the map rendered, not the page's text
    const drawn = await page.evaluate(() => [...new Set(window.roostMap!.queryRenderedFeatures({ layers: ['hotspot-fill'] }).map((f) => Number(f.properties.hotspot_id)))]);
    expect(drawn.sort((a, b) => a - b)).toEqual(want);
    expect(await page.inputValue('#run-picker')).toBe(latest.id);
    expect(await page.locator('#run-picker option').count()).toBe(2);

    // click the largest hotspot at its centre (inside its convex hull)
    const target = [...api.features].sort((a: Json, b: Json) => b.properties.count - a.properties.count)[0].properties;
    const px = await page.evaluate((c) => window.roostMap!.project(c as [number, number]), [target.centre_lon, target.centre_lat]);
    const box = (await page.locator('#map').boundingBox())!;
    await page.mouse.click(box.x + px.x, box.y + px.y);
    await page.waitForSelector('#hotspot-panel dd[data-field="count"]');
    for (const field of ['hotspot_id', 'track_id', 'count', 'core_count', 'area_km2', 'density_per_km2', 'radius_m']) {
      expect(await page.textContent(`#hotspot-panel dd[data-field="${field}"]`), field).toBe(String(target[field]));
    }
    await page.waitForSelector('#track-chart svg');
    await page.screenshot({ path: join(SCREENSHOTS, 'hotspot.png') });

    // the knee marker sits at the API's suggested eps on the chart's own y axis
    const kd = (await (await fetch(`${base}/v1/datasets/${DEMO_DATASET}/k-distance?min_points=10`)).json()) as Json;
    const geometry = await page.evaluate(() => {
      const svg = document.querySelector('#kdist-chart svg')!;
      const knee = svg.querySelector('.knee-marker circle')!;
      const ticks = [...svg.querySelectorAll('[aria-label="y-axis tick label"] text')].map((t) => ({
        value: Number(t.textContent!.replace(/[^0-9.]/g, '')),
        y: Number(/translate\([^,]+,([^)]+)\)/.exec(t.getAttribute('transform') ?? '')?.[1] ?? NaN),
      }));
      return { cy: Number(knee.getAttribute('cy')), ticks };
    });
    const [a, b] = [geometry.ticks[0], geometry.ticks[geometry.ticks.length - 1]];
    expect(geometry.ticks.length).toBeGreaterThanOrEqual(2);
    const epsPixel = a.y + ((kd.eps_m - a.value) * (b.y - a.y)) / (b.value - a.value);
    expect(Math.abs(geometry.cy - epsPixel)).toBeLessThan(1);
    await page.locator('#choose-eps').scrollIntoViewIfNeeded();
    await page.screenshot({ path: join(SCREENSHOTS, 'k-distance.png') });
    await page.close();
    expect(errors).toEqual([]);
  });

  it('lets the keyboard move the eps handle, previewing hotspots and noise as the API counts them', async () => {
    const page = await open(`/datasets/${DEMO_DATASET}`);
    await page.waitForFunction(() => document.getElementById('eps-preview')!.dataset.hotspots !== undefined);
    await page.focus('#eps-handle');
    const before = await page.inputValue('#eps-value');
    await page.keyboard.press('ArrowLeft');
    await page.keyboard.press('ArrowLeft');
    await page.waitForFunction((v) => (document.getElementById('eps-value') as HTMLInputElement).value !== v, before);
    const eps = await page.inputValue('#eps-value');
    await page.waitForFunction((e) => document.getElementById('eps-preview')!.textContent!.startsWith(`At eps ${Number(e).toLocaleString('en', { maximumSignificantDigits: 4 })} m`), eps);
    const api = (await (await fetch(`${base}/v1/datasets/${DEMO_DATASET}/k-distance?min_points=10&eps=${eps}`)).json()) as Json;
    expect(Number(await page.getAttribute('#eps-preview', 'data-hotspots'))).toBe(api.preview.hotspots);
    expect(Number(await page.getAttribute('#eps-preview', 'data-noise'))).toBe(api.preview.noise);

    // every control has a name a screen reader reads
    const unnamed = await page.evaluate(() =>
      [...document.querySelectorAll('select, input, button')]
        .filter((el) => (el as HTMLInputElement).labels?.length === 0 && !el.getAttribute('aria-label') && !(el.textContent ?? '').trim())
        .map((el) => el.outerHTML.slice(0, 80)),
    );
    expect(unnamed).toEqual([]);
    // the noise toggle draws the noise points
    await page.check('#noise-toggle');
    await page.waitForSelector('body[data-state="ready"]');
    const noise = await page.evaluate(() => window.roostMap!.queryRenderedFeatures({ layers: ['noise'] }).length);
    expect(noise).toBeGreaterThan(0);
    await page.screenshot({ path: join(SCREENSHOTS, 'noise.png') });
    // the changes since the previous run are said in words beside their marks
    expect(await page.textContent('#changes')).toMatch(/carried on/);
    await page.close();
    expect(errors).toEqual([]);
  });

  it('fetches the eps × min_points sensitivity table on demand, with the API sweep figures in its cells and the dataset setting marked', async () => {
    const page = await open(`/datasets/${DEMO_DATASET}`);
    expect(await page.$('#sweep-table')).toBeNull(); // nothing is swept before it is asked for
    // reached and pressed from the keyboard
    await page.focus('#run-with-eps');
    for (let i = 0; i < 5 && (await page.evaluate(() => document.activeElement?.id)) !== 'sweep-button'; i++) await page.keyboard.press('Tab');
    expect(await page.evaluate(() => document.activeElement?.id)).toBe('sweep-button');
    const asked = page.waitForRequest((r) => r.url().includes('/sweep?'));
    await page.keyboard.press('Enter');
    const url = new URL((await asked).url());
    // the demo dataset's setting is eps 75 m, min_points 10 (src/http/routes/demo.ts); the grid is ½, ¾, 1, 1½ and 2 times each
    expect(url.searchParams.get('eps')).toBe('38,56,75,113,150');
    expect(url.searchParams.get('min_points')).toBe('5,8,10,15,20');
    await page.waitForSelector('#sweep[data-state="ready"] #sweep-table');
    const api = (await (await fetch(`${base}/v1/datasets/${DEMO_DATASET}/sweep?${url.searchParams}`)).json()) as Json;
    const cells = await page.$$eval('#sweep-table td.sweep-cell', (tds) =>
      tds.map((td) => ({
        eps: Number((td as HTMLElement).dataset.eps),
        minPoints: Number((td as HTMLElement).dataset.minPoints),
        hotspots: td.querySelector('[data-field="hotspots"]')!.textContent,
        noise: td.querySelector('[data-field="noise_share"]')!.textContent,
        current: td.getAttribute('aria-current') === 'true' && td.classList.contains('current') && /now/.test(td.textContent ?? ''),
      })),
    );
    expect(cells).toEqual(
      (api.settings as Json[]).map((s) => ({
        eps: s.eps_m,
        minPoints: s.min_points,
        hotspots: String(s.hotspots),
        noise: `${(100 * s.noise_share).toFixed(1)} %`,
        current: s.eps_m === 75 && s.min_points === 10,
      })),
    );
    expect(cells.filter((c) => c.current)).toHaveLength(1);
    // rows are eps and columns min_points, with headers a screen reader announces
    expect(await page.$$eval('#sweep-table tbody th[scope="row"]', (th) => th.map((t) => t.textContent))).toEqual((api.eps_m as number[]).map((e) => `${e} m`));
    expect(await page.$$eval('#sweep-table thead th[scope="col"]', (th) => th.slice(1).map((t) => Number(t.textContent)))).toEqual(api.min_points);
    expect(await page.textContent('#sweep-table caption')).toMatch(/eps \(rows\) and min_points \(columns\)/);
    await page.locator('#sweep').scrollIntoViewIfNeeded();
    await page.screenshot({ path: join(SCREENSHOTS, 'sweep.png') });

    // a failing sweep says so in words, and the button can be pressed again
    await page.route('**/sweep?*', (route) =>
      route.fulfill({ status: 504, contentType: 'application/problem+json', body: JSON.stringify({ type: 'about:blank', title: 'Too slow', status: 504, detail: 'the sweep took longer than the time limit' }) }),
    );
    await page.click('#sweep-button');
    await page.waitForSelector('#sweep[data-state="error"]');
    expect(await page.textContent('#sweep-status[role="alert"]')).toBe('The sweep failed: the sweep took longer than the time limit');
    expect(await page.isEnabled('#sweep-button')).toBe(true);
    await page.close();
    // the 504 above is the browser's own console report of the refused request
    expect(errors.filter((e) => !/status of 504/.test(e))).toEqual([]);
    errors.length = 0;
  });

  it('opens the run report with the network blocked and shows the same hotspot count', async () => {
    const res = await fetch(`${base}/v1/datasets/${DEMO_DATASET}/runs/${latest.id}/report`);
    expect(res.status).toBe(200);
    const file = join(mkdtempSync(join(tmpdir(), 'roost-report-')), 'report.html');
    writeFileSync(file, await res.text());
    const context = await browser.newContext({ offline: true, viewport: { width: 1200, height: 1400 } });
    const asked: string[] = [];
    await context.route('**/*', (route) => {
      const url = route.request().url();
      asked.push(url);
      return url.startsWith('file:') ? route.continue() : route.abort();
    });
    const page = await context.newPage();
    page.on('console', (m) => m.type() === 'error' && errors.push(`report: ${m.text()}`));
    page.on('pageerror', (e) => errors.push(`report: ${e.message}`));
    await page.goto(`file://${file}`);
    await page.waitForSelector('body[data-state="ready"]', { timeout: 60_000 });
    await page.screenshot({ path: join(SCREENSHOTS, 'report.png'), fullPage: true });
    expect(Number(await page.textContent('#report-counts [data-field="hotspots"]'))).toBe(latest.summary.figures.hotspots);
    const drawn = await page.evaluate(() => new Set(window.roostMap!.queryRenderedFeatures({ layers: ['hotspot-fill'] }).map((f) => f.properties.hotspot_id)).size);
    expect(drawn).toBe(latest.summary.figures.hotspots);
    expect(asked).toEqual([`file://${file}`]);
    await context.close();
    expect(errors).toEqual([]);
  });
  // last: once a key exists, the service asks for one
  it('asks for an API key once keys exist, keeps it for the tab, and shows the dataset with it', async () => {
    const { token } = await issueKey(app.store, { role: 'reader', datasetId: null, label: 'map page test' });
    app.keyPresence.forget();
    const page = await browser.newPage({ viewport: { width: 1400, height: 900 } });
    const own: string[] = [];
    page.on('console', (m) => {
      // the browser itself reports the 401 answers the page asks the key after; anything else counts
      if (m.type() === 'error' && !/status of 401/.test(m.text())) own.push(m.text());
    });
    page.on('pageerror', (e) => own.push(e.message));
    await page.goto(`${base}/datasets/${DEMO_DATASET}`);
    await page.waitForSelector('body[data-state="key-needed"]');
    await page.fill('#api-key', 'not-a-key');
    await page.press('#api-key', 'Enter');
    await page.waitForSelector('body[data-state="key-needed"]');
    expect(await page.textContent('#app')).toMatch(/refused/);
    await page.fill('#api-key', token);
    await page.click('#key-form button');
    await page.waitForSelector('body[data-state="ready"]', { timeout: 60_000 });
    const drawn = await page.evaluate(() => new Set(window.roostMap!.queryRenderedFeatures({ layers: ['hotspot-fill'] }).map((f) => f.properties.hotspot_id)).size);
    expect(drawn).toBe(latest.summary.figures.hotspots);
    expect(await page.evaluate(() => sessionStorage.getItem('roost-api-key'))).toBe(token);
    await page.screenshot({ path: join(SCREENSHOTS, 'with-key.png') });
    await page.close();
    expect(own).toEqual([]);
  });
});
