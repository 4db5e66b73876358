/**
 * Retry delays for store writes: exponential, capped, jittered.
 *   delay(attempt) = min(maxMs, initialMs * factor^(attempt - 1)) * (1 - jitter * u),  u ~ U[0, 1)
 * Jitter spreads the retries of many radcast instances after a shared outage; with jitter 0 the
 * sequence is exact (tests). The delay never exceeds maxMs and never drops below (1 - jitter) of
 * the un-jittered value.
 */
export interface BackoffOptions {
  /** First retry delay (ms). */
  initialMs: number;
  /** Cap of any delay (ms). */
  maxMs: number;
  /** Growth per attempt (default 2). */
  factor?: number;
  /** Fraction of the delay that is randomised, 0..1 (default 0.2). */
  jitter?: number;
  /** Random source in [0, 1) (default Math.random). */
  random?: () => number;
}

export class Backoff {
  readonly #initialMs: number;
  readonly #maxMs: number;
  readonly #factor: number;
  readonly #jitter: number;
  readonly #random: () => number;
  #attempt = 0;

  constructor(opts: BackoffOptions) {
    if (!(opts.initialMs > 0) || !(opts.maxMs >= opts.initialMs)) {
      throw new RangeError(`backoff needs 0 < initialMs <= maxMs, got initialMs=${opts.initialMs} maxMs=${opts.maxMs}`);
    }
    const jitter = opts.jitter ?? 0.2;
    if (!(jitter >= 0 && jitter <= 1)) throw new RangeError(`backoff jitter must be in [0, 1], got ${jitter}`);
    const factor = opts.factor ?? 2;
    if (!(factor >= 1)) throw new RangeError(`backoff factor must be >= 1, got ${factor}`);
    this.#initialMs = opts.initialMs;
    this.#maxMs = opts.maxMs;
    this.#factor = factor;
    this.#jitter = jitter;
    this.#random = opts.random ?? Math.random;
  }

  /**
   * Delay before retry number `attempt` (1 = after the first failure). Without an argument the
   * object counts: each call is the next attempt until reset().
   */
  nextDelayMs(attempt?: number): number {
    const a = attempt ?? ++this.#attempt;
    const n = Math.max(1, Math.floor(a));
    // Exponent clamped so factor^(n-1) cannot overflow to Infinity before the cap applies.
    const raw = Math.min(this.#maxMs, this.#initialMs * this.#factor ** Math.min(n - 1, 64));
    if (this.#jitter === 0) return raw;
    return raw * (1 - this.#jitter * this.#random());
  }

  /** Attempts counted so far by argument-less nextDelayMs() calls. */
  get attempt(): number {
    return this.#attempt;
  }

  /** Back to the first delay (call after a success). */
  reset(): void {
    this.#attempt = 0;
  }
}
