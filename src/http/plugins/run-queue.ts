/**
 * The run queue: the runner that executes queued runs (in the job pool when the store can be
 * opened from a worker thread) and the scheduler that queues the datasets' scheduled runs.
 * Runs whose process died (their lease ran out, src/jobs/lease.ts) are queued again before this
 * process takes any, and looked for again every quarter heartbeat; both start
 * when the app is ready and stop before the pools and the store close.
 */
import type { FastifyInstance } from 'fastify';
import fp from 'fastify-plugin';
import type { RunHooks } from '../../jobs/hooks.js';
import { createRoostHooks } from '../../jobs/run-hooks.js';
import { Runner } from '../../jobs/runner.js';
import { Scheduler } from '../../jobs/schedule.js';
import { DEFAULT_CONFIG, type ServerConfig } from '../config.js';
import type { DatasetServices } from '../routes/common.js';

declare module 'fastify' {
  interface FastifyInstance {
    runner: Runner;
    /** the store, the runner and the job pool together, for start-up tasks and tests */
    datasets: DatasetServices;
  }
}

export type RunQueueOptions = Partial<Pick<ServerConfig, 'scheduleMinIntervalS' | 'runHeartbeatMs'>> & Pick<ServerConfig, 'runConcurrency' | 'scheduleScanMs' | 'webhookAttempts' | 'webhookTimeoutMs' | 'allowPrivateWebhooks' | 'publicUrl'> & {
  /** run hooks (track assignment, notices); default: tracks and signed notices */
  hooks?: RunHooks;
};

async function runQueue(app: FastifyInstance, options: RunQueueOptions): Promise<void> {
  const { store, storeConfig, jobPool } = app;
  const serviceHooks = options.hooks
    ? null
    : createRoostHooks({ webhook: { attempts: options.webhookAttempts, timeoutMs: options.webhookTimeoutMs, allowPrivate: options.allowPrivateWebhooks }, publicUrl: options.publicUrl || null, log: app.log });
  const runner = new Runner({
    store,
    hooks: options.hooks ?? serviceHooks!,
    concurrency: options.runConcurrency,
    storeConfig,
    pool: storeConfig === null ? null : jobPool,
    heartbeatMs: options.runHeartbeatMs,
    log: app.log,
  });
  app.decorate('runner', runner);
  const minIntervalMs = (options.scheduleMinIntervalS ?? DEFAULT_CONFIG.scheduleMinIntervalS) * 1000;
  app.decorate('datasets', { store, runner, jobs: jobPool } satisfies DatasetServices);
  await runner.recover();
  const scheduler = options.scheduleScanMs > 0 ? new Scheduler({ store, settings: { scanMs: options.scheduleScanMs, minIntervalMs }, onRun: () => runner.wake(), log: app.log }) : null;
  app.addHook('onReady', async () => {
    runner.start();
    scheduler?.start();
  });
  app.addHook('onClose', async () => {
    await scheduler?.stop();
    await runner.close();
    // notices still waiting for a retry are given up (and logged) rather than holding the shutdown
    await serviceHooks?.close();
  });
}

export default fp(runQueue, { name: 'roost-run-queue', fastify: '5.x', dependencies: ['roost-store', 'roost-pools'] });
