/**
 * A counting semaphore: at most `limit` holders at once, waiters served first come first served.
 * The scheduler uses one as the global concurrency limit across all series.
 */
export class Limiter {
  #limit: number;
  #active = 0;
  #waiting: Array<() => void> = [];

  constructor(limit: number) {
    if (!Number.isInteger(limit) || limit < 1) throw new RangeError(`concurrency limit must be an integer >= 1, got ${limit}`);
    this.#limit = limit;
  }

  get active(): number {
    return this.#active;
  }

  get waiting(): number {
    return this.#waiting.length;
  }

  get limit(): number {
    return this.#limit;
  }

  /** Change the limit (config reload); extra waiters start at once when it grows. */
  setLimit(limit: number): void {
    if (!Number.isInteger(limit) || limit < 1) throw new RangeError(`concurrency limit must be an integer >= 1, got ${limit}`);
    this.#limit = limit;
    this.#drain();
  }

  /** Wait for a slot; the returned function releases it (idempotent). */
  async acquire(): Promise<() => void> {
    if (this.#active < this.#limit) {
      this.#active++;
    } else {
      await new Promise<void>((resolve) => this.#waiting.push(resolve));
    }
    let released = false;
    return () => {
      if (released) return;
      released = true;
      this.#active--;
      this.#drain();
    };
  }

  /** Run fn holding a slot. */
  async run<T>(fn: () => Promise<T>): Promise<T> {
    const release = await this.acquire();
    try {
      return await fn();
    } finally {
      release();
    }
  }

  #drain(): void {
    while (this.#active < this.#limit && this.#waiting.length > 0) {
      this.#active++;
      this.#waiting.shift()!();
    }
  }
}
