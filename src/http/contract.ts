/**
 * The HTTP contract: where `openapi.yaml` is.
 */
import { fileURLToPath } from 'node:url';

/** The repository's OpenAPI document, two levels up from src/http and from dist/http alike. */
export const OPENAPI_PATH = fileURLToPath(new URL('../../openapi.yaml', import.meta.url));
