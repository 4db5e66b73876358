/**
 * Test doubles shared by the Outbox tests (influx-outbox, influx-spool): a fake clock whose timers
 * run only when the test advances time, a sink that records batches and can fail or hold a send,
 * a capturing logger, and the Outbox built on them with small, fixed limits.
 */
import { Backoff } from '../../../src/store/influx/backoff.ts';
import { StoreError } from '../../../src/store/influx/errors.ts';
import type { Logger } from '../../../src/store/influx/log.ts';
import { Outbox, type LineSink } from '../../../src/store/influx/outbox.ts';
import type { LineKind, OutLine } from '../../../src/store/influx/schema.ts';

/** Fake clock: timers run only when the test advances time. */
export class FakeClock {
  now = 0;
  #timers: { at: number; fn: () => void; id: number }[] = [];
  #id = 0;
  setTimer = (fn: () => void, ms: number): unknown => {
    const id = ++this.#id;
    this.#timers.push({ at: this.now + ms, fn, id });
    return id;
  };
  clearTimer = (h: unknown): void => {
    this.#timers = this.#timers.filter((t) => t.id !== h);
  };
  /** Delays of the timers now pending, relative to now. */
  pending(): number[] {
    return this.#timers.map((t) => t.at - this.now).sort((a, b) => a - b);
  }
  async advance(ms: number): Promise<void> {
    const end = this.now + ms;
    for (;;) {
      await settle();
      this.#timers.sort((a, b) => a.at - b.at);
      const next = this.#timers[0];
      if (!next || next.at > end) break;
      this.#timers.shift();
      this.now = next.at;
      next.fn();
    }
    this.now = end;
    await settle();
  }
}

/** Lets pending promise chains and immediates run. */
export async function settle(): Promise<void> {
  for (let i = 0; i < 10; i++) await new Promise<void>((r) => setImmediate(r));
}

/** Sink that records every batch and fails while `down` is set (with `error()`). */
export class FakeSink implements LineSink {
  batches: string[][] = [];
  attempts = 0;
  down = false;
  error: () => StoreError = () => new StoreError('STORE_UNREACHABLE', 'POST /write unreachable (ECONNREFUSED)');
  /** Set by holdNext(): the next send waits until release() is called. */
  release: (() => void) | null = null;
  #held: Promise<void> | null = null;
  holdNext(): void {
    this.#held = new Promise<void>((r) => (this.release = r));
  }
  async send(lines: string[]): Promise<void> {
    this.attempts++;
    if (this.#held) {
      const h = this.#held;
      this.#held = null;
      await h;
    }
    if (this.down) throw this.error();
    this.batches.push([...lines]);
  }
  get sent(): string[] {
    return this.batches.flat();
  }
}

export interface LogRec {
  level: string;
  obj: Record<string, unknown>;
  msg: string;
}

export function captureLogger(): { logger: Logger; records: LogRec[] } {
  const records: LogRec[] = [];
  const at = (level: string) => (obj: object, msg: string) => records.push({ level, obj: obj as Record<string, unknown>, msg });
  return { logger: { debug: at('debug'), info: at('info'), warn: at('warn'), error: at('error') }, records };
}

/** n lines of one kind with keys kind:from.. and a field tag=value. */
export function lines(kind: LineKind, from: number, n: number, tag = 'v'): OutLine[] {
  return Array.from({ length: n }, (_, i) => ({ kind, key: `${kind}:${from + i}`, line: `${kind} ${tag}=${from + i} ${from + i}` }));
}

/** An Outbox on a fake clock and sink: capacity 100, batches of 5, flush every 1 s, backoff 100 ms doubling to 1.6 s, no jitter. */
export function makeOutbox(over: Partial<ConstructorParameters<typeof Outbox>[0]> & { clock?: FakeClock; sink?: FakeSink } = {}) {
  const { clock = new FakeClock(), sink = new FakeSink(), ...rest } = over;
  const { logger, records } = captureLogger();
  const box = new Outbox({
    sink,
    capacity: 100,
    batchSize: 5,
    flushIntervalMs: 1_000,
    backoff: new Backoff({ initialMs: 100, maxMs: 1_600, jitter: 0 }),
    maxRetryDelayMs: 1_600,
    closeTimeoutMs: 5_000,
    dropLogIntervalMs: 10_000,
    logger,
    store: 'influxdb-v1',
    now: () => clock.now,
    setTimer: clock.setTimer,
    clearTimer: clock.clearTimer,
    ...rest,
  });
  return { box, sink, clock, records };
}
