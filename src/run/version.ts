import { readFileSync } from 'node:fs';

/** The software version from package.json (same relative path from src/ and dist/). */
export const ROOST_VERSION: string = (
  JSON.parse(readFileSync(new URL('../../package.json', import.meta.url), 'utf8')) as { version: string }
).version;
