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

/**
 * Schedules on an injected Clock: a timer at every minute (or second, for 6-field expressions)
 * boundary asks node-cron's matcher whether the expression matches that instant.
 */
export function clockCronDriver(clock: Clock): CronDriver {
  return {
    validate: validateCron,
    add(job) {
      const matcher = cron.createTask(job.expr, () => undefined, { timezone: job.timeZone, name: job.name });
      const gridMs = job.expr.trim().split(/\s+/).length >= 6 ? 1000 : 60_000;
      let stopped = false;
      let handle = arm();
      function arm() {
        const now = clock.now();
        const next = Math.floor(now / gridMs) * gridMs + gridMs;
        return clock.setTimeout(() => {
          if (stopped) return;
          const at = new Date(next);
          if (matcher.match(at)) job.onTick(at);
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
