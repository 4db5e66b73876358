/**
 * Capped exponential backoff with optional full jitter: delay(attempt) = min(capMs, baseMs * 2^attempt),
 * then (with jitter) a uniform draw in [delay/2, delay]. Tests switch jitter off.
 */
export interface BackoffOptions {
  baseMs: number;
  capMs: number;
  /** Jitter on (default). */
  jitter?: boolean;
  /** Random source in [0, 1), default Math.random. */
  random?: () => number;
}

export class Backoff {
  readonly #opts: Required<BackoffOptions>;
  #attempt = 0;

  constructor(opts: BackoffOptions) {
    this.#opts = { jitter: true, random: Math.random, ...opts };
  }

  /** Delay before retry number `attempt` (0-based); without an argument, the next one in sequence. */
  nextDelayMs(attempt?: number): number {
    const a = attempt ?? this.#attempt++;
    const raw = Math.min(this.#opts.capMs, this.#opts.baseMs * 2 ** Math.min(a, 30));
    if (!this.#opts.jitter) return raw;
    return raw / 2 + this.#opts.random() * (raw / 2);
  }

  reset(): void {
    this.#attempt = 0;
  }
}
