/**
 * HTTP load benchmark on loopback (autocannon), not a timed test:
 *  1. requests per second for POST /v1/cluster with 1,000-point bodies;
 *  2. GET /healthz latency (p50/p99/max) for the whole life of one 1,000,000-point request
 *     (upload, parse, clustering, response), and that request's time against the yardstick of
 *     Node decoding and JSON.parse-ing the same bytes in this process, measured just before and
 *     just after it (the target: at most 1.5 times the yardstick).
 * Writes the figures to test/bench/http-results.md.
 *
 *   npx tsx test/bench/http.ts [--points 1000000] [--duration 10] [--connections 4] [--workers n]
 */
import { spawn, type ChildProcess } from 'node:child_process';
import { request } from 'node:http';
import { readFileSync, writeFileSync } from 'node:fs';
import { cpus, loadavg, totalmem } from 'node:os';
import { fileURLToPath } from 'node:url';
import { createRequire } from 'node:module';
import { resolveConfig } from '../../src/http/config.js';
import { rng } from '../reference/seeded.js';

/** The parts of autocannon's result and instance used here (the package ships no types). */
interface LoadResult {
  requests: { average: number; total: number };
  latency: { p50: number; p99: number; max: number };
  non2xx: number;
  errors: number;
}
interface LoadOptions {
  url: string;
  method?: string;
  headers?: Record<string, string>;
  body?: Buffer;
  connections: number;
  duration: number;
}
type Autocannon = ((opts: LoadOptions) => Promise<LoadResult>) &
  ((opts: LoadOptions, done: (err: Error | null, result: LoadResult) => void) => { stop(): void });
const autocannon = createRequire(import.meta.url)('autocannon') as Autocannon;

const ROOT = fileURLToPath(new URL('../../', import.meta.url));

/** Starts `roost serve` in its own process, so the load generator does not share its event loop. */
async function startService(args: string[]): Promise<{ url: string; child: ChildProcess }> {
  const child = spawn(process.execPath, ['--import', 'tsx', '-e', `const m = await import('./src/cli/serve.ts'); await m.serve(${JSON.stringify(args)});`], {
    cwd: ROOT,
    stdio: ['ignore', 'pipe', 'inherit'],
  });
  let out = '';
  child.stdout!.setEncoding('utf8');
  const url = await new Promise<string>((resolve, reject) => {
    child.stdout!.on('data', (d: string) => {
      out += d;
      const m = /roost listening on (http:\/\/[\d.:]+)/.exec(out);
      if (m) resolve(m[1]!);
    });
    child.on('exit', (code) => reject(new Error(`service exited ${code}: ${out}`)));
  });
  return { url, child };
}

/** CPU seconds (user + system) a process has used so far, from /proc (Linux; NaN elsewhere). */
function cpuSeconds(pid: number | undefined): number {
  try {
    // fields 14 and 15 after the command name: utime and stime, in clock ticks (100 a second on Linux)
    const fields = readFileSync(`/proc/${pid}/stat`, 'utf8').split(') ')[1]!.split(' ');
    return (Number(fields[11]) + Number(fields[12])) / 100;
  } catch {
    return NaN;
  }
}

function arg(name: string, fallback: number): number {
  const i = process.argv.indexOf(`--${name}`);
  return i > 0 ? Number(process.argv[i + 1]) : fallback;
}

/** Seeded generator so every run posts the same bodies. */
const seeded = (seed: number): (() => number) => rng(seed).next;

/**
 * n point features over ~300 km × 220 km (6–10° E, 45.8–47.8° N): 200 dense groups (~300 m
 * across) hold 70 % of them, the rest are scattered (about 5 per km² for a million, so mostly
 * noise at eps 250 m); with ids, times and a count — about 160 bytes per feature.
 */
function body(n: number, seed: number): Buffer {
  const rnd = seeded(seed);
  const centres = Array.from({ length: 200 }, () => [6 + rnd() * 4, 45.8 + rnd() * 2]);
  const parts: string[] = ['{"type":"FeatureCollection","features":[\n'];
  for (let i = 0; i < n; i++) {
    let lon: number, lat: number;
    if (rnd() < 0.7) {
      const c = centres[Math.floor(rnd() * centres.length)]!;
      lon = c[0]! + (rnd() - 0.5) * 0.004;
      lat = c[1]! + (rnd() - 0.5) * 0.0027;
    } else {
      lon = 6 + rnd() * 4;
      lat = 45.8 + rnd() * 2;
    }
    const day = 1 + Math.floor(rnd() * 28);
    parts.push(
      `${i ? ',\n' : ''}{"type":"Feature","id":"b${i}","geometry":{"type":"Point","coordinates":[${lon.toFixed(7)},${lat.toFixed(7)}]},"properties":{"observed_at":"2026-04-${String(day).padStart(2, '0')}T12:00:00Z","count":${1 + (i % 4)}}}`,
    );
  }
  parts.push('\n]}');
  return Buffer.from(parts.join(''));
}

/** Seconds for Node to decode the bytes as UTF-8 and JSON.parse them: the yardstick. */
function parseSeconds(bytes: Buffer): number {
  const t0 = performance.now();
  const doc = JSON.parse(bytes.toString('utf8')) as { features: unknown[] };
  if (!doc.features.length) throw new Error('empty body');
  return (performance.now() - t0) / 1000;
}

function post(url: string, payload: Buffer): Promise<{ status: number; bytes: number; ms: number; hotspots: number }> {
  const t0 = performance.now();
  return new Promise((resolve, reject) => {
    const req = request(url, { method: 'POST', headers: { 'content-type': 'application/geo+json', 'content-length': payload.length } }, (res) => {
      const chunks: Buffer[] = [];
      res.on('data', (d: Buffer) => chunks.push(d));
      res.on('end', () => {
        const text = Buffer.concat(chunks).toString('utf8');
        // a hotspots layer holds one feature per hotspot, each with a hotspot_id property
        const hotspots = (text.match(/"hotspot_id":/g) ?? []).length;
        resolve({ status: res.statusCode ?? 0, bytes: Buffer.byteLength(text), ms: performance.now() - t0, hotspots });
      });
    });
    req.on('error', reject);
    // written in 1 MiB pieces, as a client streaming from disk would
    for (let off = 0; off < payload.length; off += 1 << 20) req.write(payload.subarray(off, off + (1 << 20)));
    req.end();
  });
}

async function main(): Promise<void> {
  const bigN = arg('points', 1_000_000);
  const duration = arg('duration', 10);
  const connections = arg('connections', 4);
  const workers = process.argv.includes('--workers') ? arg('workers', 1) : undefined;
  const config = resolveConfig({ port: 0, logLevel: 'warn', ...(workers ? { workers } : {}) });
  const server = await startService(['--port', '0', '--log-level', 'info', '--workers', String(config.workers), '--rate-limit', '0']);
  const query = 'eps=250&min_points=5';
  const lines: string[] = [];
  const log = (s: string): void => {
    console.log(s);
    lines.push(s);
  };

  try {
    // 1. throughput with 1k-point bodies
    const small = body(1000, 1);
    const check = await post(`${server.url}/v1/cluster?${query}`, small);
    if (check.status !== 200) throw new Error(`1k-point request answered ${check.status}`);
    // the service runs with no rate limit (--rate-limit 0): a 429 here would measure the limiter
    await autocannon({ url: `${server.url}/v1/cluster?${query}`, method: 'POST', headers: { 'content-type': 'application/geo+json' }, body: small, connections, duration: 2 });
    const r = await autocannon({
      url: `${server.url}/v1/cluster?${query}`,
      method: 'POST',
      headers: { 'content-type': 'application/geo+json' },
      body: small,
      connections,
      duration,
    });
    const rps = r.requests.average;
    log(`1k-point POST /v1/cluster (${(small.length / 1024).toFixed(0)} KiB body, ${connections} connections, ${duration} s): ${rps.toFixed(1)} requests/s, latency p50 ${r.latency.p50} ms, p99 ${r.latency.p99} ms, non-2xx ${r.non2xx}, errors ${r.errors}`);

    // 2. /healthz while one big request runs
    const t0 = performance.now();
    const big = body(bigN, 2);
    log(`${bigN.toLocaleString('en')}-point body: ${(big.length / 1024 / 1024).toFixed(1)} MiB (generated in ${((performance.now() - t0) / 1000).toFixed(1)} s)`);
    // the yardstick blocks this process's event loop: taken before /healthz is sampled, and after
    const before = parseSeconds(big);
    let healthDone: (v: LoadResult) => void = () => undefined;
    const healthResult = new Promise<LoadResult>((resolve) => (healthDone = resolve));
    const health = autocannon({ url: `${server.url}/healthz`, connections: 1, duration: 3600 }, (err, res) => {
      if (err) throw err;
      healthDone(res);
    });
    await new Promise((r) => setTimeout(r, 200));
    const load = loadavg()[0]!;
    const cpu0 = cpuSeconds(server.child.pid);
    const bigResult = await post(`${server.url}/v1/cluster?${query}&layer=hotspots`, big);
    const serviceCpu = cpuSeconds(server.child.pid) - cpu0;
    health.stop();
    if (bigResult.status !== 200) throw new Error(`the ${bigN}-point request answered ${bigResult.status}, not 200`);
    const after = parseSeconds(big);
    const yardstick = (before + after) / 2;
    const h = await healthResult;
    log(`${bigN.toLocaleString('en')}-point POST /v1/cluster?layer=hotspots: status ${bigResult.status}, ${bigResult.hotspots} hotspots (${(bigResult.bytes / 1024).toFixed(0)} KiB) answered in ${(bigResult.ms / 1000).toFixed(1)} s, upload to answer; the service used ${serviceCpu.toFixed(1)} s of CPU meanwhile (1-minute load average ${load.toFixed(1)} as it began)`);
    log(`yardstick, decoding + JSON.parse of the same body in this process: ${before.toFixed(2)} s before, ${after.toFixed(2)} s after; the request took ${(bigResult.ms / 1000 / yardstick).toFixed(2)}× their mean (target ≤ 1.5×)`);
    log(`GET /healthz meanwhile (1 connection, ${h.requests.total} requests): p50 ${h.latency.p50} ms, p99 ${h.latency.p99} ms, max ${h.latency.max} ms, non-2xx ${h.non2xx}`);
  } finally {
    server.child.kill('SIGTERM');
  }

  const machine = `${cpus().length} × ${cpus()[0]?.model ?? 'unknown CPU'}, ${(totalmem() / 1024 ** 3).toFixed(0)} GiB, Node ${process.version}, ${config.workers} worker thread(s)`;
  const out = [
    '# HTTP benchmark',
    '',
    `Command: \`npx tsx test/bench/http.ts${process.argv.slice(2).length ? ' ' + process.argv.slice(2).join(' ') : ''}\` — loopback, autocannon, settings \`eps=250&min_points=5\`.`,
    `Machine: ${machine}. Run ${new Date().toISOString().slice(0, 10)}; 1-minute load average at the end ${loadavg()[0]!.toFixed(1)} (other work on the machine slows every figure).`,
    '',
    ...lines.map((l) => `- ${l}`),
    '',
  ].join('\n');
  writeFileSync(fileURLToPath(new URL('./http-results.md', import.meta.url)), out);
}

await main();
