/**
 * Summary of a V8 CPU profile (.cpuprofile, as `node --cpu-prof` writes it) of the service's main
 * thread (not a test): where the sampled time went (idle, garbage collection, and the functions
 * with the most time of their own and, for the service's own code, with their callees), and the
 * longest busy stretches (samples in a row that are not idle) with the function of the service's
 * own code that held most of each.
 *
 *   node --import tsx test/bench/profile-summary.ts test/bench/profiles/CPU.….cpuprofile [--top 25]
 *
 * The format is Chrome DevTools' Profile object (nodes with a callFrame and children, samples as
 * node ids, timeDeltas in microseconds before each sample), source:
 * https://chromedevtools.github.io/devtools-protocol/tot/Profiler/#type-Profile.
 */
import { readFileSync } from 'node:fs';

interface Node {
  id: number;
  callFrame: { functionName: string; url: string; lineNumber: number };
  children?: number[];
}
interface Profile {
  nodes: Node[];
  samples: number[];
  timeDeltas: number[];
}

const file = process.argv[2];
if (file === undefined) throw new Error('usage: profile-summary.ts FILE.cpuprofile [--top N]');
const ti = process.argv.indexOf('--top');
const TOP = ti >= 0 ? Number(process.argv[ti + 1]) : 25;
const profile = JSON.parse(readFileSync(file, 'utf8')) as Profile;

const byId = new Map<number, Node>(profile.nodes.map((n) => [n.id, n]));
const parent = new Map<number, number>();
for (const n of profile.nodes) for (const c of n.children ?? []) parent.set(c, n.id);

const short = (url: string): string => url.replace(/^.*\/(src|node_modules)\//, '$1/').replace(/^file:\/\//, '');
const label = (n: Node): string => `${n.callFrame.functionName || '(anonymous)'} ${short(n.callFrame.url)}${n.callFrame.url ? `:${n.callFrame.lineNumber + 1}` : ''}`;
const own = (n: Node): boolean => /\/src\//.test(n.callFrame.url) && !/node_modules/.test(n.callFrame.url);

/** the stack of a node, leaf first */
function stack(id: number): Node[] {
  const out: Node[] = [];
  for (let at: number | undefined = id; at !== undefined; at = parent.get(at)) out.push(byId.get(at)!);
  return out;
}

// sample i lasts until sample i+1 (timeDeltas[i+1]); the last one is given nothing
const ms: number[] = profile.samples.map((_, i) => (profile.timeDeltas[i + 1] ?? 0) / 1000);
const self = new Map<string, number>();
const inclusiveOwn = new Map<string, number>();
let total = 0;
let idle = 0;
let gc = 0;
for (let i = 0; i < profile.samples.length; i++) {
  const node = byId.get(profile.samples[i]!)!;
  const d = ms[i]!;
  total += d;
  const name = node.callFrame.functionName;
  if (name === '(idle)') idle += d;
  if (name === '(garbage collector)') gc += d;
  self.set(label(node), (self.get(label(node)) ?? 0) + d);
  const seen = new Set<string>();
  for (const f of stack(node.id)) {
    if (!own(f)) continue;
    const l = label(f);
    if (seen.has(l)) continue;
    seen.add(l);
    inclusiveOwn.set(l, (inclusiveOwn.get(l) ?? 0) + d);
  }
}

// busy stretches: samples in a row that are not idle; a gap of over 50 ms between two samples
// means the thread was not running (waiting for a core), counted apart
interface Stretch { start: number; length: number; top: string; waited: number }
const stretches: Stretch[] = [];
let at = 0;
let cur: { start: number; length: number; waited: number; by: Map<string, number> } | null = null;
const close = (): void => {
  if (cur === null) return;
  const top = [...cur.by.entries()].sort((a, b) => b[1] - a[1])[0];
  stretches.push({ start: cur.start, length: cur.length, waited: cur.waited, top: top ? `${top[0]} (${top[1].toFixed(0)} ms)` : '?' });
  cur = null;
};
for (let i = 0; i < profile.samples.length; i++) {
  const node = byId.get(profile.samples[i]!)!;
  const d = ms[i]!;
  if (node.callFrame.functionName === '(idle)') {
    close();
  } else {
    cur ??= { start: at, length: 0, waited: 0, by: new Map() };
    cur.length += d;
    if (d > 50) cur.waited += d;
    const frames = stack(node.id);
    const mine = frames.find(own) ?? frames[0]!;
    const key = node.callFrame.functionName === '(garbage collector)' ? '(garbage collector)' : label(mine);
    cur.by.set(key, (cur.by.get(key) ?? 0) + d);
  }
  at += d;
}
close();

const pct = (x: number): string => `${((100 * x) / total).toFixed(1)} %`;
console.log(`sampled ${(total / 1000).toFixed(1)} s: idle ${(idle / 1000).toFixed(1)} s (${pct(idle)}), busy ${((total - idle) / 1000).toFixed(1)} s (${pct(total - idle)}), garbage collection ${(gc / 1000).toFixed(1)} s (${pct(gc)})`);
console.log(`\nmost time of their own (top ${TOP}):`);
for (const [l, d] of [...self.entries()].sort((a, b) => b[1] - a[1]).slice(0, TOP)) console.log(`  ${(d / 1000).toFixed(2)} s  ${pct(d)}  ${l}`);
console.log(`\nthe service's own functions with their callees (top ${TOP}):`);
for (const [l, d] of [...inclusiveOwn.entries()].sort((a, b) => b[1] - a[1]).slice(0, TOP)) console.log(`  ${(d / 1000).toFixed(2)} s  ${pct(d)}  ${l}`);
const long = stretches.filter((s) => s.length > 50).sort((a, b) => b.length - a.length);
console.log(`\nbusy stretches over 50 ms: ${long.length} (${(long.reduce((n, s) => n + s.length, 0) / 1000).toFixed(1)} s, of which ${(long.reduce((n, s) => n + s.waited, 0) / 1000).toFixed(1)} s in gaps over 50 ms between samples); the longest ${TOP}:`);
for (const s of long.slice(0, TOP)) console.log(`  ${s.length.toFixed(0)} ms at ${(s.start / 1000).toFixed(1)} s${s.waited > 0 ? ` (gaps ${s.waited.toFixed(0)} ms)` : ''}: ${s.top}`);
const holders = new Map<string, { n: number; ms: number }>();
for (const s of long) {
  const k = s.top.replace(/ \(\d+ ms\)$/, '');
  const h = holders.get(k) ?? { n: 0, ms: 0 };
  h.n++;
  h.ms += s.length;
  holders.set(k, h);
}
console.log('\nbusy stretches over 50 ms by what held most of each:');
for (const [k, h] of [...holders.entries()].sort((a, b) => b[1].ms - a[1].ms).slice(0, TOP)) console.log(`  ${h.n} stretches, ${(h.ms / 1000).toFixed(2)} s: ${k}`);
