/**
 * Server configuration: one defaults object, overridable by environment variables and then by
 * command-line flags. Bad values are rejected here, before anything listens.
 */
import { availableParallelism } from 'node:os';
import { DEFAULT_SQLITE_PATH } from '../storage/defaults.js';

export interface ServerConfig {
  /** TCP port to listen on; 0 picks a free port */
  port: number;
  /** interface to listen on; 127.0.0.1 keeps the service local until it is put behind a proxy */
  host: string;
  /** largest accepted request body in bytes */
  bodyLimitBytes: number;
  /** worker threads doing the parsing, validating and clustering */
  workers: number;
  /** requests allowed to wait for a worker beyond those being worked on; more get 503 */
  queueSize: number;
  /** time allowed for one request's work (queue wait included) in milliseconds */
  timeLimitMs: number;
  /** time allowed to receive a whole request (upload included) in milliseconds */
  requestTimeoutMs: number;
  /** request bodies received at once; one more is answered 503 before it is read */
  uploads: number;
  /** time allowed for a request body to arrive, milliseconds; slower senders get 408 */
  uploadTimeoutMs: number;
  /** most observations in one POST …/observations; more is a 413 */
  maxPostFeatures: number;
  /** layer GETs streamed at once; one more is answered 503 */
  layerStreams: number;
  /** runs waiting in the queue (all datasets, all instances); a run asked for beyond that is answered 503 */
  maxQueuedRuns: number;
  /** idle keep-alive connection lifetime in milliseconds */
  keepAliveTimeoutMs: number;
  /** on SIGTERM/SIGINT, time given to requests in flight before connections are cut, in milliseconds */
  shutdownGraceMs: number;
  /** main-thread event-loop delay above which new requests are shed with 503, in milliseconds */
  maxEventLoopDelayMs: number;
  /** seconds a client is asked to wait (Retry-After) after a 503 */
  retryAfterS: number;
  /** pino log level: fatal, error, warn, info, debug, trace or silent */
  logLevel: string;
  /** SQLite file holding datasets, observations and runs (':memory:' keeps them in memory, for tests) */
  dbPath: string;
  /** postgres:// URL of a shared database; '' uses the SQLite file */
  databaseUrl: string;
  /** stored runs executed at once by this process */
  runConcurrency: number;
  /** time between renewals of a running run's lease, milliseconds; a run whose process died is taken over within 2 × this (src/jobs/lease.ts) */
  runHeartbeatMs: number;
  /** longest time between two looks at the datasets' schedules, milliseconds; 0 turns scheduled runs off in this process */
  scheduleScanMs: number;
  /** shortest time allowed between two slots of a dataset's schedule, seconds (0: no floor) */
  scheduleMinIntervalS: number;
  /** attempts to deliver one notice of change, the first included */
  webhookAttempts: number;
  /** time allowed for one notice delivery attempt, milliseconds */
  webhookTimeoutMs: number;
  /** the service's address as clients see it (for example https://roost.example.org), for absolute links in notices; '' gives paths */
  publicUrl: string;
  /** a MapLibre style URL for the map page's background (the operator's usual tiles); '' uses the built-in offline background */
  basemapStyle: string;
  /** let webhooks reach private-network and loopback addresses (and http: to this machine) */
  allowPrivateWebhooks: boolean;
  /** listen beyond loopback with no API key in the store (anyone who can reach it may do anything) */
  open: boolean;
  /** host names answered besides the loopback names, the listening address and the public URL's host, comma-separated */
  allowedHosts: string;
  /** web origins allowed to call the service from a browser (CORS), comma-separated; '' allows none */
  corsOrigins: string;
  /** requests per minute per key, or per address without a key; 0 turns the limit off */
  rateLimitPerMinute: number;
}

/**
 * Every default in one place (mirrored by the README's options table).
 * The body limit admits one million GeoJSON point features of up to ~250 bytes each.
 */
export const DEFAULT_CONFIG: Readonly<ServerConfig> = Object.freeze({
  port: 8080,
  host: '127.0.0.1',
  bodyLimitBytes: 256 * 1024 * 1024,
  // one core stays with the main thread so /healthz and uploads stay responsive
  workers: Math.max(1, availableParallelism() - 1),
  queueSize: 8,
  timeLimitMs: 120_000,
  requestTimeoutMs: 300_000,
  // bodies in receipt hold memory up to the body limit each; 16 keeps that bounded while many
  // phones post small batches at once (our choice)
  uploads: 16,
  // a 256 MiB body at 5 MB/s; slower clients should send smaller batches (our choice)
  uploadTimeoutMs: 60_000,
  // a batch is one transaction and one worker task; 100 000 observations are some 25 MB of
  // GeoJSON, stored in about 3 s (our choice: larger loads go in several posts)
  maxPostFeatures: 100_000,
  // each stream reads a layer a few MiB at a time from the store (our choice)
  layerStreams: 8,
  maxQueuedRuns: 100,
  keepAliveTimeoutMs: 5_000,
  shutdownGraceMs: 10_000,
  maxEventLoopDelayMs: 1_000,
  retryAfterS: 5,
  logLevel: 'info',
  dbPath: DEFAULT_SQLITE_PATH,
  databaseUrl: '',
  // one run at a time leaves the other core to requests on a 2-core machine
  runConcurrency: 1,
  runHeartbeatMs: 10_000,
  // see src/jobs/schedule.ts and src/jobs/notify.ts for the reasons behind these
  scheduleScanMs: 60_000,
  scheduleMinIntervalS: 300,
  webhookAttempts: 5,
  webhookTimeoutMs: 10_000,
  publicUrl: '',
  basemapStyle: '',
  allowPrivateWebhooks: false,
  open: false,
  allowedHosts: '',
  corsOrigins: '',
  // ten a second, sustained, per key: far above a survey phone or a map, well below what costs
  // the service (common practice, no source)
  rateLimitPerMinute: 600,
});

/** One option: its config key, command-line flag, environment variable, kind and help text. */
export interface OptionSpec {
  key: keyof ServerConfig;
  flag: string;
  env: string;
  /** 'switch': a flag without a value (on when given), or true/false/1/0 in the environment */
  kind: 'integer' | 'size' | 'string' | 'level' | 'switch';
  help: string;
}

/** The options in the order the README and `roost serve --help` list them. */
export const OPTIONS: readonly OptionSpec[] = [
  { key: 'port', flag: '--port', env: 'ROOST_PORT', kind: 'integer', help: 'TCP port (0 = any free port)' },
  { key: 'host', flag: '--host', env: 'ROOST_HOST', kind: 'string', help: 'interface to listen on' },
  { key: 'bodyLimitBytes', flag: '--body-limit', env: 'ROOST_BODY_LIMIT', kind: 'size', help: 'largest request body, bytes or with a unit (512KiB, 256MiB, 1GiB)' },
  { key: 'workers', flag: '--workers', env: 'ROOST_WORKERS', kind: 'integer', help: 'worker threads for parsing and clustering' },
  { key: 'queueSize', flag: '--queue-size', env: 'ROOST_QUEUE_SIZE', kind: 'integer', help: 'requests that may wait for a worker; beyond that, 503' },
  { key: 'timeLimitMs', flag: '--time-limit-ms', env: 'ROOST_TIME_LIMIT_MS', kind: 'integer', help: 'time allowed for one request\'s work, milliseconds' },
  { key: 'requestTimeoutMs', flag: '--request-timeout-ms', env: 'ROOST_REQUEST_TIMEOUT_MS', kind: 'integer', help: 'time allowed to receive a whole request, milliseconds' },
  { key: 'uploads', flag: '--uploads', env: 'ROOST_UPLOADS', kind: 'integer', help: 'request bodies received at once; one more is answered 503 before it is read' },
  { key: 'uploadTimeoutMs', flag: '--upload-timeout-ms', env: 'ROOST_UPLOAD_TIMEOUT_MS', kind: 'integer', help: 'time allowed for a request body to arrive, milliseconds; slower senders get 408' },
  { key: 'maxPostFeatures', flag: '--max-post-features', env: 'ROOST_MAX_POST_FEATURES', kind: 'integer', help: 'most observations in one post to a dataset; more is a 413' },
  { key: 'layerStreams', flag: '--layer-streams', env: 'ROOST_LAYER_STREAMS', kind: 'integer', help: 'stored layers sent at once; one more GET is answered 503' },
  { key: 'maxQueuedRuns', flag: '--max-queued-runs', env: 'ROOST_MAX_QUEUED_RUNS', kind: 'integer', help: 'runs waiting in the queue; a run asked for beyond that is answered 503' },
  { key: 'keepAliveTimeoutMs', flag: '--keep-alive-timeout-ms', env: 'ROOST_KEEP_ALIVE_TIMEOUT_MS', kind: 'integer', help: 'idle keep-alive lifetime, milliseconds' },
  { key: 'shutdownGraceMs', flag: '--shutdown-grace-ms', env: 'ROOST_SHUTDOWN_GRACE_MS', kind: 'integer', help: 'time for requests in flight on SIGTERM/SIGINT, milliseconds' },
  { key: 'maxEventLoopDelayMs', flag: '--max-event-loop-delay-ms', env: 'ROOST_MAX_EVENT_LOOP_DELAY_MS', kind: 'integer', help: 'event-loop delay above which requests are shed with 503, milliseconds (0 = never shed)' },
  { key: 'retryAfterS', flag: '--retry-after-s', env: 'ROOST_RETRY_AFTER_S', kind: 'integer', help: 'Retry-After sent with 503, seconds' },
  { key: 'logLevel', flag: '--log-level', env: 'ROOST_LOG_LEVEL', kind: 'level', help: 'fatal, error, warn, info, debug, trace or silent' },
  { key: 'dbPath', flag: '--db', env: 'ROOST_DB_PATH', kind: 'string', help: 'SQLite file for datasets, observations and runs' },
  { key: 'databaseUrl', flag: '--database-url', env: 'DATABASE_URL', kind: 'string', help: 'postgres:// URL of a shared database (instead of the SQLite file)' },
  { key: 'runConcurrency', flag: '--runs', env: 'ROOST_RUNS', kind: 'integer', help: 'stored runs executed at once by this process' },
  { key: 'runHeartbeatMs', flag: '--run-heartbeat-ms', env: 'ROOST_RUN_HEARTBEAT_MS', kind: 'integer', help: 'time between renewals of a running run\'s lease, milliseconds; a run whose process died is taken over within twice this' },
  { key: 'scheduleScanMs', flag: '--schedule-scan-ms', env: 'ROOST_SCHEDULE_SCAN_MS', kind: 'integer', help: 'longest time between looks at dataset schedules, milliseconds (0 = no scheduled runs in this process)' },
  { key: 'scheduleMinIntervalS', flag: '--schedule-min-interval-s', env: 'ROOST_SCHEDULE_MIN_INTERVAL_S', kind: 'integer', help: 'shortest time allowed between two scheduled runs of a dataset, seconds (0 = no floor); schedules firing more often are refused' },
  { key: 'webhookAttempts', flag: '--webhook-attempts', env: 'ROOST_WEBHOOK_ATTEMPTS', kind: 'integer', help: 'attempts to deliver a notice of change (back-off doubling from 2 s)' },
  { key: 'webhookTimeoutMs', flag: '--webhook-timeout-ms', env: 'ROOST_WEBHOOK_TIMEOUT_MS', kind: 'integer', help: 'time allowed for one notice delivery attempt, milliseconds' },
  { key: 'publicUrl', flag: '--public-url', env: 'ROOST_PUBLIC_URL', kind: 'string', help: 'address clients use to reach the service, for absolute links in notices' },
  { key: 'open', flag: '--open', env: 'ROOST_OPEN', kind: 'switch', help: 'listen beyond loopback although no API key exists (anyone who can reach it may do anything)' },
  { key: 'allowedHosts', flag: '--allowed-hosts', env: 'ROOST_ALLOWED_HOSTS', kind: 'string', help: 'host names answered besides loopback, the listening address and the public URL\'s host (comma-separated)' },
  { key: 'corsOrigins', flag: '--cors-origins', env: 'ROOST_CORS_ORIGINS', kind: 'string', help: 'web origins allowed to call from a browser, e.g. https://map.example.org (comma-separated)' },
  { key: 'rateLimitPerMinute', flag: '--rate-limit', env: 'ROOST_RATE_LIMIT', kind: 'integer', help: 'requests per minute per key, or per address without one (0 = no limit)' },
  { key: 'basemapStyle', flag: '--basemap-style', env: 'ROOST_BASEMAP_STYLE', kind: 'string', help: 'MapLibre style URL for the map page background (default: the built-in offline land and coastlines)' },
  { key: 'allowPrivateWebhooks', flag: '--allow-private-webhooks', env: 'ROOST_ALLOW_PRIVATE_WEBHOOKS', kind: 'switch', help: 'let webhooks reach private-network and loopback addresses (http: only to this machine)' },
];

const LEVELS = new Set(['fatal', 'error', 'warn', 'info', 'debug', 'trace', 'silent']);
const UNITS: Record<string, number> = { '': 1, b: 1, k: 1024, kb: 1024, kib: 1024, m: 1024 ** 2, mb: 1024 ** 2, mib: 1024 ** 2, g: 1024 ** 3, gb: 1024 ** 3, gib: 1024 ** 3 };

/** Thrown for a configuration value that cannot be used; the message names the flag and variable. */
export class ConfigError extends Error {
  constructor(message: string) {
    super(message);
    this.name = 'ConfigError';
  }
}

/**
 * Parses a size such as `1048576`, `512KiB`, `256MiB` or `1g` into bytes (units are binary:
 * k = 1024). Throws ConfigError for anything else.
 */
export function parseSize(text: string, where: string): number {
  const m = /^\s*(\d+(?:\.\d+)?)\s*([a-zA-Z]*)\s*$/.exec(text);
  const unit = m ? UNITS[m[2]!.toLowerCase()] : undefined;
  if (!m || unit === undefined) {
    throw new ConfigError(`${where}: "${text}" is not a size; give bytes or a number with KiB, MiB or GiB`);
  }
  return Math.floor(Number(m[1]) * unit);
}

function convert(spec: OptionSpec, value: unknown, where: string): string | number | boolean {
  if (spec.kind === 'switch') {
    if (typeof value === 'boolean') return value;
    const t = String(value).trim().toLowerCase();
    if (t === 'true' || t === '1') return true;
    if (t === 'false' || t === '0') return false;
    throw new ConfigError(`${where}: "${String(value)}" is not true or false`);
  }
  if (spec.kind === 'string') {
    if (typeof value !== 'string' || value.trim() === '') throw new ConfigError(`${where}: give a non-empty value`);
    return value.trim();
  }
  if (spec.kind === 'level') {
    const level = String(value).trim().toLowerCase();
    if (!LEVELS.has(level)) throw new ConfigError(`${where}: "${String(value)}" is not a log level; use one of ${[...LEVELS].join(', ')}`);
    return level;
  }
  if (spec.kind === 'size') {
    if (typeof value === 'number') return value;
    return parseSize(String(value), where);
  }
  const n = typeof value === 'number' ? value : /^\s*\d+\s*$/.test(String(value)) ? Number(value) : NaN;
  if (!Number.isSafeInteger(n)) throw new ConfigError(`${where}: "${String(value)}" is not a whole number`);
  return n;
}

function listOf(text: string): string[] {
  return text
    .split(',')
    .map((x) => x.trim())
    .filter((x) => x !== '');
}

function check(config: ServerConfig): ServerConfig {
  const spec = (key: keyof ServerConfig): string => {
    const o = OPTIONS.find((s) => s.key === key)!;
    return `${o.flag} / ${o.env}`;
  };
  const atLeast = (key: keyof ServerConfig, min: number): void => {
    const v = config[key] as number;
    if (!Number.isSafeInteger(v) || v < min) throw new ConfigError(`${spec(key)}: must be a whole number of at least ${min}, got ${String(v)}`);
  };
  atLeast('port', 0);
  if (config.port > 65535) throw new ConfigError(`${spec('port')}: must be at most 65535, got ${config.port}`);
  atLeast('bodyLimitBytes', 1);
  // typed arrays (and so one request body) cannot exceed 2^31-1 bytes in a worker message
  if (config.bodyLimitBytes > 2 ** 31 - 1) throw new ConfigError(`${spec('bodyLimitBytes')}: must be below 2 GiB`);
  atLeast('workers', 1);
  atLeast('queueSize', 0);
  atLeast('timeLimitMs', 1);
  atLeast('requestTimeoutMs', 0);
  atLeast('uploads', 1);
  atLeast('uploadTimeoutMs', 1);
  atLeast('maxPostFeatures', 1);
  atLeast('layerStreams', 1);
  atLeast('maxQueuedRuns', 1);
  atLeast('keepAliveTimeoutMs', 0);
  atLeast('shutdownGraceMs', 0);
  atLeast('maxEventLoopDelayMs', 0);
  atLeast('retryAfterS', 0);
  atLeast('runConcurrency', 1);
  atLeast('runHeartbeatMs', 100);
  atLeast('scheduleScanMs', 0);
  atLeast('scheduleMinIntervalS', 0);
  atLeast('webhookAttempts', 1);
  atLeast('webhookTimeoutMs', 1);
  atLeast('rateLimitPerMinute', 0);
  for (const o of listOf(config.corsOrigins)) {
    let ok = false;
    try {
      const u = new URL(o);
      ok = (u.protocol === 'https:' || u.protocol === 'http:') && u.origin === o.replace(/\/+$/, '');
    } catch {
      ok = false;
    }
    if (!ok) throw new ConfigError(`${spec('corsOrigins')}: ${JSON.stringify(o)} is not a web origin such as https://map.example.org (scheme, host and port only)`);
  }
  if (config.publicUrl !== '' && !/^https?:\/\/[^/]/i.test(config.publicUrl)) throw new ConfigError(`${spec('publicUrl')}: must be an http:// or https:// address`);
  if (config.basemapStyle !== '' && !/^(https?:\/\/[^/]|\/)/i.test(config.basemapStyle)) throw new ConfigError(`${spec('basemapStyle')}: must be an http:// or https:// address or a path on this service`);
  if (config.databaseUrl !== '' && !/^postgres(ql)?:\/\//i.test(config.databaseUrl)) throw new ConfigError(`${spec('databaseUrl')}: must start with postgres:// or postgresql://`);
  return config;
}

/**
 * Builds a complete, checked configuration: DEFAULT_CONFIG, then environment variables
 * (ROOST_PORT, …), then `overrides` (from flags or code). Values may be strings as typed by a user.
 * Throws ConfigError naming the flag and variable when a value is unusable.
 */
export function resolveConfig(
  overrides: Partial<Record<keyof ServerConfig, unknown>> = {},
  env: Record<string, string | undefined> = process.env,
): ServerConfig {
  const config: Record<string, unknown> = { ...DEFAULT_CONFIG };
  for (const spec of OPTIONS) {
    const fromEnv = env[spec.env];
    if (fromEnv !== undefined && fromEnv !== '') config[spec.key] = convert(spec, fromEnv, spec.env);
    const given = overrides[spec.key];
    if (given !== undefined) config[spec.key] = convert(spec, given, spec.flag);
  }
  for (const key of Object.keys(overrides)) {
    if (!OPTIONS.some((s) => s.key === key)) throw new ConfigError(`unknown server option "${key}"`);
  }
  return check(config as unknown as ServerConfig);
}
