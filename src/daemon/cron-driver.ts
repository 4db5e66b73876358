/**
 * Where schedule ticks come from. The daemon uses node-cron (`nodeCronDriver`); tests and replay
 * benchmarks use `clockCronDriver`, which evaluates the same cron expressions with node-cron's own
 * matcher but on an injected Clock, so schedules can be exercised with fake time.
 */
import cron from 'node-cron';
import type { Clock } from './clock.ts';

export interface CronJobSpec {
  /** Job name (the series name), for logs. */
  name: string;
  /** Cron expression: 5 fields (minute precision) or 6 (leading seconds field). */
  expr: string;
  /** IANA time zone the expression is read in. */
  timeZone: string;
  onTick: (at: Date) => void;
}

export interface CronHandle {
  stop(): void;
}

export interface CronDriver {
  /** null when the expression is valid, else a message naming the bad field. */
  validate(expr: string): string | null;
  add(job: CronJobSpec): CronHandle;
}

/** Validation text from node-cron's detailed validator (shared by both drivers). */
export function validateCron(expr: string): string | null {
  const v = cron.validateDetailed(expr);
  if (v.valid) return null;
  const parts = v.errors.map((e) => `${e.field}${e.value !== undefined ? ` "${e.value}"` : ''}: ${e.message}`);
  return parts.length ? parts.join('; ') : 'not a cron expression';
}

/** Real schedules: node-cron tasks with their own timers. */
export function nodeCronDriver(): CronDriver {
  return {
    validate: validateCron,
    add(job) {
      // Overlap is handled by the scheduler (it also spans manual triggers), so node-cron only ticks.
      const task = cron.createTask(job.expr, (ctx) => job.onTick(ctx.date), {
        timezone: job.timeZone,
        name: job.name,
        noOverlap: false,
        suppressMissedWarning: true,
      });
      void task.start();
      return {
        stop: () => {
          void task.destroy();
        },
      };
    },
  };
}

/** Wall-clock fields of an instant in a time zone, as one comparable string. */
function wallClock(fmt: Intl.DateTimeFormat, ms: number): string {
  return fmt.format(new Date(ms));
}

/**
 * Schedules on an injected Clock: a timer at every minute (or second, for 6-field expressions)
 * boundary asks node-cron's matcher whether the expression matches that instant. On the day a
 * wall-clock hour repeats (daylight saving ends), a matching local time fires once, at its second
 * occurrence, as node-cron itself does (tested side by side in tests/unit/daemon/scheduler.test.ts);
 * a local time that does not exist (daylight saving starts) does not fire.
 */
export function clockCronDriver(clock: Clock): CronDriver {
  return {
    validate: validateCron,
    add(job) {
      const matcher = cron.createTask(job.expr, () => undefined, { timezone: job.timeZone, name: job.name });
      const fmt = new Intl.DateTimeFormat('en-GB', { timeZone: job.timeZone, hourCycle: 'h23', year: 'numeric', month: '2-digit', day: '2-digit', hour: '2-digit', minute: '2-digit', second: '2-digit' });
      // DST shifts are one hour in the zones radcast is used in (a 30-minute shift, as on Lord Howe Island, is not handled).
      const repeatsLater = (ms: number) => wallClock(fmt, ms) === wallClock(fmt, ms + 3_600_000);
      const gridMs = job.expr.trim().split(/\s+/).length >= 6 ? 1000 : 60_000;
      let stopped = false;
      let handle = arm();
      function arm() {
        const now = clock.now();
        const next = Math.floor(now / gridMs) * gridMs + gridMs;
        return clock.setTimeout(() => {
          if (stopped) return;
          const at = new Date(next);
          if (matcher.match(at) && !repeatsLater(next)) job.onTick(at);
          handle = arm();
        }, next - now);
      }
      return {
        stop: () => {
          stopped = true;
          clock.clearTimeout(handle);
          void matcher.destroy();
        },
      };
    },
  };
}
