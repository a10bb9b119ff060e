/**
 * `roost serve`: starts the HTTP service. Flags, environment variables and defaults come from
 * src/http/config.ts (one table for all three), so `--help`, the README and the code agree.
 */
import { Command } from 'commander';
import { ConfigError, DEFAULT_CONFIG, OPTIONS, resolveConfig, type ServerConfig } from '../http/config.js';
// The server (Fastify, the worker pool, the store) loads only when `serve` runs, so the other
// commands start fast.
import type { RunningServer } from '../http/server.js';

/**
 * Starts the service with `options` over environment variables and defaults (see resolveConfig).
 * Resolves once it listens; the process then runs until SIGTERM or SIGINT.
 * Throws ConfigError for unusable values.
 */
export async function runServe(
  options: Partial<Record<keyof ServerConfig, unknown>> = {},
  env: Record<string, string | undefined> = process.env,
  /** store the demo dataset marrow-vale and run it once, unless present (also ROOST_DEMO=1) */
  demo = false,
): Promise<RunningServer> {
  const config = resolveConfig(options, env);
  const { startServer } = await import('../http/server.js');
  const server = await startServer(config);
  server.app.log.info({ url: server.url, workers: config.workers, body_limit_bytes: config.bodyLimitBytes }, `roost listening on ${server.url}`);
  if (demo || env.ROOST_DEMO === '1') {
    const { DEMO_DATASET, seedDemo } = await import('../http/routes/demo.js');
    const run = await seedDemo(server.app);
    server.app.log.info({ dataset: DEMO_DATASET, run }, run === null ? 'demo dataset present' : `demo dataset stored; run ${run} queued`);
  }
  return server;
}

function describeDefault(key: keyof ServerConfig): string {
  const v = DEFAULT_CONFIG[key];
  return key === 'workers' ? `${String(v)} here: cores − 1, at least 1` : String(v);
}

/**
 * The `serve` command for commander: `program.addCommand(serveCommand(setExit))`.
 * `setExit` receives 2 for a bad option value; on success the process keeps running.
 */
export function serveCommand(setExit: (code: number) => void = (c) => (process.exitCode = c)): Command {
  const cmd = new Command('serve').description('start the HTTP service (environment variables in brackets)');
  for (const o of OPTIONS) {
    if (o.kind === 'switch') {
      cmd.option(o.flag, `${o.help} [${o.env}=1]`);
      continue;
    }
    const arg = o.kind === 'size' ? '<size>' : o.kind === 'string' ? '<text>' : o.kind === 'level' ? '<level>' : '<n>';
    cmd.option(`${o.flag} ${arg}`, `${o.help} [${o.env}] (default: ${describeDefault(o.key)})`);
  }
  cmd.option('--demo', 'store the demo dataset marrow-vale and run it once, unless present [ROOST_DEMO=1]');
  cmd.action(async (opts: Record<string, unknown>) => {
    const overrides: Partial<Record<keyof ServerConfig, unknown>> = {};
    for (const o of OPTIONS) {
      const name = o.flag.slice(2).replace(/-([a-z])/g, (_m, c: string) => c.toUpperCase());
      if (opts[name] !== undefined) overrides[o.key] = opts[name];
    }
    try {
      await runServe(overrides, process.env, opts.demo === true);
    } catch (err) {
      if (err instanceof ConfigError) {
        process.stderr.write(`roost serve: ${err.message}\n`);
        setExit(2);
        return;
      }
      throw err;
    }
  });
  return cmd;
}

/** Runs `roost serve` with the arguments after `serve` (for example process.argv.slice(3)). */
export async function serve(argv: string[]): Promise<void> {
  await serveCommand().parseAsync(argv, { from: 'user' });
}
