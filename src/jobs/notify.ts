/**
 * Notice of change: after each run of a dataset that has a webhook, Roost POSTs a short JSON
 * summary to the webhook URL.
 *
 * Body (application/json): `event` "run.finished", `dataset`, `run` {id, status, trigger, error},
 * `hotspots` (how many the run found), `previous_run` (the run the tracks were compared with, or
 * null), `counts` (transitions per MONIC kind, or null when nothing was compared: a first run, or
 * a run that did not succeed), and `links` to the run, its hotspots and its changes (absolute
 * when a public URL is configured, else paths under /v1).
 *
 * Signature: header `Roost-Signature: t=<unix seconds>,v1=<hex>` where hex is
 * HMAC-SHA256(secret, `${t}.${raw body}`), lower-case hex. The receiver recomputes it over the raw
 * bytes it received (before any JSON parsing), compares in constant time, and refuses a `t` far
 * from its own clock (five minutes is `verifySignature`'s default), which stops replays of an old
 * notice. Every attempt is signed afresh with its own `t`; the body and the `Roost-Delivery` id stay
 * the same across attempts, so a receiver can drop a notice it has already handled.
 *
 * Retries: a network error, a timeout, 408, 425, 429 or any 5xx is tried again after a back-off
 * that doubles from `firstDelayMs` up to `maxDelayMs` (a Retry-After header within that bound is
 * honoured), for at most `attempts` attempts in all. Any other answer outside 2xx (a redirect, 4xx)
 * is final: the receiver has said no, and asking again will not change it. A failed notice is
 * logged and never changes the run's outcome.
 *
 * Addresses: every attempt checks the URL again and connects only to addresses that pass the rules
 * of webhook-address.ts, checked inside the connection's own name look-up (so a name that now
 * resolves to a private address is refused, and the address checked is the one connected to). A
 * refused address is final.
 */
import { createHmac, randomUUID, timingSafeEqual } from 'node:crypto';
import { Agent, fetch } from 'undici';
import type { Dataset, DatasetWebhook, Run } from '../storage/store.js';
import type { RunOutcome } from './hooks.js';
import type { TransitionKind } from '../tracks/match.js';
import { checkWebhookUrl, guardedLookup, WebhookAddressError } from './webhook-address.js';

/** Header carrying the signature. */
export const SIGNATURE_HEADER = 'Roost-Signature';
/** Header carrying the notice's id, the same on every attempt. */
export const DELIVERY_HEADER = 'Roost-Delivery';

/** How notices are sent. */
export interface WebhookSettings {
  /** attempts in all, first one included; default 5 */
  attempts: number;
  /** wait before the second attempt, milliseconds; doubled before each further one; default 2000 */
  firstDelayMs: number;
  /** longest wait between attempts, milliseconds; default 60 000 */
  maxDelayMs: number;
  /** time allowed for one attempt (connect, send, answer), milliseconds; default 10 000 */
  timeoutMs: number;
  /** allow private-network and loopback receivers (and http: to loopback); default false */
  allowPrivate: boolean;
}

/**
 * Defaults: 5 attempts 2, 4, 8 and 16 s apart ride out a receiver's restart of about half a minute
 * while a notice still arrives within the minute (our choice); 10 s per attempt is generous for a
 * receiver that only has to queue the notice.
 */
export const DEFAULT_WEBHOOK_SETTINGS: Readonly<WebhookSettings> = Object.freeze({
  attempts: 5,
  firstDelayMs: 2_000,
  maxDelayMs: 60_000,
  timeoutMs: 10_000,
  allowPrivate: false,
});

/** Where notices are logged (a pino or Fastify logger fits). */
export interface NoticeLog {
  info(obj: Record<string, unknown>, msg: string): void;
  warn(obj: Record<string, unknown>, msg: string): void;
}

/** Defaults merged with `settings`, checked; throws a RangeError naming the bad setting. */
export function resolveWebhookSettings(settings: Partial<WebhookSettings> = {}): WebhookSettings {
  const s = { ...DEFAULT_WEBHOOK_SETTINGS, ...Object.fromEntries(Object.entries(settings).filter(([, v]) => v !== undefined)) } as WebhookSettings;
  const whole = (name: 'attempts' | 'firstDelayMs' | 'maxDelayMs' | 'timeoutMs', min: number): void => {
    if (!Number.isSafeInteger(s[name]) || s[name] < min) throw new RangeError(`Webhook setting ${name} must be a whole number ≥ ${min}, got ${String(s[name])}.`);
  };
  whole('attempts', 1);
  whole('firstDelayMs', 0);
  whole('maxDelayMs', 0);
  whole('timeoutMs', 1);
  if (typeof s.allowPrivate !== 'boolean') throw new RangeError(`Webhook setting allowPrivate must be true or false, got ${String(s.allowPrivate)}.`);
  return s;
}

/** The signature header value for `body` signed with `secret` at `unixSeconds`. */
export function signNotice(secret: string, body: string, unixSeconds: number): string {
  const hex = createHmac('sha256', secret).update(`${unixSeconds}.${body}`).digest('hex');
  return `t=${unixSeconds},v1=${hex}`;
}

/**
 * Whether `header` is a valid signature of `body` with `secret`, made within `toleranceS` seconds
 * (default 300) of `nowS` (default: now). What a receiver does; exported for receivers written in
 * JavaScript and for tests.
 */
export function verifySignature(secret: string, body: string | Uint8Array, header: string, toleranceS = 300, nowS = Math.floor(Date.now() / 1000)): boolean {
  const parts = new Map(header.split(',').map((p) => p.trim().split('=', 2) as [string, string]));
  const t = Number(parts.get('t'));
  const given = parts.get('v1');
  if (!Number.isSafeInteger(t) || given === undefined || !/^[0-9a-f]{64}$/.test(given)) return false;
  if (Math.abs(nowS - t) > toleranceS) return false;
  const raw = typeof body === 'string' ? Buffer.from(body) : Buffer.from(body.buffer, body.byteOffset, body.byteLength);
  const expected = createHmac('sha256', secret).update(`${t}.`).update(raw).digest();
  return timingSafeEqual(expected, Buffer.from(given, 'hex'));
}

/** The notice sent after a run. */
export interface RunNotice {
  event: 'run.finished';
  dataset: string;
  run: { id: string; status: RunOutcome['status']; trigger: Run['trigger']; error: string | null };
  /** hotspots found, null when the run did not succeed */
  hotspots: number | null;
  previous_run: string | null;
  counts: Record<TransitionKind, number> | null;
  links: { run: string; hotspots: string; changes: string };
  /** whether the links are absolute URLs (the service has --public-url) or paths on the service that sent the notice */
  links_are: 'absolute' | 'paths';
  /** with paths only: how to get absolute links */
  links_note?: string;
}

/**
 * The notice for a finished run. `publicUrl` (for example https://roost.example.org) makes the
 * links absolute; without it they are paths.
 */
export function runNotice(dataset: Dataset, run: Run, outcome: RunOutcome, publicUrl: string | null = null): RunNotice {
  const changes = outcome.status === 'succeeded' ? (outcome.summary?.['changes'] as { previous_run?: string; counts?: Record<TransitionKind, number> } | null | undefined) : null;
  const base = `${publicUrl === null ? '' : publicUrl.replace(/\/+$/, '')}/v1/datasets/${encodeURIComponent(dataset.id)}`;
  return {
    event: 'run.finished',
    dataset: dataset.id,
    run: { id: run.id, status: outcome.status, trigger: run.trigger, error: outcome.error },
    hotspots: outcome.status === 'succeeded' ? ((outcome.summary?.['figures'] as { hotspots?: number } | undefined)?.hotspots ?? null) : null,
    previous_run: changes?.previous_run ?? null,
    counts: changes?.counts ?? null,
    links: { run: `${base}/runs/${run.id}`, hotspots: `${base}/runs/${run.id}/hotspots`, changes: `${base}/changes?to=${run.id}` },
    ...(publicUrl === null
      ? { links_are: 'paths' as const, links_note: 'The links are paths on the Roost service that sent this notice; start it with --public-url (ROOST_PUBLIC_URL) for absolute links.' }
      : { links_are: 'absolute' as const }),
  };
}

/** What happened to one notice. */
export interface DeliveryReport {
  delivered: boolean;
  attempts: number;
  /** the last HTTP status, null when no answer came */
  status: number | null;
  /** why the last attempt failed, null when delivered */
  error: string | null;
}

const RETRIED = new Set([408, 425, 429]);

function sleep(ms: number, signal: AbortSignal | undefined): Promise<void> {
  return new Promise((resolve) => {
    if (signal?.aborted) return resolve();
    const done = (): void => {
      clearTimeout(timer);
      signal?.removeEventListener('abort', done);
      resolve();
    };
    const timer = setTimeout(done, ms);
    signal?.addEventListener('abort', done, { once: true });
  });
}

/** Retry-After in milliseconds (seconds or an HTTP date), null when absent or unreadable. */
function retryAfterMs(value: string | null): number | null {
  if (value === null) return null;
  if (/^\s*\d+\s*$/.test(value)) return Number(value) * 1000;
  const at = Date.parse(value);
  return Number.isNaN(at) ? null : Math.max(0, at - Date.now());
}

/** Told after each attempt that did not deliver, before the wait for the next one. */
export type AttemptListener = (report: DeliveryReport) => void;

/**
 * POSTs `body` to the webhook, signed, retrying as the module header says. Never throws; the
 * report tells what happened. `signal` stops waiting between attempts and aborts the one under way
 * (used at shutdown); `onAttempt` hears of every failed attempt (for logs, metrics and tests).
 */
export async function deliverNotice(
  webhook: DatasetWebhook,
  body: string,
  settings: Partial<WebhookSettings> = {},
  signal?: AbortSignal,
  onAttempt?: AttemptListener,
): Promise<DeliveryReport> {
  const s = resolveWebhookSettings(settings);
  const delivery = randomUUID();
  let status: number | null = null;
  let error = 'not attempted';
  let delayMs = s.firstDelayMs;
  for (let attempt = 1; attempt <= s.attempts; attempt++) {
    if (signal?.aborted) return { delivered: false, attempts: attempt - 1, status, error: 'stopped: the service is shutting down' };
    let retry = true;
    let waitMs = delayMs;
    let agent: Agent | null = null;
    try {
      const checked = checkWebhookUrl(webhook.url, s.allowPrivate);
      agent = new Agent({ connect: { lookup: guardedLookup(s.allowPrivate, checked.loopbackOnly) } });
      const timeout = AbortSignal.timeout(s.timeoutMs);
      const res = await fetch(checked.url, {
        dispatcher: agent,
        method: 'POST',
        body,
        redirect: 'manual',
        signal: signal ? AbortSignal.any([signal, timeout]) : timeout,
        headers: {
          'content-type': 'application/json',
          'user-agent': 'roost-webhook',
          [SIGNATURE_HEADER]: signNotice(webhook.secret, body, Math.floor(Date.now() / 1000)),
          [DELIVERY_HEADER]: delivery,
        },
      });
      status = res.status;
      await res.arrayBuffer().catch(() => undefined); // frees the connection
      if (res.ok) return { delivered: true, attempts: attempt, status, error: null };
      error = `the receiver answered ${res.status}`;
      retry = res.status >= 500 || RETRIED.has(res.status);
      const asked = retryAfterMs(res.headers.get('retry-after'));
      if (asked !== null) waitMs = Math.min(s.maxDelayMs, Math.max(waitMs, asked));
    } catch (e) {
      status = null;
      const err = e as Error & { cause?: { code?: string; message?: string } };
      const refused = e instanceof WebhookAddressError ? e : err.cause instanceof WebhookAddressError ? err.cause : null;
      if (refused !== null) {
        error = refused.message;
        retry = false;
      } else {
        error = err.name === 'TimeoutError' ? `no answer within ${s.timeoutMs} ms` : `${err.message}${err.cause?.code ? ` (${err.cause.code})` : ''}`;
      }
    } finally {
      void agent?.close().catch(() => undefined);
    }
    if (!retry || attempt === s.attempts) return { delivered: false, attempts: attempt, status, error };
    onAttempt?.({ delivered: false, attempts: attempt, status, error });
    await sleep(waitMs, signal);
    delayMs = Math.min(s.maxDelayMs, delayMs * 2);
  }
  return { delivered: false, attempts: s.attempts, status, error };
}

/**
 * Sends the notice of a finished run when its dataset has a webhook, and logs the outcome. Never
 * throws. Resolves with the report, or null when the dataset has no webhook.
 */
export async function notifyRun(
  dataset: Dataset,
  run: Run,
  outcome: RunOutcome,
  options: { settings?: Partial<WebhookSettings>; publicUrl?: string | null; log?: NoticeLog; signal?: AbortSignal; onAttempt?: AttemptListener } = {},
): Promise<DeliveryReport | null> {
  if (dataset.webhook === null) return null;
  const body = JSON.stringify(runNotice(dataset, run, outcome, options.publicUrl ?? null));
  const onAttempt: AttemptListener = (rep) => {
    options.log?.info({ dataset: dataset.id, run: run.id, attempts: rep.attempts, status: rep.status, error: rep.error }, 'run notice attempt failed; trying again');
    options.onAttempt?.(rep);
  };
  const report = await deliverNotice(dataset.webhook, body, options.settings, options.signal, onAttempt);
  const fields = { dataset: dataset.id, run: run.id, attempts: report.attempts, status: report.status };
  if (report.delivered) options.log?.info(fields, 'run notice delivered');
  else options.log?.warn({ ...fields, error: report.error }, 'run notice not delivered; the run itself is unaffected');
  return report;
}
