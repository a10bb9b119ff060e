/**
 * package.json says what the product needs: every package the source loads is a dependency,
 * packages only the tests load are development dependencies, and the entry points it names exist.
 */
import { existsSync, readdirSync, readFileSync, statSync } from 'node:fs';
import { builtinModules } from 'node:module';
import { join } from 'node:path';
import { fileURLToPath } from 'node:url';
import { describe, expect, it } from 'vitest';

const ROOT = fileURLToPath(new URL('../../', import.meta.url));
const pkg = JSON.parse(readFileSync(join(ROOT, 'package.json'), 'utf8')) as {
  main?: string;
  bin?: Record<string, string>;
  dependencies: Record<string, string>;
  devDependencies: Record<string, string>;
};

/** src/web is browser code: Vite bundles it and its packages into dist/web at build time, so they are development dependencies. */
const BUNDLED = join(ROOT, 'src', 'web');

function sourceFiles(dir: string): string[] {
  return readdirSync(dir).flatMap((name) => {
    const p = join(dir, name);
    if (p === BUNDLED) return [];
    return statSync(p).isDirectory() ? sourceFiles(p) : p.endsWith('.ts') ? [p] : [];
  });
}

/** Packages the files under `dir` load (static and dynamic imports, createRequire), by package name. */
function loadedPackages(dir = 'src'): Set<string> {
  const out = new Set<string>();
  for (const file of sourceFiles(join(ROOT, dir))) {
    const text = readFileSync(file, 'utf8').replace(/^(?:import|export) type [^;]*;/gm, '');
    const specs = [
      ...text.matchAll(/^(?:import|export)\b[^;]*?\bfrom\s*'([^']+)'/gm),
      ...text.matchAll(/^import\s*'([^']+)'/gm),
      ...text.matchAll(/\bimport\(\s*'([^']+)'\s*\)/g),
      ...text.matchAll(/\bcreateRequire\([^)]*\)\(\s*'([^']+)'\s*\)/g),
    ].map((m) => m[1]!);
    for (const spec of specs) {
      if (spec.startsWith('.')) continue;
      if (spec.startsWith('node:') || builtinModules.includes(spec)) continue;
      const parts = spec.split('/');
      out.add(spec.startsWith('@') ? `${parts[0]}/${parts[1]}` : parts[0]!);
    }
  }
  return out;
}

describe('package.json', () => {
  it('lists every package the source loads as a dependency', () => {
    const loaded = loadedPackages();
    expect(loaded.size).toBeGreaterThan(5);
    for (const name of loaded) expect(pkg.dependencies, `${name} is loaded by src/`).toHaveProperty([name]);
  });

  it('keeps packages only the tests and benchmarks load (references, peers) in devDependencies', () => {
    const src = loadedPackages();
    const testOnly = [...loadedPackages('test')].filter((name) => !src.has(name));
    expect(testOnly.length).toBeGreaterThan(3);
    expect(testOnly.filter((name) => name in pkg.dependencies)).toEqual([]);
  });

  it('names entry points that exist once built', () => {
    expect(existsSync(join(ROOT, 'dist')), 'npm test builds dist first').toBe(true);
    if (pkg.main !== undefined) expect(existsSync(join(ROOT, pkg.main)), `main ${pkg.main}`).toBe(true);
    for (const [name, path] of Object.entries(pkg.bin ?? {})) expect(existsSync(join(ROOT, path)), `bin ${name}`).toBe(true);
  });
});
