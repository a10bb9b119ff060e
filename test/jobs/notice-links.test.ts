/**
 * A notice says whether its links are absolute addresses or paths, and how to get absolute ones.
 */
import { describe, expect, it } from 'vitest';
import { runNotice } from '../../src/jobs/notify.js';
import type { Dataset } from '../../src/storage/store.js';

const ds = { id: 'herons', webhook: null } as unknown as Dataset;
const run = { id: 'r000004', trigger: 'schedule' } as never;
const outcome = { status: 'succeeded' as const, summary: { figures: { hotspots: 3 } }, error: null };

describe('notice links', () => {
  it('are absolute with a public URL, and say so', () => {
    const n = runNotice(ds, run, outcome, 'https://roost.example.org/');
    expect(n.links.hotspots).toBe('https://roost.example.org/v1/datasets/herons/runs/r000004/hotspots');
    expect(n.links_are).toBe('absolute');
    expect(n.links_note).toBeUndefined();
  });

  it('are paths without one, and the notice says how to get absolute links', () => {
    const n = runNotice(ds, run, outcome, null);
    expect(n.links.run).toBe('/v1/datasets/herons/runs/r000004');
    expect(n.links_are).toBe('paths');
    expect(n.links_note).toMatch(/--public-url \(ROOST_PUBLIC_URL\)/);
  });
});
