/**
 * Atomic result folders: everything is written into a fresh temporary folder beside the target,
 * then renamed into place, so a failed or interrupted run never leaves a half-written result.
 */
import { closeSync, openSync, writeSync } from 'node:fs';
import { mkdir, rename, rm } from 'node:fs/promises';
import { basename, dirname, join, resolve } from 'node:path';

/** Writes chunks (text, or bytes as they are) to a new file, one write per chunk, so no whole-file string is ever built. */
function writeChunks(path: string, chunks: Iterable<string | Uint8Array>): void {
  const fd = openSync(path, 'wx');
  try {
    for (const chunk of chunks) {
      if (typeof chunk === 'string') writeSync(fd, chunk);
      else for (let at = 0; at < chunk.length; ) at += writeSync(fd, chunk, at, chunk.length - at);
    }
  } finally {
    closeSync(fd);
  }
}

/**
 * Writes `files` (name and content in chunks, in order; content may also be computed at its turn) as the folder
 * `outDir`, replacing an earlier result there.
 * @param outDir target folder; its parent is created when missing
 */
export async function writeResultFolder(outDir: string, files: [string, Iterable<string | Uint8Array> | (() => string)][]): Promise<void> {
  const target = resolve(outDir);
  const parent = dirname(target);
  await mkdir(parent, { recursive: true });
  const tag = `${process.pid}-${Date.now().toString(36)}`;
  const tmp = join(parent, `.${basename(target)}.tmp-${tag}`);
  const old = join(parent, `.${basename(target)}.old-${tag}`);
  await mkdir(tmp);
  try {
    for (const [name, content] of files) writeChunks(join(tmp, name), typeof content === 'function' ? [content()] : content);
    // Move an earlier result aside first: rename() cannot replace a non-empty folder.
    let hadOld = false;
    try {
      await rename(target, old);
      hadOld = true;
    } catch (err) {
      if ((err as NodeJS.ErrnoException).code !== 'ENOENT') throw err;
    }
    try {
      await rename(tmp, target);
    } catch (err) {
      if (hadOld) await rename(old, target);
      throw err;
    }
    if (hadOld) await rm(old, { recursive: true, force: true });
  } catch (err) {
    await rm(tmp, { recursive: true, force: true });
    throw err;
  }
}
