/**
 * Time source for the daemon. Everything that waits or reads the time takes a Clock, so tests
 * drive time with a fake instead of sleeping. The real one is `systemClock`.
 */

/** Opaque timer handle returned by Clock.setTimeout. */
export type TimerHandle = { readonly id: number } | ReturnType<typeof setTimeout>;

export interface Clock {
  /** Current time, epoch milliseconds. */
  now(): number;
  /** Monotonic milliseconds for measuring durations (never goes back). */
  monotonicMs(): number;
  setTimeout(fn: () => void, delayMs: number): TimerHandle;
  clearTimeout(handle: TimerHandle): void;
  /** Resolves after delayMs of this clock's time. */
  sleep(delayMs: number): Promise<void>;
}

export const systemClock: Clock = {
  now: () => Date.now(),
  monotonicMs: () => performance.now(),
  setTimeout: (fn, delayMs) => {
    const h = setTimeout(fn, delayMs);
    return h;
  },
  clearTimeout: (handle) => clearTimeout(handle as ReturnType<typeof setTimeout>),
  sleep: (delayMs) => new Promise((resolve) => setTimeout(resolve, delayMs)),
};

/**
 * A manually driven clock: time only moves when `advance` is called, timers fire in due order.
 * Used by tests and by benchmarks that replay many cycles without waiting.
 */
export class ManualClock implements Clock {
  #now: number;
  #mono = 0;
  #nextId = 1;
  #timers = new Map<number, { at: number; seq: number; fn: () => void }>();
  #seq = 0;

  constructor(startMs: number) {
    this.#now = startMs;
  }

  now(): number {
    return this.#now;
  }

  monotonicMs(): number {
    return this.#mono;
  }

  setTimeout(fn: () => void, delayMs: number): TimerHandle {
    const id = this.#nextId++;
    this.#timers.set(id, { at: this.#now + Math.max(0, delayMs), seq: this.#seq++, fn });
    return { id };
  }

  clearTimeout(handle: TimerHandle): void {
    if (handle && typeof handle === 'object' && 'id' in handle) this.#timers.delete(handle.id as number);
  }

  sleep(delayMs: number): Promise<void> {
    return new Promise((resolve) => this.setTimeout(resolve, delayMs));
  }

  /** Number of timers waiting. */
  get pendingTimers(): number {
    return this.#timers.size;
  }

  /**
   * Move time forward by deltaMs, firing every timer that falls due, in order. Between timers the
   * microtask queue is drained (a few macrotask turns), so promise chains started by one timer run
   * before the next timer fires, as they would in real time.
   */
  async advance(deltaMs: number): Promise<void> {
    const target = this.#now + deltaMs;
    for (;;) {
      let next: { id: number; at: number; seq: number; fn: () => void } | null = null;
      for (const [id, t] of this.#timers) {
        if (t.at <= target && (!next || t.at < next.at || (t.at === next.at && t.seq < next.seq))) next = { id, ...t };
      }
      if (!next) break;
      this.#timers.delete(next.id);
      this.#mono += next.at - this.#now;
      this.#now = next.at;
      next.fn();
      await settle();
    }
    this.#mono += target - this.#now;
    this.#now = target;
    await settle();
  }
}

/** Let pending promise callbacks run (a few event-loop turns). */
export async function settle(turns = 5): Promise<void> {
  for (let i = 0; i < turns; i++) await new Promise<void>((resolve) => setImmediate(resolve));
}
