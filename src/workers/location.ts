/**
 * Where the worker entry is and how to start it: the compiled module (dist/workers/entry.js) in
 * production, the TypeScript source through tsx when the service itself runs from source (tests,
 * `tsx src/cli/main.ts serve`).
 */
export function workerEntry(): { filename: string; execArgv: string[] | undefined } {
  const here = import.meta.url;
  if (/\.ts$/.test(new URL(here).pathname)) return { filename: new URL('./entry.ts', here).href, execArgv: ['--import', 'tsx'] };
  return { filename: new URL('./entry.js', here).href, execArgv: undefined };
}
