/**
 * The response and request types in src/http/openapi-types.ts are generated from openapi.yaml
 * by openapi-typescript (`npm run contract:types`); route handlers that use them are checked
 * against the contract at compile time. This test fails when the document changed and the types
 * were not generated again.
 */
import { execFileSync } from 'node:child_process';
import { mkdtempSync, readFileSync, rmSync } from 'node:fs';
import { createRequire } from 'node:module';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { fileURLToPath } from 'node:url';
import { afterAll, describe, expect, it } from 'vitest';

const root = fileURLToPath(new URL('../../', import.meta.url));
const dir = mkdtempSync(join(tmpdir(), 'roost-types-'));

describe('generated contract types', () => {
  afterAll(() => rmSync(dir, { recursive: true, force: true }));

  it('are current with openapi.yaml', () => {
    const cli = join(createRequire(import.meta.url).resolve('openapi-typescript/package.json'), '..', 'bin', 'cli.js');
    const out = join(dir, 'openapi-types.ts');
    // the same command as `npm run contract:types`
    execFileSync(process.execPath, [cli, 'openapi.yaml', '--empty-objects-unknown', '-o', out], { cwd: root, stdio: 'pipe' });
    const committed = readFileSync(join(root, 'src/http/openapi-types.ts'), 'utf8');
    expect(committed === readFileSync(out, 'utf8'), 'src/http/openapi-types.ts is stale: run npm run contract:types').toBe(true);
  }, 60_000);
});
