/**
 * `roost serve` as a child process, for the tests that kill it in the middle of work: started on
 * a free port, ready once it prints the URL it listens on (a bounded wait, no set sleep), killed
 * with SIGKILL; whatever a test leaves running is killed when it ends.
 */
import { spawn, type ChildProcess } from 'node:child_process';
import { dirname, join } from 'node:path';
import { fileURLToPath } from 'node:url';

const ROOT = join(dirname(fileURLToPath(import.meta.url)), '..', '..');

export interface ChildServer {
  url: string;
  child: ChildProcess;
  /** when the test saw it listening, epoch ms */
  readyAt: number;
}

export interface ServeOptions {
  /** the child's environment; default this process's */
  env?: NodeJS.ProcessEnv;
  /** longest wait for it to listen, milliseconds */
  startMs: number;
}

/** The servers one test file starts. */
export class ChildServers {
  private readonly children = new Set<ChildProcess>();

  /** Starts `roost serve --port 0` with `args`; resolves once it listens, rejects if it exits or is not listening within `startMs`. */
  serve(args: readonly string[], options: ServeOptions): Promise<ChildServer> {
    return new Promise((resolve, reject) => {
      const child = spawn(process.execPath, ['--import', 'tsx', join(ROOT, 'src/cli/bin.ts'), 'serve', '--port', '0', ...args], { cwd: ROOT, stdio: ['ignore', 'pipe', 'pipe'], env: options.env });
      this.children.add(child);
      let out = '';
      const timer = setTimeout(() => reject(new Error(`server did not start: ${out}`)), options.startMs);
      child.stdout!.on('data', (d: Buffer) => {
        out += d.toString();
        const m = /"url":"(http:\/\/[^"]+)"/.exec(out);
        if (m) {
          clearTimeout(timer);
          resolve({ url: m[1]!, child, readyAt: Date.now() });
        }
      });
      child.stderr!.on('data', (d: Buffer) => (out += d.toString()));
      child.on('exit', (code) => {
        clearTimeout(timer);
        reject(new Error(`server exited with ${code}: ${out}`));
      });
    });
  }

  /** Kills a server with SIGKILL; resolves once it has exited. */
  kill(s: ChildServer): Promise<void> {
    return new Promise((resolve) => {
      if (s.child.exitCode !== null || s.child.signalCode !== null) return resolve();
      s.child.once('exit', () => resolve());
      s.child.kill('SIGKILL');
    });
  }

  /** Kills every server still running (for afterAll). */
  killAll(): void {
    for (const c of this.children) if (c.exitCode === null && c.signalCode === null) c.kill('SIGKILL');
  }
}
