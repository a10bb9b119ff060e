/**
 * GDAL's command-line tools (`ogrinfo`, `ogr2ogr`, Debian package gdal-bin), the real GIS client
 * the OGC API and layer tests drive. On a developer's machine the suite that needs them is skipped
 * with the reason when they are missing; under CI (`CI=true`) a missing GDAL is an error, so a run
 * can never be green with the GDAL suite left out (`.ci/run` installs gdal-bin).
 */
import { execFile } from 'node:child_process';
import { promisify } from 'node:util';
import { isCi } from './postgres.js';

const run = promisify(execFile);

/** null when ogrinfo and ogr2ogr answer, else why not. @throws Error when missing under CI */
export async function gdalSkipReason(env: NodeJS.ProcessEnv = process.env): Promise<string | null> {
  let reason: string | null = null;
  for (const tool of ['ogrinfo', 'ogr2ogr']) {
    try {
      await run(tool, ['--version']);
    } catch (e) {
      reason = `${tool} is not available (${(e as Error).message.split('\n')[0]}); install gdal-bin`;
      break;
    }
  }
  if (reason !== null && isCi(env)) throw new Error(`${reason}. CI=true: the GDAL suite must run in CI, so a missing GDAL fails the run (.ci/run installs gdal-bin)`);
  return reason;
}

/** Runs a GDAL tool; resolves with its output, rejects with its stderr on a non-zero exit. */
export async function gdal(tool: 'ogrinfo' | 'ogr2ogr', args: string[]): Promise<{ stdout: string; stderr: string }> {
  // GDAL_HTTP_TIMEOUT: a stuck request fails the test instead of hanging it
  return run(tool, args, { maxBuffer: 256 * 1024 * 1024, env: { ...process.env, GDAL_HTTP_TIMEOUT: '60', CPL_DEBUG: 'OFF' } });
}
