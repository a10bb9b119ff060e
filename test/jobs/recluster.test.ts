/**
 * `roost recluster`: one run per dataset in this process, one line each, and the exit codes
 * external schedulers rely on (0 all succeeded, 1 a run failed, 2 bad usage).
 */
import { afterEach, beforeEach, describe, expect, it } from 'vitest';
import { reclusterCommand, RECLUSTER_EXIT } from '../../src/cli/recluster.js';
import { openSqliteStore } from '../../src/storage/sqlite.js';
import type { Store } from '../../src/storage/store.js';
import { DATASET, grid, tempStore } from './helpers.js';

describe('roost recluster', () => {
  let store: Store;
  let path: string;
  let dispose: () => Promise<void>;
  beforeEach(async () => {
    ({ store, path, dispose } = await tempStore());
    await store.createDataset(DATASET);
    await store.createDataset({ ...DATASET, id: 'empty' });
    await store.ingest(DATASET.id, [...grid('P', [5.1, 52.1], 0, 0, 3, 3), ...grid('Q', [5.1, 52.1], 3000, 0, 3, 3)], { replace: false, partial: false });
  });
  afterEach(async () => {
    await dispose();
  });

  /** Runs the command with `args`; returns the exit code and what it printed. */
  const recluster = async (args: string[], env: Record<string, string | undefined> = {}): Promise<{ code: number | null; out: string; err: string }> => {
    let code: number | null = null;
    let out = '';
    let err = '';
    const cmd = reclusterCommand((c) => (code = c), { out: (t) => (out += t), err: (t) => (err += t) }, env).exitOverride();
    await cmd.parseAsync(args, { from: 'user' });
    return { code, out, err };
  };

  it('re-clusters one dataset: exit 0, a line with the transition counts, a run with trigger command', async () => {
    const first = await recluster(['--dataset', DATASET.id, '--db', path]);
    expect(first.code).toBe(RECLUSTER_EXIT.ok);
    expect(first.out).toMatch(/^nests r\d{6} succeeded: 2 hotspots; first run, every hotspot starts a track\n$/);
    const second = await recluster(['--dataset', DATASET.id], { ROOST_DB_PATH: path });
    expect(second.code).toBe(RECLUSTER_EXIT.ok);
    expect(second.out).toMatch(/^nests r\d{6} succeeded: 2 hotspots; against r\d{6}: emergence 0, survival 2, split 0, absorption 0, disappearance 0\n$/);
    const check = openSqliteStore({ path });
    const runs = (await check.listRuns(DATASET.id, { limit: 10 })).runs;
    expect(runs.map((r) => [r.trigger, r.status])).toEqual([
      ['command', 'succeeded'],
      ['command', 'succeeded'],
    ]);
    expect((await check.getRunHotspots(runs[0]!.id)).map((h) => h.trackId)).toEqual(['t000001', 't000002']);
    await check.close();
  });

  it('--all runs every dataset and exits 1 when one of them fails', async () => {
    const res = await recluster(['--all', '--db', path]);
    expect(res.code).toBe(RECLUSTER_EXIT.failed);
    const lines = res.out.trim().split('\n');
    expect(lines).toHaveLength(2);
    expect(lines[0]).toMatch(/^empty r\d{6} failed: no observations in dataset empty/);
    expect(lines[1]).toMatch(/^nests r\d{6} succeeded/);
  });

  it('exits 2 for bad usage and runs nothing', async () => {
    expect((await recluster(['--db', path])).code).toBe(RECLUSTER_EXIT.usage);
    expect((await recluster(['--all', '--dataset', DATASET.id, '--db', path])).code).toBe(RECLUSTER_EXIT.usage);
    const unknown = await recluster(['--dataset', DATASET.id, '--dataset', 'nope', '--db', path]);
    expect(unknown.code).toBe(RECLUSTER_EXIT.usage);
    expect(unknown.err).toMatch(/no dataset "nope"/);
    expect((await recluster(['--all', '--db', path], { DATABASE_URL: 'mysql://x' })).code).toBe(RECLUSTER_EXIT.usage);
    // its settings come from the service's one config table, checked the same way
    const badUrl = await recluster(['--all', '--db', path], { ROOST_PUBLIC_URL: 'ftp://example.org' });
    expect(badUrl.code).toBe(RECLUSTER_EXIT.usage);
    expect(badUrl.err).toMatch(/ROOST_PUBLIC_URL.*must be an http:\/\/ or https:\/\/ address/);
    expect((await store.listRuns(DATASET.id, { limit: 10 })).runs).toEqual([]);
  });
});
