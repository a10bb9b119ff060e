/**
 * Bundles the command line after `tsc`: dist/cli/bin.js becomes one ES module holding every
 * module of Roost it loads at start-up, and the modules it imports only on some paths (the
 * service, stored runs, keys, the report) become chunks beside it (`dist/cli/bundle-*.js`),
 * loaded when first imported; the same for the worker thread that writes the point layers
 * (dist/cli/layer-worker.js), which shares the chunks. Node then resolves, reads and compiles a
 * handful of files at start-up instead of some eighty, which is most of the command's fixed cost.
 *
 * Packages in node_modules stay outside the bundle and are loaded as before, except the two that
 * every command loads (commander, concaveman): those are read inside it. The other modules
 * under dist/ stay where tsc wrote them: worker threads start from them, and the tests and the
 * benchmarks import them.
 *
 * A bundled module's `import.meta.url` is its own file under dist/ (not the bundle's), so
 * everything it finds beside itself (worker entries, package.json, openapi.yaml, the web
 * assets) is found as before.
 *
 *   node src/build/bundle-cli.mjs       (part of `npm run build`)
 */
import { readdirSync, readFileSync, rmSync } from 'node:fs';
import { dirname, join, relative, sep } from 'node:path';
import { fileURLToPath } from 'node:url';
import { build } from 'esbuild';

const root = join(dirname(fileURLToPath(import.meta.url)), '../..');
const outdir = join(root, 'dist/cli');
/** the command line, and the worker thread it starts to write point layers (src/cli/layer-thread.ts) */
const entries = ['bin.js', 'layer-worker.js'].map((name) => join(outdir, name));

/** Each module's import.meta.url, written as the URL of its own file relative to the bundle (all outputs lie in dist/cli). */
const ownUrl = {
  name: 'own-import-meta-url',
  setup(b) {
    b.onLoad({ filter: /\.js$/ }, (args) => {
      const text = readFileSync(args.path, 'utf8');
      if (!text.includes('import.meta.url')) return { contents: text, loader: 'js' };
      const rel = relative(outdir, args.path).split(sep).join('/');
      const url = `new URL(${JSON.stringify(rel.startsWith('.') ? rel : `./${rel}`)}, import.meta.url).href`;
      return { contents: text.replaceAll('import.meta.url', url), loader: 'js' };
    });
  },
};

/**
 * Packages left outside the bundle: every dependency but those the command loads at every start
 * (commander parses the arguments; concaveman comes with the hull code), whose resolution and
 * loading from node_modules cost more than reading them inside the bundle.
 */
function external() {
  const pkg = JSON.parse(readFileSync(join(root, 'package.json'), 'utf8'));
  const inside = new Set(['commander', 'concaveman']);
  for (const name of inside) if (!(name in pkg.dependencies)) throw new Error(`${name} is no longer a dependency; update the bundle's list`);
  return Object.keys({ ...pkg.dependencies, ...pkg.devDependencies }).filter((name) => !inside.has(name)).flatMap((name) => [name, `${name}/*`]);
}

// the entries must be tsc's output: a bundle cannot be bundled again once its chunks are gone
for (const entry of entries) {
  if (readFileSync(entry, 'utf8').includes('./bundle-')) throw new Error(`${entry} is already bundled; run tsc -p tsconfig.json first (npm run build does both)`);
}
for (const name of readdirSync(outdir)) if (name.startsWith('bundle-')) rmSync(join(outdir, name));
await build({
  entryPoints: entries,
  outdir,
  allowOverwrite: true,
  bundle: true,
  splitting: true,
  format: 'esm',
  platform: 'node',
  target: 'node20',
  external: external(),
  // commander is CommonJS: inside an ES module bundle its require() of Node's own modules needs a
  // require function of the bundle's own
  banner: { js: "import { createRequire as roostCreateRequire } from 'node:module'; const require = roostCreateRequire(import.meta.url);" },
  chunkNames: 'bundle-[name]-[hash]',
  plugins: [ownUrl],
  logLevel: 'warning',
});
