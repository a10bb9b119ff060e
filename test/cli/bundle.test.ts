/**
 * The built command line (dist/cli/bin.js, bundled by src/build/bundle-cli.mjs) against the same
 * command run from source: the same result bytes, worker threads and loaded-on-demand parts
 * (the report, the service) found from the bundle, and the bundle really is one file plus chunks.
 */
import { spawn, spawnSync } from 'node:child_process';
import { mkdtempSync, readFileSync, readdirSync, rmSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { afterAll, describe, expect, it } from 'vitest';
import { run } from '../../src/cli/main.js';

const ROOT = new URL('../../', import.meta.url).pathname;
const BIN = join(ROOT, 'dist/cli/bin.js');
const DEMO = join(ROOT, 'data/demo/observations.geojson');

/** Folders the tests write into, removed when the file's tests are done. */
const made: string[] = [];
afterAll(() => {
  for (const dir of made) rmSync(dir, { recursive: true, force: true });
});
const tmp = (): string => {
  const dir = mkdtempSync(join(tmpdir(), 'roost-bundle-'));
  made.push(dir);
  return dir;
};
/** A result file's text without what differs from run to run: the timings, and when the report was made. */
const resultText = (dir: string, name: string): string =>
  readFileSync(join(dir, name), 'utf8')
    .replace(/"timings_ms": ?\{[^}]*\}/g, '')
    .replace(/"generated_at":"[^"]*"/g, '');

describe('the built command line', () => {
  it('imports none of the modules it bundles', () => {
    const text = readFileSync(BIN, 'utf8');
    const imports = [...text.matchAll(/^(?:import|\} from|export \* from)[^'"]*["']([^'"]+)["']/gm)].map((m) => m[1]!);
    const own = imports.filter((s) => s.startsWith('.'));
    expect(own.length).toBeGreaterThan(0);
    for (const s of own) expect(s).toMatch(/^\.\/bundle-[\w-]+\.js$/);
  });

  it('writes the same bytes as the command run from source, with simulations in worker threads and the report', async () => {
    const args = ['--eps', '75', '--min-points', '10', '--count-by', 'plant', '--simulations', '9', '--seed', '4', '--threads', '2', '--report'];
    const built = join(tmp(), 'built');
    const source = join(tmp(), 'source');
    const r = spawnSync(process.execPath, [BIN, 'cluster', DEMO, ...args, '--out-dir', built], { encoding: 'utf8' });
    expect(r.stderr).toMatch(/hotspot\(s\)/);
    expect(r.status).toBe(0);
    expect(await run(['cluster', DEMO, ...args, '--out-dir', source])).toBe(0);
    const names = readdirSync(source).sort();
    expect(readdirSync(built).sort()).toEqual(names);
    expect(names).toContain('report.html');
    // compared as a flag: a report holds megabytes of text no difference report should print
    for (const name of names) expect(resultText(built, name) === resultText(source, name), `${name} differs`).toBe(true);
    expect(JSON.parse(readFileSync(join(built, 'summary.json'), 'utf8')).hotspots[0].p_value).toEqual(expect.any(Number));
  });

  it('starts the service, which finds its contract and answers', async () => {
    const child = spawn(process.execPath, [BIN, 'serve', '--port', '0', '--host', '127.0.0.1', '--db', join(tmp(), 'roost.db'), '--schedule-scan-ms', '0'], { stdio: ['ignore', 'pipe', 'pipe'] });
    try {
      const url = await new Promise<string>((resolve, reject) => {
        let out = '';
        const timer = setTimeout(() => reject(new Error(`server did not start: ${out}`)), 60_000);
        child.stdout.on('data', (d: Buffer) => {
          out += d.toString();
          const m = /"url":"(http:\/\/[^"]+)"/.exec(out);
          if (m) {
            clearTimeout(timer);
            resolve(m[1]!);
          }
        });
        child.stderr.on('data', (d: Buffer) => (out += d.toString()));
        child.on('exit', (code) => {
          clearTimeout(timer);
          reject(new Error(`server exited with ${code}: ${out}`));
        });
      });
      expect((await fetch(`${url}/healthz`)).status).toBe(200);
      const contract = await fetch(`${url}/openapi.yaml`);
      expect(contract.status).toBe(200);
      expect(await contract.text()).toBe(readFileSync(join(ROOT, 'openapi.yaml'), 'utf8'));
    } finally {
      child.kill('SIGKILL');
    }
  });
});
