/**
 * Soak benchmark (not a test): `roost serve` in a process of its own on a fresh SQLite file,
 * under a mixed load for a bounded time — observation posts, clustering requests, stored runs,
 * layer GETs, clients that vanish before their answer, and slow senders — while /healthz is
 * sampled every 100 ms (from the load's process and from a process of its own) and the service's
 * resident memory every 5 s. Then the load stops and the
 * service is asked whether anything is still held (stuck slots). Writes test/bench/soak-results.md.
 *
 *   npm run bench:soak [-- --duration 180] [--rate-limit 0] [--arena-max 2] [--profile] [--growing]
 *
 * The posts replace observations of a bounded set of ids (`replace=true`), so the dataset stops
 * growing once every id has been posted (at most SEED_POSTS + IDS_SMALL + IDS_LARGE observations,
 * reached within the first minute) and memory after warm-up can be told from growth of the data.
 * `--growing` posts new ids every time instead (the dataset and its layers grow without bound).
 *
 * `--rate-limit` is passed to the service (requests a minute per address; default 0, no limit):
 * every client here comes from one address, so the service's own default (600) would turn most of
 * the load away with 429 before it reached any work. `--profile` runs the service under Node's
 * CPU profiler and leaves the .cpuprofile file in test/bench/profiles/ (open it in Chrome's
 * DevTools or speedscope, or summarise it with test/bench/profile-summary.ts).
 *
 * `--arena-max` is the MALLOC_ARENA_MAX the service is started with, as `npm start` starts it
 * (default 2, see DEVELOPERS.md, "Memory"); `--arena-max 0` starts it without, with glibc's own
 * default (up to eight arenas a core for its threads).
 */
import { spawn, type ChildProcess } from 'node:child_process';
import { closeSync, mkdtempSync, openSync, readFileSync, rmSync, writeFileSync } from 'node:fs';
import { request as httpRequest } from 'node:http';
import { connect } from 'node:net';
import { cpus, loadavg, tmpdir, totalmem } from 'node:os';
import { dirname, join } from 'node:path';
import { fileURLToPath } from 'node:url';
import { rng } from '../reference/seeded.js';

const ROOT = fileURLToPath(new URL('../../', import.meta.url));
const SEED = Number(process.env.SOAK_SEED ?? 20261203);

function arg(name: string, fallback: number): number {
  const i = process.argv.indexOf(`--${name}`);
  return i >= 0 ? Number(process.argv[i + 1]) : fallback;
}
const DURATION_S = arg('duration', 180);
const RATE_LIMIT = arg('rate-limit', 0);
const ARENA_MAX = arg('arena-max', 2);
const PROFILE = process.argv.includes('--profile');
const GROWING = process.argv.includes('--growing');
/** observations posted before the load */
const SEED_POSTS = 5000;
/** batches of 500 whose ids the small posters go round (20 000 ids) */
const SMALL_ID_SETS = 40;
/** batches of 20 000 whose ids the large poster goes round (40 000 ids) */
const LARGE_ID_SETS = 2;
/** the query of an observation post: new ids every time, or replacing those of the set it goes round */
const POST_QUERY = GROWING ? '' : '?replace=true';
const PROFILE_DIR = fileURLToPath(new URL('./profiles/', import.meta.url));
const UPLOAD_TIMEOUT_MS = 5000;

/** Seeded points around a few centres, as a FeatureCollection; ids from `prefix`. */
function collection(n: number, prefix: string, random: () => number): string {
  const f: string[] = [];
  for (let i = 0; i < n; i++) {
    const g = i % 6;
    const spread = i % 5 === 4 ? 0.05 : 0.0008;
    const lon = 8.5 + g * 0.02 + (random() - 0.5) * spread;
    const lat = 47.3 + g * 0.01 + (random() - 0.5) * spread;
    f.push(`{"type":"Feature","id":"${prefix}${i}","geometry":{"type":"Point","coordinates":[${lon.toFixed(6)},${lat.toFixed(6)}]},"properties":{"kind":"${g % 2 ? 'a' : 'b'}","observed_at":"2026-11-0${1 + (i % 9)}T10:00:00Z"}}`);
  }
  return `{"type":"FeatureCollection","features":[${f.join(',')}]}`;
}

async function startService(db: string): Promise<{ url: string; child: ChildProcess; log: string }> {
  const profile = PROFILE ? ['--cpu-prof', '--cpu-prof-dir', PROFILE_DIR] : [];
  // --trace-gc: the JavaScript heap's size after each collection, in the log (heapMiB below)
  const args = [...profile, '--trace-gc', '--import', 'tsx', 'src/cli/bin.ts', 'serve', '--port', '0', '--db', db, '--workers', '1', '--upload-timeout-ms', String(UPLOAD_TIMEOUT_MS), '--rate-limit', String(RATE_LIMIT), '--log-level', 'info'];
  // the service's log goes to a file, as it would in production (a journal or a file), not to a
  // pipe this process must keep draining: a full pipe blocks the service's synchronous log writes
  const log = join(dirname(db), 'service.log');
  const fd = openSync(log, 'w');
  const env = { ...process.env };
  if (ARENA_MAX > 0) env.MALLOC_ARENA_MAX = String(ARENA_MAX);
  else delete env.MALLOC_ARENA_MAX;
  const child = spawn(process.execPath, args, { cwd: ROOT, env, stdio: ['ignore', fd, 'inherit'] });
  closeSync(fd);
  let exited: number | null | undefined;
  child.on('exit', (code) => (exited = code));
  for (;;) {
    const m = /"url":"(http:\/\/[^"]+)"/.exec(readFileSync(log, 'utf8'));
    if (m) return { url: m[1]!, child, log };
    if (exited !== undefined) throw new Error(`service exited ${exited}: ${readFileSync(log, 'utf8')}`);
    await new Promise((r) => setTimeout(r, 100));
  }
}

/**
 * Resident memory of a process, MiB (Linux /proc): all of it, and the part that is the process's
 * own (RssAnon: the JavaScript heap, buffers, SQLite's page cache, thread stacks) as against
 * pages of files mapped into it (RssFile: the SQLite file read through memory mapping, which the
 * operating system may drop at any time), source: proc(5),
 * https://man7.org/linux/man-pages/man5/proc_pid_status.5.html.
 */
function rssMiB(pid: number): { mib: number; anon: number; file: number } {
  const status = readFileSync(`/proc/${pid}/status`, 'utf8');
  const kb = (name: string): number => {
    const m = new RegExp(`${name}:\\s+(\\d+) kB`).exec(status);
    return m ? Number(m[1]) / 1024 : NaN;
  };
  return { mib: kb('VmRSS'), anon: kb('RssAnon'), file: kb('RssFile') + kb('RssShmem') };
}

/**
 * The main thread's JavaScript heap after its last garbage collection, MiB: used and reserved,
 * from the last line V8's --trace-gc wrote to the log for the main isolate ("[pid:0xADDR] … ->
 * 120.3 (171.1) MB, …"; each worker thread is an isolate of its own, at another address, and
 * the main one collects first). The format is V8's own, not a documented interface, so a log it
 * cannot read gives NaN.
 */
function heapMiB(log: string): { heap: number; heapReserved: number } {
  const lines = readFileSync(log, 'utf8').split('\n');
  const gc = /^\[(\d+:0x[0-9a-f]+)\].*-> ([\d.]+) \(([\d.]+)\) MB, /;
  const main = lines.map((l) => gc.exec(l)).find((m) => m !== null)?.[1];
  for (let i = lines.length - 1; i >= 0; i--) {
    const m = gc.exec(lines[i]!);
    if (m !== null && m[1] === main) return { heap: Number(m[2]), heapReserved: Number(m[3]) };
  }
  return { heap: NaN, heapReserved: NaN };
}

const counts = new Map<string, number>();
function count(kind: string, status: number | string): void {
  const k = `${kind} ${status}`;
  counts.set(k, (counts.get(k) ?? 0) + 1);
}

async function call(kind: string, url: string, init?: RequestInit): Promise<Response | null> {
  try {
    const res = await fetch(url, init);
    await res.arrayBuffer();
    count(kind, res.status);
    return res;
  } catch {
    count(kind, 'connection error');
    return null;
  }
}

/** Posts the body and destroys the connection as soon as it is sent. */
function vanish(url: string, body: Buffer): Promise<void> {
  return new Promise((resolve) => {
    const u = new URL(url);
    const req = httpRequest({ host: u.hostname, port: u.port, path: u.pathname + u.search, method: 'POST', headers: { 'content-type': 'application/geo+json', 'content-length': body.length } });
    req.on('error', () => resolve());
    req.on('close', () => resolve());
    req.end(body, () => {
      req.destroy();
      count('vanishing client', 'gone');
    });
  });
}

/** Declares a body of 10 MB and sends a byte a second until the service answers or hangs up. */
function slowSender(base: string): Promise<void> {
  return new Promise((resolve) => {
    const u = new URL(base);
    const socket = connect(Number(u.port), u.hostname, () => {
      socket.write(`POST /v1/cluster?eps=60 HTTP/1.1\r\nHost: ${u.host}\r\nContent-Type: application/geo+json\r\nContent-Length: 10000000\r\n\r\n{`);
      const drip = setInterval(() => socket.write(' '), 1000);
      let text = '';
      // once answered the client stops sending and hangs up, as a real client would
      socket.on('data', (d: Buffer) => {
        text += d.toString();
        if (/^HTTP\/1\.1 \d{3}[\s\S]*\r\n\r\n/.test(text)) socket.destroy();
      });
      const end = (): void => {
        clearInterval(drip);
        const m = /^HTTP\/1\.1 (\d{3})/.exec(text);
        count('slow sender', m ? Number(m[1]) : 'cut without answer');
        resolve();
      };
      socket.on('close', end);
      socket.on('error', () => undefined);
    });
    socket.on('error', () => resolve());
  });
}

/**
 * Samples /healthz every 100 ms from a process of its own that does nothing else, until `untilMs`
 * (epoch): the latencies (ms) it saw. The load's own process also reads 16 MB layers and builds
 * large bodies, and its event loop stalls add to the latencies it measures; this one's do not.
 */
function probe(url: string, untilMs: number): Promise<number[]> {
  const script = `
    const out = [];
    while (Date.now() < ${untilMs}) {
      const s = performance.now();
      try { const r = await fetch(${JSON.stringify(`${url}/healthz`)}); await r.arrayBuffer(); out.push(performance.now() - s); } catch {}
      await new Promise((r) => setTimeout(r, 100));
    }
    process.stdout.write(JSON.stringify(out));`;
  return new Promise((resolve, reject) => {
    const child = spawn(process.execPath, ['--input-type=module', '-e', script], { stdio: ['ignore', 'pipe', 'inherit'] });
    let text = '';
    child.stdout.on('data', (d: Buffer) => (text += d.toString()));
    child.on('error', reject);
    child.on('exit', () => {
      try {
        resolve(JSON.parse(text) as number[]);
      } catch {
        resolve([]);
      }
    });
  });
}

function quantile(sorted: number[], q: number): number {
  return sorted.length === 0 ? NaN : sorted[Math.min(sorted.length - 1, Math.floor(q * sorted.length))]!;
}

async function main(): Promise<void> {
  const loadStart = loadavg();
  const dir = mkdtempSync(join(tmpdir(), 'roost-soak-'));
  const { url, child, log } = await startService(join(dir, 'soak.db'));
  const pid = child.pid!;
  const random = rng(SEED).next;
  const t0 = Date.now();
  const until = t0 + DURATION_S * 1000;
  const live = (): boolean => Date.now() < until;
  const JSON_TYPE = { 'content-type': 'application/json' };
  const GEO = { 'content-type': 'application/geo+json' };
  await call('setup', `${url}/v1/datasets`, { method: 'POST', headers: JSON_TYPE, body: JSON.stringify({ id: 'soak', settings: { eps: 80, min_points: 5 } }) });
  await call('setup', `${url}/v1/datasets/soak/observations`, { method: 'POST', headers: GEO, body: collection(SEED_POSTS, 'seed-', random) });

  const rss: { t: number; mib: number; anon: number; file: number; heap: number; heapReserved: number; observations: number | null }[] = [];
  const observations = async (): Promise<number | null> => {
    try {
      const res = await fetch(`${url}/v1/datasets/soak`);
      return ((await res.json()) as { observations?: number }).observations ?? null;
    } catch {
      return null;
    }
  };
  const health: number[] = [];
  let worstAt = 0;
  let worst = 0;
  const loops: Promise<void>[] = [];
  const loop = (fn: () => Promise<void>): void => {
    loops.push(
      (async () => {
        while (live()) await fn();
      })(),
    );
  };
  // resident memory every 5 s
  loops.push(
    (async () => {
      while (live()) {
        const t = (Date.now() - t0) / 1000;
        const mem = rssMiB(pid);
        rss.push({ t, ...mem, ...heapMiB(log), observations: await observations() });
        await new Promise((r) => setTimeout(r, 5000));
      }
    })(),
  );
  // /healthz every 100 ms
  loop(async () => {
    const s = performance.now();
    const res = await call('healthz', `${url}/healthz`);
    const ms = performance.now() - s;
    if (res !== null) {
      if (ms > worst) {
        worst = ms;
        worstAt = (Date.now() - t0) / 1000;
      }
      health.push(ms);
    }
    await new Promise((r) => setTimeout(r, 100));
  });
  // two posters of 500 observations each time (new ids, or those of the next of SMALL_ID_SETS sets)
  let batch = 0;
  const smallIds = (): string => `b${GROWING ? batch++ : batch++ % SMALL_ID_SETS}-`;
  for (let p = 0; p < 2; p++) loop(async () => void (await call('observation post', `${url}/v1/datasets/soak/observations${POST_QUERY}`, { method: 'POST', headers: GEO, body: collection(500, smallIds(), random) })));
  // one client posting a batch of 20 000 observations every 20 s (stored in a job thread)
  let large = 0;
  const largeIds = (): string => `L${GROWING ? large++ : large++ % LARGE_ID_SETS}-`;
  loop(async () => {
    await call('large post', `${url}/v1/datasets/soak/observations${POST_QUERY}`, { method: 'POST', headers: GEO, body: collection(20_000, largeIds(), random) });
    await new Promise((r) => setTimeout(r, 20_000));
  });
  // two clients clustering 2 000 points
  const clusterBody = collection(2000, 'c', random);
  for (let c = 0; c < 2; c++) loop(async () => void (await call('cluster', `${url}/v1/cluster?eps=60&min_points=5&layer=centres`, { method: 'POST', headers: GEO, body: clusterBody })));
  // a stored run asked for every 10 s
  loop(async () => {
    await call('run request', `${url}/v1/datasets/soak/runs`, { method: 'POST', headers: JSON_TYPE, body: '{}' });
    await new Promise((r) => setTimeout(r, 10_000));
  });
  // two clients pulling the latest points layer
  for (let g = 0; g < 2; g++) {
    loop(async () => {
      await call('layer GET', `${url}/v1/datasets/soak/runs/latest/points`);
      await new Promise((r) => setTimeout(r, 200));
    });
  }
  // a client that vanishes after sending each clustering request
  const vanishBody = Buffer.from(collection(3000, 'v', random));
  loop(async () => {
    await vanish(`${url}/v1/cluster?eps=60&min_points=5`, vanishBody);
    await new Promise((r) => setTimeout(r, 250));
  });
  // two slow senders at a time, each cut at the upload time limit
  for (let s = 0; s < 2; s++) loop(() => slowSender(url));

  const probed = probe(url, until);
  await Promise.all(loops);
  const alone = (await probed).sort((a, b) => a - b);
  const loadEnd = Date.now();
  // after the load: nothing may stay held once the last answers are out
  let after: Record<string, unknown> = {};
  for (let i = 0; i < 100; i++) {
    after = (await (await fetch(`${url}/healthz`)).json()) as Record<string, unknown>;
    if (after.in_progress === 0 && after.uploading === 0 && after.queued === 0 && after.storing === 0) break;
    await new Promise((r) => setTimeout(r, 100));
  }
  const settledMs = Date.now() - loadEnd;
  rss.push({ t: (Date.now() - t0) / 1000, ...rssMiB(pid), ...heapMiB(log), observations: await observations() });
  child.kill('SIGTERM');
  await new Promise((r) => child.once('exit', r));
  // the service's own errors (log level 50 and above), kept before its files are removed
  const errors = readFileSync(log, 'utf8').split('\n').filter((l) => /^\{.*"level":(5\d|60)[,}]/.test(l)).map((l) => l.slice(0, 600));
  rmSync(dir, { recursive: true, force: true });

  const sorted = [...health].sort((a, b) => a - b);
  // warm-up: until the dataset has its full size (bounded ids), else the first 30 s
  const cap = SEED_POSTS + SMALL_ID_SETS * 500 + LARGE_ID_SETS * 20_000;
  const full = rss.find((r) => r.observations === cap);
  const warmFrom = GROWING || full === undefined ? 30 : full.t;
  const warmed = rss.filter((r) => r.t >= warmFrom);
  const warm = warmed.length > 0 ? warmed : rss;
  const byKind = [...counts.entries()].sort(([a], [b]) => a.localeCompare(b));
  const fivehundreds = byKind.filter(([k]) => / 5\d\d$/.test(k) && !/ 503$/.test(k)).reduce((n, [, v]) => n + v, 0);
  const lines = [
    '# Soak benchmark',
    '',
    `\`npm run bench:soak -- --duration ${DURATION_S} --rate-limit ${RATE_LIMIT} --arena-max ${ARENA_MAX}${PROFILE ? ' --profile' : ''}${GROWING ? ' --growing' : ''}\`, ${new Date().toISOString()}, Node ${process.version}, ${cpus().length} × ${cpus()[0]?.model ?? '?'}, ${(totalmem() / 2 ** 30).toFixed(0)} GiB, load average at the start ${loadStart.map((x) => x.toFixed(2)).join(' ')}, at the end ${loadavg().map((x) => x.toFixed(2)).join(' ')}, seed ${SEED}.`,
    '',
    `Service: \`${ARENA_MAX > 0 ? `MALLOC_ARENA_MAX=${ARENA_MAX} ` : ''}roost serve --workers 1 --upload-timeout-ms ${UPLOAD_TIMEOUT_MS} --rate-limit ${RATE_LIMIT}\`${PROFILE ? ' under the CPU profiler' : ''} on a fresh SQLite file, in a process of its own, its log (with --trace-gc) written to a file. Load for ${DURATION_S} s: ${GROWING ? 'two clients posting batches of 500 new observations, one client posting 20,000 new observations every 20 s (the dataset grows without bound)' : `two clients posting batches of 500 observations going round ${SMALL_ID_SETS} sets of ids, one client posting 20,000 observations every 20 s going round ${LARGE_ID_SETS} sets (all with replace=true: the dataset stops growing at ${(SEED_POSTS + SMALL_ID_SETS * 500 + LARGE_ID_SETS * 20_000).toLocaleString('en')} observations)`}, two clients clustering 2,000 points, a stored run asked for every 10 s, two clients pulling the latest points layer, one client vanishing after sending each 3,000-point clustering request, two slow senders (a byte a second) at all times, /healthz every 100 ms.`,
    '',
    '## /healthz',
    '',
    'Every 100 ms from the load\'s own process (its event loop also drains the layer GETs and builds the bodies, so its stalls count too), and every 100 ms from a process of its own that does nothing else.',
    '',
    '| sampled from | samples | p50 | p99 | worst | worst at |',
    '| --- | ---: | ---: | ---: | ---: | ---: |',
    `| the load's process | ${sorted.length} | ${quantile(sorted, 0.5).toFixed(1)} ms | ${quantile(sorted, 0.99).toFixed(1)} ms | ${sorted[sorted.length - 1]?.toFixed(1)} ms | ${worstAt.toFixed(0)} s |`,
    `| a process of its own | ${alone.length} | ${quantile(alone, 0.5).toFixed(1)} ms | ${quantile(alone, 0.99).toFixed(1)} ms | ${alone[alone.length - 1]?.toFixed(1)} ms | |`,
    '',
    '## Resident memory of the service (MiB)',
    '',
    'Every 5 s, with the observations stored at that moment.',
    '',
    '| t (s) | RSS | own (anon) | mapped files | main thread’s JS heap used (reserved) after the last GC | observations |',
    '| ---: | ---: | ---: | ---: | ---: | ---: |',
    ...rss.map((r) => `| ${r.t.toFixed(0)} | ${r.mib.toFixed(0)} | ${r.anon.toFixed(0)} | ${r.file.toFixed(0)} | ${r.heap.toFixed(0)} (${r.heapReserved.toFixed(0)}) | ${r.observations ?? '?'} |`),
    '',
    `After warm-up (t ≥ ${warmFrom.toFixed(0)} s${GROWING || full === undefined ? '' : ', from the first sample with the dataset at its full size'}): RSS min ${Math.min(...warm.map((r) => r.mib)).toFixed(0)} MiB, max ${Math.max(...warm.map((r) => r.mib)).toFixed(0)} MiB, last ${warm[warm.length - 1]?.mib.toFixed(0)} MiB; own memory (anon) min ${Math.min(...warm.map((r) => r.anon)).toFixed(0)}, max ${Math.max(...warm.map((r) => r.anon)).toFixed(0)}, last ${warm[warm.length - 1]?.anon.toFixed(0)} MiB.`,
    '',
    '## Answers by kind and status',
    '',
    '| kind | status | count |',
    '| --- | --- | ---: |',
    ...byKind.map(([k, v]) => {
      const i = k.lastIndexOf(' ');
      const kind = /connection error|cut without answer|gone$/.test(k) ? k.replace(/ (connection error|cut without answer|gone)$/, '') : k.slice(0, i);
      const status = /connection error|cut without answer|gone$/.test(k) ? k.slice(kind.length + 1) : k.slice(i + 1);
      return `| ${kind} | ${status} | ${v} |`;
    }),
    '',
    `500-class answers other than 503: ${fivehundreds}.`,
    '',
    '## Held at the end',
    '',
    `/healthz ${settledMs} ms after the load stopped: \`${JSON.stringify(after)}\` (stuck slots: in_progress ${String(after.in_progress)}, uploading ${String(after.uploading)}, queued ${String(after.queued)}, storing ${String(after.storing)}).`,
    '',
    '## Errors in the service log',
    '',
    ...(errors.length === 0 ? ['None.'] : errors.slice(0, 20).map((l) => `- \`${l.replace(/`/g, "'")}\``)),
    '',
  ];
  writeFileSync(new URL('./soak-results.md', import.meta.url), lines.join('\n'));
  console.log(lines.join('\n'));
}

await main();
