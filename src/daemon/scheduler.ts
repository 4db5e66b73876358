/**
 * Per-series refit schedules. Each series has a cron expression (read in the series' time zone);
 * on a tick the series' cycle is queued unless it is already queued or running (a series never
 * runs twice at once), and a global Limiter bounds how many cycles run together.
 *
 * Long-lived: start() arms the schedules, stop() disarms them and waits for running cycles within
 * a bound, flush() waits for everything queued or running.
 */
import type { Logger } from 'pino';
import { systemClock, type Clock } from './clock.ts';
import { nodeCronDriver, type CronDriver, type CronHandle } from './cron-driver.ts';
import { Limiter } from './limiter.ts';
import { DaemonError } from './errors.ts';

export interface ScheduledSeries {
  series: string;
  /** Cron expression of the refit schedule. */
  cron: string;
  timeZone: string;
}

/** Why a run request did not start a cycle. */
export type SkipReason = 'busy' | 'stopping';

export interface RunRequest {
  reason: 'schedule' | 'manual';
  /** Aborted when shutdown gives up waiting; cycles check it before writing. */
  signal: AbortSignal;
}

export interface SchedulerOptions {
  /** Runs one cycle of one series. Its rejection is logged; it should record its own failures. */
  runSeries: (series: string, req: RunRequest) => Promise<unknown>;
  /** Global limit on cycles running at once. */
  concurrency: number;
  logger: Logger;
  driver?: CronDriver;
  clock?: Clock;
  /** Called when a tick or trigger is skipped (metrics). */
  onSkip?: (series: string, reason: SkipReason) => void;
  /**
   * Series whose queued or running cycle must finish before this one starts (inputs it uses at
   * target time). Must not form cycles; the daemon passes only inputs of an earlier dependency wave.
   */
  waitFor?: (series: string) => readonly string[];
}

export interface StopResult {
  /** Cycles that finished during the wait. */
  finished: number;
  /** Series still running when the bound ran out (their signals were aborted). */
  abandoned: string[];
}

export class Scheduler {
  readonly #opts: SchedulerOptions;
  readonly #driver: CronDriver;
  readonly #clock: Clock;
  readonly #limiter: Limiter;
  #jobs = new Map<string, ScheduledSeries>();
  #handles = new Map<string, CronHandle>();
  /** Series queued or running -> its run promise. */
  #inFlight = new Map<string, Promise<void>>();
  #running = new Set<string>();
  #abort = new AbortController();
  #started = false;
  #stopping = false;

  constructor(opts: SchedulerOptions) {
    this.#opts = opts;
    this.#driver = opts.driver ?? nodeCronDriver();
    this.#clock = opts.clock ?? systemClock;
    this.#limiter = new Limiter(opts.concurrency);
  }

  /** Check every expression before anything changes; throws SCHEDULE_INVALID listing each bad one. */
  validate(jobs: ScheduledSeries[]): void {
    const bad: string[] = [];
    for (const j of jobs) {
      const msg = this.#driver.validate(j.cron);
      if (msg) bad.push(`series=${j.series} schedule="${j.cron}": ${msg}`);
    }
    if (bad.length) throw new DaemonError('SCHEDULE_INVALID', bad.join('\n'), { hint: 'use a 5-field cron expression, e.g. "5 * * * *" for five past every hour' });
  }

  /**
   * Replace the set of schedules (start-up and reload). Series that disappeared lose their
   * schedule (a running cycle of theirs finishes); changed ones are re-armed; unchanged ones keep
   * their timers.
   */
  setSchedules(jobs: ScheduledSeries[]): void {
    this.validate(jobs);
    const next = new Map(jobs.map((j) => [j.series, j]));
    for (const [name, old] of this.#jobs) {
      const nj = next.get(name);
      if (!nj || nj.cron !== old.cron || nj.timeZone !== old.timeZone) {
        this.#handles.get(name)?.stop();
        this.#handles.delete(name);
      }
    }
    this.#jobs = next;
    if (this.#started) this.#armMissing();
  }

  setConcurrency(limit: number): void {
    this.#limiter.setLimit(limit);
  }

  get concurrency(): number {
    return this.#limiter.limit;
  }

  /** Series currently running (not just queued). */
  get running(): string[] {
    return [...this.#running];
  }

  /** Series queued or running. */
  get inFlight(): string[] {
    return [...this.#inFlight.keys()];
  }

  isBusy(series: string): boolean {
    return this.#inFlight.has(series);
  }

  start(): void {
    if (this.#started) return;
    this.#started = true;
    this.#armMissing();
  }

  /**
   * Queue a cycle of `series` now. Returns false (and reports a skip) when the series is already
   * queued or running, or the scheduler is stopping.
   */
  trigger(series: string, reason: RunRequest['reason'] = 'manual'): boolean {
    if (this.#stopping) {
      this.#opts.onSkip?.(series, 'stopping');
      return false;
    }
    if (this.#inFlight.has(series)) {
      this.#opts.onSkip?.(series, 'busy');
      this.#opts.logger.debug({ series, reason }, 'cycle skipped: previous cycle of this series still queued or running');
      return false;
    }
    const p = this.#runQueued(series, reason).finally(() => this.#inFlight.delete(series));
    this.#inFlight.set(series, p);
    return true;
  }

  /** Wait until nothing is queued or running. */
  async flush(): Promise<void> {
    while (this.#inFlight.size > 0) await Promise.allSettled([...this.#inFlight.values()]);
  }

  /**
   * Disarm every schedule, drop queued cycles that have not started, and wait for running ones up
   * to `timeoutMs`; after that their abort signals fire and they are reported as abandoned.
   */
  async stop(timeoutMs: number): Promise<StopResult> {
    this.#stopping = true;
    for (const h of this.#handles.values()) h.stop();
    this.#handles.clear();
    this.#started = false;
    const before = this.#running.size;
    const all = Promise.allSettled([...this.#inFlight.values()]).then(() => 'done' as const);
    let timer: ReturnType<Clock['setTimeout']> | undefined;
    const timeout = new Promise<'timeout'>((resolve) => {
      timer = this.#clock.setTimeout(() => resolve('timeout'), timeoutMs);
    });
    const outcome = await Promise.race([all, timeout]);
    if (timer !== undefined) this.#clock.clearTimeout(timer);
    const abandoned = outcome === 'timeout' ? [...this.#running] : [];
    if (abandoned.length) this.#abort.abort(new DaemonError('SHUTDOWN_TIMEOUT', `shutdown bound of ${timeoutMs} ms reached`));
    return { finished: before - abandoned.length, abandoned };
  }

  #armMissing(): void {
    for (const [name, job] of this.#jobs) {
      if (this.#handles.has(name)) continue;
      this.#handles.set(
        name,
        this.#driver.add({ name, expr: job.cron, timeZone: job.timeZone, onTick: () => this.trigger(name, 'schedule') }),
      );
    }
  }

  async #runQueued(series: string, reason: RunRequest['reason']): Promise<void> {
    // Wait for inputs first, without holding a slot (holding one could starve the input itself).
    for (const dep of this.#opts.waitFor?.(series) ?? []) {
      const p = dep !== series ? this.#inFlight.get(dep) : undefined;
      if (p) await p;
    }
    const release = await this.#limiter.acquire();
    try {
      if (this.#stopping) return; // queued before shutdown, never started
      this.#running.add(series);
      try {
        await this.#opts.runSeries(series, { reason, signal: this.#abort.signal });
      } catch (err) {
        this.#opts.logger.error({ series, err }, 'series cycle threw outside its own error handling');
      } finally {
        this.#running.delete(series);
      }
    } finally {
      release();
    }
  }
}
