import { createRequire } from 'node:module';
import { availableParallelism, loadavg } from 'node:os';
import { pathToFileURL } from 'node:url';
import { Worker, type WorkerOptions } from 'node:worker_threads';

/**
 * Where a worker entry is and how to start it: the compiled module (`<name>.js`) in production,
 * the TypeScript source through tsx when the code itself runs from source (tests,
 * `tsx src/cli/main.ts serve`). `here` is the `import.meta.url` of a module beside the entry.
 */
export function entryBeside(here: string, name: string): { filename: string; execArgv: string[] | undefined } {
  if (/\.ts$/.test(new URL(here).pathname)) return { filename: new URL(`./${name}.ts`, here).href, execArgv: ['--import', 'tsx'] };
  return { filename: new URL(`./${name}.js`, here).href, execArgv: undefined };
}

/** The entry both service pools (clustering requests and stored-run jobs) start from. */
export function workerEntry(): { filename: string; execArgv: string[] | undefined } {
  return entryBeside(import.meta.url, 'entry');
}

/**
 * A worker thread started from the entry `name` beside the module at `here`: the compiled entry,
 * or, when that module runs from source (tests, benchmarks through tsx), the TypeScript entry
 * loaded after registering tsx inside the worker (a worker's own `--import tsx` does not reach its
 * entry module on Node 20).
 */
export function startWorkerBeside(here: string, name: string, options: WorkerOptions = {}): Worker {
  const { filename } = entryBeside(here, name);
  if (!filename.endsWith('.ts')) return new Worker(new URL(filename), options);
  // tsx's ESM API (the `import` target of tsx/esm/api, beside its `require` target)
  const tsx = pathToFileURL(createRequire(here).resolve('tsx/esm/api').replace(/\.cjs$/, '.mjs')).href;
  const boot = `import(${JSON.stringify(tsx)}).then((api) => { api.register(); return import(${JSON.stringify(filename)}); });`;
  return new Worker(boot, { ...options, eval: true });
}

/**
 * Whether a core is likely to be free for one more thread: the cores less the load average of
 * the last minute (runnable threads, ours included) is at least `minFree`. Platforms without a
 * load average (Windows reports 0) always have one.
 */
export function coreFree(minFree: number): boolean {
  return availableParallelism() >= 2 && availableParallelism() - loadavg()[0] >= minFree;
}
