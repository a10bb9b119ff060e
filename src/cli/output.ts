/**
 * Atomic result folders: everything is written into a fresh temporary folder beside the target,
 * then renamed into place, so a failed or interrupted run never leaves a half-written result.
 */
import { closeSync, openSync, writeSync } from 'node:fs';
import { mkdir, rename, rm } from 'node:fs/promises';
import { basename, dirname, join, resolve } from 'node:path';

/** Writes chunks (text, or bytes as they are) to a new file, one write per chunk, so no whole-file string is ever built. */
export function writeChunks(path: string, chunks: Iterable<string | Uint8Array>): void {
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

/** What a result file holds: chunks in order, or text computed at its turn. */
export type ResultContent = Iterable<string | Uint8Array> | (() => string);

/**
 * A result folder being written: files go into a fresh temporary folder beside the target
 * (`path(name)` for a writer of its own, `write` for content), and `commit` renames it into place,
 * replacing an earlier result; `discard` removes it.
 */
export class ResultFolder {
  private constructor(
    private readonly target: string,
    private readonly tmp: string,
    private readonly old: string,
  ) {}

  /** Creates the temporary folder for `outDir` (its parent too when missing). */
  static async open(outDir: string): Promise<ResultFolder> {
    const target = resolve(outDir);
    const parent = dirname(target);
    await mkdir(parent, { recursive: true });
    const tag = `${process.pid}-${Date.now().toString(36)}`;
    const folder = new ResultFolder(target, join(parent, `.${basename(target)}.tmp-${tag}`), join(parent, `.${basename(target)}.old-${tag}`));
    await mkdir(folder.tmp);
    return folder;
  }

  /** Where file `name` is written in the temporary folder. */
  path(name: string): string {
    return join(this.tmp, name);
  }

  /** Writes file `name`. */
  write(name: string, content: ResultContent): void {
    writeChunks(this.path(name), typeof content === 'function' ? [content()] : content);
  }

  /** Moves the written folder into place, replacing an earlier result. */
  async commit(): Promise<void> {
    // Move an earlier result aside first: rename() cannot replace a non-empty folder.
    let hadOld = false;
    try {
      await rename(this.target, this.old);
      hadOld = true;
    } catch (err) {
      if ((err as NodeJS.ErrnoException).code !== 'ENOENT') throw err;
    }
    try {
      await rename(this.tmp, this.target);
    } catch (err) {
      if (hadOld) await rename(this.old, this.target);
      throw err;
    }
    if (hadOld) await rm(this.old, { recursive: true, force: true });
  }

  /** Removes the temporary folder and what was written in it. */
  async discard(): Promise<void> {
    await rm(this.tmp, { recursive: true, force: true });
  }
}

/**
 * Writes `files` (name and content in chunks, in order; content may also be computed at its turn) as the folder
 * `outDir`, replacing an earlier result there.
 * @param outDir target folder; its parent is created when missing
 */
export async function writeResultFolder(outDir: string, files: [string, ResultContent][]): Promise<void> {
  const folder = await ResultFolder.open(outDir);
  try {
    for (const [name, content] of files) folder.write(name, content);
    await folder.commit();
  } catch (err) {
    await folder.discard();
    throw err;
  }
}
