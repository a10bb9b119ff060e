/**
 * The shape of the source: no module imports itself back through others (a cycle makes load
 * order matter and ties layers that should not know each other), and the command line is the
 * only layer that knows about command-line usage.
 */
import { readdirSync, readFileSync, statSync } from 'node:fs';
import { dirname, join, relative, resolve } from 'node:path';
import { fileURLToPath } from 'node:url';
import { describe, expect, it } from 'vitest';

const SRC = fileURLToPath(new URL('../../src/', import.meta.url));

function sourceFiles(dir: string): string[] {
  return readdirSync(dir).flatMap((name) => {
    const p = join(dir, name);
    return statSync(p).isDirectory() ? sourceFiles(p) : p.endsWith('.ts') ? [p] : [];
  });
}

/** Relative imports of each file that load code (static and dynamic; `import type` loads nothing), as file paths. */
function importGraph(): Map<string, string[]> {
  const graph = new Map<string, string[]>();
  for (const file of sourceFiles(SRC)) {
    const text = readFileSync(file, 'utf8').replace(/^(?:import|export) type [^;]*;/gm, '');
    const targets = [...text.matchAll(/(?:from|import\()\s*'(\.{1,2}\/[^']+)'/g)].map((m) => resolve(dirname(file), m[1]!.replace(/\.js$/, '.ts')));
    graph.set(file, targets);
  }
  return graph;
}

/** Every cycle found by a depth-first walk, each as its chain of files relative to src/. */
function cycles(graph: Map<string, string[]>): string[][] {
  const found: string[][] = [];
  const state = new Map<string, 'open' | 'done'>();
  const stack: string[] = [];
  const visit = (f: string): void => {
    state.set(f, 'open');
    stack.push(f);
    for (const t of graph.get(f) ?? []) {
      if (state.get(t) === 'open') found.push([...stack.slice(stack.indexOf(t)), t].map((p) => relative(SRC, p)));
      else if (!state.has(t)) visit(t);
    }
    stack.pop();
    state.set(f, 'done');
  };
  for (const f of [...graph.keys()].sort()) if (!state.has(f)) visit(f);
  return found;
}

describe('source imports', () => {
  it('have no cycles', () => {
    const graph = importGraph();
    expect(graph.size).toBeGreaterThan(30);
    expect(cycles(graph)).toEqual([]);
  });

  it('leave the command line to src/cli: nothing else imports it', () => {
    const graph = importGraph();
    const outside = [...graph.entries()].filter(([f, ts]) => !relative(SRC, f).startsWith('cli/') && ts.some((t) => relative(SRC, t).startsWith('cli/')));
    expect(outside.map(([f]) => relative(SRC, f))).toEqual([]);
  });
});
