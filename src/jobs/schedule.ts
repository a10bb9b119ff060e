/**
 * Scheduled runs inside the server. A dataset's schedule is a cron expression read in an IANA time
 * zone (croner: five fields, or six with seconds first); at each slot the scheduler claims the
 * slot and creates its run in one transaction (`createScheduledRun`: a run for exactly one caller
 * per dataset and slot across processes and instances, with trigger 'schedule'), so a crash cannot
 * leave a slot claimed without its run, and a slot whose run could not be created is tried again
 * at the next look. The run queue then executes it like any other.
 *
 * When it looks: at the next due slot of any dataset, and at least every `scanMs`, re-reading the
 * datasets each time, so a schedule created, changed or removed takes effect within `scanMs`.
 *
 * Missed slots: when several slots of a dataset fell due since the last look (the process was
 * stopped, asleep or busy), only the latest is run; one re-clustering of the same observations
 * serves them all. At start-up, slots up to `catchUpMs` in the past count as due, so a restart
 * just after 02:00 still runs the 02:00 slot (exactly once: another instance may have run it).
 *
 * Daylight-saving time (croner's behaviour, checked in test/jobs/schedule.test.ts):
 * - a local time that does not exist (02:30 on the night clocks go from 02:00 to 03:00) runs at the
 *   first instant after the gap (03:00 new time), once;
 * - a local time that happens twice (02:30 on the night clocks go back from 03:00 to 02:00) runs
 *   once, at its first occurrence (summer time);
 * - patterns that fire every so many minutes or hours keep firing through both hours of the night
 *   clocks go back, as elapsed time asks.
 * A slot is the UTC instant it fires at, so nothing else about time zones reaches the store.
 *
 * How often: a schedule may fire at most once every `minIntervalMs` (default 5 minutes, the
 * server's --schedule-min-interval-s). A schedule firing more often is refused when a dataset is
 * created or changed, and one stored before the floor was raised is not run (and logged), so no
 * dataset can fill the database with runs: a schedule of every second once grew it by 34 MB in
 * 30 s.
 */
import { Cron } from 'croner';
import type { Dataset, DatasetSchedule, Run, Store } from '../storage/store.js';

/** How the scheduler looks for due slots. */
export interface SchedulerSettings {
  /** longest time between two looks at the datasets, milliseconds; default 60 000 */
  scanMs: number;
  /** at start-up, slots this far in the past still count as due, milliseconds; default 900 000 (15 min) */
  catchUpMs: number;
  /** shortest time allowed between two slots of a schedule, milliseconds; default 300 000 (5 min); 0: no floor */
  minIntervalMs: number;
}

/** Default floor on schedule frequency, milliseconds (our choice: a run every 5 minutes is already far more than a nightly re-clustering needs). */
export const DEFAULT_MIN_SCHEDULE_INTERVAL_MS = 300_000;

/** Defaults (our choice): a minute keeps schedule edits prompt at one small query per minute. */
export const DEFAULT_SCHEDULER_SETTINGS: Readonly<SchedulerSettings> = Object.freeze({ scanMs: 60_000, catchUpMs: 900_000, minIntervalMs: DEFAULT_MIN_SCHEDULE_INTERVAL_MS });

/** Slots looked at to find a schedule's shortest interval: more than a day of 5-minute slots. */
const INTERVAL_SAMPLE = 1000;

/** Where the scheduler logs (a pino or Fastify logger fits). */
export interface ScheduleLog {
  info(obj: Record<string, unknown>, msg: string): void;
  warn(obj: Record<string, unknown>, msg: string): void;
  error(obj: Record<string, unknown>, msg: string): void;
}

function pattern(schedule: DatasetSchedule): Cron {
  return new Cron(schedule.cron, { timezone: schedule.timezone, paused: true });
}

/** "5 minutes", "90 seconds", "1 hour" */
function duration(ms: number): string {
  const s = Math.round(ms / 1000);
  const [n, unit] = s % 3600 === 0 && s >= 3600 ? [s / 3600, 'hour'] : s % 60 === 0 && s >= 60 ? [s / 60, 'minute'] : [s, 'second'];
  return `${n} ${unit}${n === 1 ? '' : 's'}`;
}

/**
 * Why a schedule cannot be used (bad cron expression, unknown time zone, never fires, fires more
 * often than once every `minIntervalMs` over its next INTERVAL_SAMPLE slots from `from`), or null
 * when it can. For checking a dataset definition before it is stored.
 */
export function scheduleProblem(schedule: DatasetSchedule, minIntervalMs = DEFAULT_MIN_SCHEDULE_INTERVAL_MS, from: Date = new Date()): string | null {
  if (typeof schedule?.cron !== 'string' || typeof schedule.timezone !== 'string') return 'a schedule needs "cron" and "timezone" texts';
  try {
    Intl.DateTimeFormat('en', { timeZone: schedule.timezone });
  } catch {
    return `timezone ${JSON.stringify(schedule.timezone)} is not an IANA time zone name such as Europe/Berlin or UTC`;
  }
  let cron: Cron;
  try {
    cron = pattern(schedule);
    if (cron.nextRun(from) === null) return `cron ${JSON.stringify(schedule.cron)} never fires`;
  } catch (e) {
    return `cron ${JSON.stringify(schedule.cron)} is not usable: ${(e as Error).message}`;
  }
  if (minIntervalMs > 0) {
    let prev = cron.nextRun(from);
    for (let k = 0; k < INTERVAL_SAMPLE && prev !== null; k++) {
      const next = cron.nextRun(prev);
      if (next === null) break;
      const gap = next.getTime() - prev.getTime();
      if (gap < minIntervalMs) {
        return `cron ${JSON.stringify(schedule.cron)} fires ${duration(gap)} apart (at ${prev.toISOString()} and ${next.toISOString()}); this service runs a schedule at most once every ${duration(minIntervalMs)}, for example "*/${Math.max(1, Math.ceil(minIntervalMs / 60_000))} * * * *" or "0 2 * * *" (nightly)`;
      }
      prev = next;
    }
  }
  return null;
}

/**
 * The slots of a schedule in (after, until], oldest first, at most `max` (default 1000; the latest
 * ones are kept when there are more). @throws Error for a bad cron expression or time zone
 */
export function dueSlots(schedule: DatasetSchedule, after: Date, until: Date, max = 1000): Date[] {
  const cron = pattern(schedule);
  const out: Date[] = [];
  let t = after;
  for (;;) {
    const next = cron.nextRun(t);
    if (next === null || next.getTime() > until.getTime()) return out;
    out.push(next);
    if (out.length > max) out.shift();
    t = next;
  }
}

/** The first slot after `after`, or null when the schedule never fires again. */
export function nextSlot(schedule: DatasetSchedule, after: Date): Date | null {
  return pattern(schedule).nextRun(after);
}

export interface SchedulerOptions {
  store: Store;
  settings?: Partial<SchedulerSettings>;
  /** told of each run created (for example to wake the run queue) */
  onRun?: (run: Run, slot: Date) => void;
  log?: ScheduleLog;
  /** the clock, epoch milliseconds; default Date.now (tests pass a fake one) */
  now?: () => number;
}

/** What one look at the schedules did. */
export interface TickReport {
  /** runs this scheduler created, with their slots */
  created: { datasetId: string; slot: string; runId: string }[];
  /** due slots another process or instance had already claimed */
  lost: { datasetId: string; slot: string }[];
}

/** Runs the datasets' schedules; `start()` to begin, `stop()` at shutdown. */
export class Scheduler {
  private readonly settings: SchedulerSettings;
  private readonly now: () => number;
  private readonly cursors = new Map<string, number>();
  private readonly warned = new Map<string, string>();
  /** the floor check of each schedule seen ("cron timezone" → problem or null) */
  private readonly frequency = new Map<string, string | null>();
  /** when the datasets were last looked at (at start-up: the start of the catch-up window) */
  private lastLook: number;
  private timer: NodeJS.Timeout | null = null;
  private running: Promise<unknown> | null = null;
  private stopped = false;

  constructor(private readonly options: SchedulerOptions) {
    this.settings = { ...DEFAULT_SCHEDULER_SETTINGS, ...Object.fromEntries(Object.entries(options.settings ?? {}).filter(([, v]) => v !== undefined)) } as SchedulerSettings;
    for (const k of ['scanMs', 'catchUpMs', 'minIntervalMs'] as const) {
      const v = this.settings[k];
      if (!Number.isSafeInteger(v) || v < (k === 'scanMs' ? 1 : 0)) throw new RangeError(`scheduler setting ${k} must be a whole number of milliseconds${k === 'scanMs' ? ' ≥ 1' : ' ≥ 0'}, got ${String(v)}`);
    }
    this.now = options.now ?? Date.now;
    this.lastLook = this.now() - this.settings.catchUpMs;
  }

  /** Starts looking: now, then at each due slot and at least every scanMs. */
  start(): void {
    if (this.stopped || this.timer !== null || this.running !== null) return;
    this.loop();
  }

  private loop(): void {
    const p = this.tick()
      .then(
        (next) => next,
        (err: unknown) => {
          this.options.log?.error({ err }, 'could not look at the schedules');
          return this.now() + this.settings.scanMs;
        },
      )
      .then((next) => {
        this.running = null;
        if (this.stopped) return;
        // at most 2^31−1 ms (Node's limit); a few ms late so the slot is surely due when it fires
        const delay = Math.min(2 ** 31 - 1, Math.max(0, next - this.now()) + 5);
        this.timer = setTimeout(() => {
          this.timer = null;
          this.loop();
        }, delay);
        this.timer.unref();
      });
    this.running = p;
  }

  /** Stops looking; resolves once a look under way is over. */
  async stop(): Promise<void> {
    this.stopped = true;
    if (this.timer !== null) clearTimeout(this.timer);
    this.timer = null;
    await this.running;
  }

  /**
   * One look: for every dataset with a schedule, claims its latest slot due since the last look and
   * creates the run when the claim is won. @returns when to look next (epoch ms), with the report
   * available through `lastReport`
   */
  async tick(): Promise<number> {
    const now = this.now();
    const report: TickReport = { created: [], lost: [] };
    let next = now + this.settings.scanMs;
    const datasets = await this.options.store.listDatasets();
    const present = new Set<string>();
    for (const d of datasets) {
      if (d.schedule === null) continue;
      present.add(d.id);
      // A dataset seen for the first time: slots since the last look (or the catch-up window at
      // start-up), but none from before its schedule was set (its last update, unless that is
      // ahead of this clock, as with clocks of instances a little apart).
      const updated = Date.parse(d.updatedAt);
      const after = this.cursors.get(d.id) ?? Math.max(this.lastLook, updated <= now ? updated : -Infinity);
      let done = true;
      try {
        // stored before the floor was raised: not run, and said once
        const key = `${d.schedule.cron} ${d.schedule.timezone}`;
        if (!this.frequency.has(key)) this.frequency.set(key, scheduleProblem(d.schedule, this.settings.minIntervalMs, new Date(now)));
        const tooOften = this.frequency.get(key);
        if (tooOften != null && / apart /.test(tooOften)) throw new Error(tooOften);
        const slots = dueSlots(d.schedule, new Date(after), new Date(now), 1);
        if (slots.length > 0) done = await this.fire(d, slots[slots.length - 1]!, report);
        const upcoming = nextSlot(d.schedule, new Date(now));
        if (upcoming !== null) next = Math.min(next, upcoming.getTime());
        this.warned.delete(d.id);
      } catch (err) {
        const key = `${d.schedule.cron} ${d.schedule.timezone}`;
        if (this.warned.get(d.id) !== key) {
          this.warned.set(d.id, key);
          this.options.log?.warn({ dataset: d.id, cron: d.schedule.cron, timezone: d.schedule.timezone, error: (err as Error).message }, 'dataset schedule not usable; fix it to have scheduled runs');
        }
      }
      this.cursors.set(d.id, done ? now : after);
    }
    for (const id of this.cursors.keys()) if (!present.has(id)) this.cursors.delete(id);
    this.lastLook = now;
    this.lastReport = report;
    return next;
  }

  /** What the latest look did. */
  lastReport: TickReport = { created: [], lost: [] };

  /** @returns false when the run could not be created (nothing was claimed; the next look tries again) */
  private async fire(d: Dataset, slot: Date, report: TickReport): Promise<boolean> {
    const slotIso = slot.toISOString();
    const { store } = this.options;
    const settings = Object.fromEntries(Object.entries(d.settings).filter(([, v]) => v !== null));
    try {
      const run = await store.createScheduledRun({ datasetId: d.id, settings, trigger: 'schedule' }, slotIso);
      if (run === null) {
        report.lost.push({ datasetId: d.id, slot: slotIso });
        return true;
      }
      report.created.push({ datasetId: d.id, slot: slotIso, runId: run.id });
      this.options.log?.info({ dataset: d.id, slot: slotIso, run: run.id }, 'scheduled run queued');
      this.options.onRun?.(run, slot);
      return true;
    } catch (err) {
      // the claim and the run are one transaction, so the slot is still free: try it again
      this.options.log?.error({ err, dataset: d.id, slot: slotIso }, 'scheduled run could not be created; the next look tries again');
      return false;
    }
  }
}
