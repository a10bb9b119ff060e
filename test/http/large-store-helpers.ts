/**
 * What the large-post tests on SQLite (large-store.test.ts) and PostgreSQL
 * (large-store-pg.test.ts) share: the seeded bodies, the post, and the bounded /healthz poll.
 */
import { seeded } from './helper.js';

export const GEO = { 'content-type': 'application/geo+json' };
export const JSON_TYPE = { 'content-type': 'application/json' };

/** `n` seeded points near Zurich with ids `${prefix}${i}`. */
export function collection(prefix: string, n: number, seed: number): string {
  const rnd = seeded(seed);
  const fs: string[] = [];
  for (let i = 0; i < n; i++) {
    const c = [Number((8.5 + rnd() * 0.1).toFixed(6)), Number((47.3 + rnd() * 0.1).toFixed(6))];
    fs.push(JSON.stringify({ type: 'Feature', id: `${prefix}${i}`, geometry: { type: 'Point', coordinates: c }, properties: { k: i % 7 } }));
  }
  return `{"type":"FeatureCollection","features":[${fs.join(',')}]}`;
}

/** Posts a GeoJSON body to the dataset's observations. */
export function postObservations(base: string, id: string, body: string): Promise<Response> {
  return fetch(`${base}/v1/datasets/${id}/observations`, { method: 'POST', headers: GEO, body });
}

/** The service's /healthz answer. */
export async function health(base: string): Promise<{ storing: number }> {
  return (await (await fetch(`${base}/healthz`)).json()) as { storing: number };
}

/** Polls /healthz every 10 ms until `done` holds, at most 30 s. */
export async function healthUntil(base: string, done: (h: { storing: number }) => boolean): Promise<void> {
  const end = Date.now() + 30_000;
  for (;;) {
    const h = await health(base);
    if (done(h)) return;
    if (Date.now() > end) throw new Error(`healthz still ${JSON.stringify(h)}`);
    await new Promise((r) => setTimeout(r, 10));
  }
}
