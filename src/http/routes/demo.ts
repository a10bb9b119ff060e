/**
 * The demonstration dataset: `marrow-vale` from data/demo/observations.geojson (invented
 * sightings of invasive plants), eps 75 m, min_points 10, counted by plant, run once. Created
 * through the service's own routes, so it is stored exactly as a client's post would be.
 */
import { readFileSync } from 'node:fs';
import { fileURLToPath } from 'node:url';
import type { FastifyInstance } from 'fastify';

export const DEMO_DATASET = 'marrow-vale';

/** The demo observations, two levels up from src/http/routes and dist/http/routes alike. */
export const DEMO_PATH = fileURLToPath(new URL('../../../data/demo/observations.geojson', import.meta.url));

/**
 * Creates the demo dataset, stores its observations and queues one run, unless the dataset
 * exists already. @returns the queued run's id, or null when nothing was done
 * @throws Error when a step is refused (the message carries the answer)
 */
export async function seedDemo(app: FastifyInstance): Promise<string | null> {
  if ((await app.datasets.store.getDataset(DEMO_DATASET)) !== null) return null;
  const step = async (method: 'POST', url: string, payload: string | Buffer, type: string, expect: number): Promise<Record<string, unknown>> => {
    const res = await app.inject({ method, url, payload, headers: { 'content-type': type } });
    if (res.statusCode !== expect) throw new Error(`demo: ${method} ${url} answered ${res.statusCode}: ${res.body.slice(0, 500)}`);
    return res.json() as Record<string, unknown>;
  };
  await step('POST', '/v1/datasets', JSON.stringify({ id: DEMO_DATASET, name: 'Marrow Vale invasive plants (invented demo data)', settings: { eps: 75, min_points: 10, count_by: 'plant' } }), 'application/json', 201);
  await step('POST', `/v1/datasets/${DEMO_DATASET}/observations`, readFileSync(DEMO_PATH), 'application/geo+json', 200);
  const run = await step('POST', `/v1/datasets/${DEMO_DATASET}/runs`, '{}', 'application/json', 202);
  return run.id as string;
}
