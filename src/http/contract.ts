/**
 * The HTTP contract: where `openapi.yaml` is, and the document itself, read once.
 */
import { readFileSync } from 'node:fs';
import { fileURLToPath } from 'node:url';
import { parse } from 'yaml';

/** The repository's OpenAPI document, two levels up from src/http and from dist/http alike. */
export const OPENAPI_PATH = fileURLToPath(new URL('../../openapi.yaml', import.meta.url));

let contract: Record<string, unknown> | null = null;

/** openapi.yaml parsed, read at the first call (start-up) and kept: the document never changes while the service runs. */
export function loadContract(): Record<string, unknown> {
  contract ??= parse(readFileSync(OPENAPI_PATH, 'utf8')) as Record<string, unknown>;
  return contract;
}
