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
