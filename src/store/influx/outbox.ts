/**
 * The adapter's write buffer: every point radcast writes waits here until the server confirmed
 * it. Failed sends stay buffered and are retried with capped, jittered backoff, so a store outage
 * loses nothing until the bound is hit. At the bound the oldest forecast points go first (a newer
 * forecast supersedes them anyway); scores and health points only when no forecast point is left.
 * Every drop is counted in stats() and logged (at most one warning per dropLogIntervalMs).
 *
 * Points are keyed by measurement + tags + time: writing the same point again while it waits
 * replaces it, just as the server would overwrite it.
 */
import type { Backoff } from './backoff.ts';
import { StoreError } from './errors.ts';
import type { Logger } from './log.ts';
import type { LineKind, OutLine } from './schema.ts';

/** Sends lines to the server; throws a StoreError when they were not (all) accepted. */
export interface LineSink {
  send(lines: string[]): Promise<void>;
}

export interface OutboxStats {
  /** Points waiting (including the batch being sent). */
  buffered: number;
  /** Failed write attempts that were (or will be) retried. */
  retries: number;
  /** Points dropped because the buffer was full, or still unsent when close() gave up. */
  dropped: number;
  /** Of `dropped`: forecast points. */
  droppedForecast: number;
  /** Points the server refused as invalid (e.g. field type conflict); retrying cannot help. */
  rejected: number;
  /** Points the server confirmed. */
  written: number;
  /** True while the last write attempt failed and points wait for a retry. */
  failing: boolean;
  /** Code and message of the last failed write attempt (null after a success). */
  lastError: { code: string; message: string } | null;
}

export interface OutboxOptions {
  sink: LineSink;
  /** Bound of buffered points. */
  capacity: number;
  batchSize: number;
  flushIntervalMs: number;
  backoff: Backoff;
  maxRetryDelayMs: number;
  closeTimeoutMs: number;
  dropLogIntervalMs: number;
  logger: Logger;
  /** Store kind for log lines. */
  store: string;
  now: () => number;
  setTimer: (fn: () => void, ms: number) => unknown;
  clearTimer: (handle: unknown) => void;
}

interface Entry {
  key: string;
  line: string;
  kind: LineKind;
  seq: number;
  inflight: boolean;
}

export class Outbox {
  readonly #o: OutboxOptions;
  /** Insertion order = age (a re-written key moves to the end). */
  readonly #forecasts = new Map<string, Entry>();
  readonly #others = new Map<string, Entry>();
  #seq = 0;
  #running: Promise<void> | null = null;
  #flushTimer: unknown = null;
  #retryTimer: unknown = null;
  #dropLogTimer: unknown = null;
  #closed = false;
  #failedAttempts = 0;
  #droppedSinceLog = 0;
  #lastDropLogAt = -Infinity;
  readonly #stats: OutboxStats = {
    buffered: 0,
    retries: 0,
    dropped: 0,
    droppedForecast: 0,
    rejected: 0,
    written: 0,
    failing: false,
    lastError: null,
  };

  constructor(opts: OutboxOptions) {
    this.#o = opts;
  }

  get size(): number {
    return this.#forecasts.size + this.#others.size;
  }

  stats(): OutboxStats {
    return { ...this.#stats, buffered: this.size, lastError: this.#stats.lastError && { ...this.#stats.lastError } };
  }

  /** Buffers the lines and makes sure a send is scheduled. Throws STORE_CLOSED after close(). */
  add(lines: OutLine[]): void {
    if (this.#closed) {
      throw new StoreError('STORE_CLOSED', `${this.#o.store} store is closed; ${lines.length} point(s) not accepted`, {
        hint: 'a bug in the caller: writes after close()',
      });
    }
    if (lines.length === 0) return;
    for (const l of lines) {
      const map = l.kind === 'forecast' ? this.#forecasts : this.#others;
      map.delete(l.key);
      map.set(l.key, { key: l.key, line: l.line, kind: l.kind, seq: ++this.#seq, inflight: false });
    }
    this.#trim();
    this.#schedule();
  }

  /**
   * Sends everything buffered now (also during a retry wait). Resolves when the buffer is empty;
   * rejects with the StoreError of the failed attempt otherwise (the points stay buffered and the
   * background retry continues).
   */
  async flush(): Promise<void> {
    this.#clear('flush');
    this.#clear('retry');
    if (this.#running) await this.#running.catch(() => undefined);
    if (this.size === 0) return;
    await this.#drain();
  }

  /**
   * Stops accepting points and keeps sending for at most closeTimeoutMs (waiting out backoff
   * delays within that time). Points still unsent then are counted as dropped and logged.
   */
  async close(): Promise<void> {
    if (this.#closed) return;
    this.#closed = true;
    this.#clear('flush');
    this.#clear('retry');
    const deadline = this.#o.now() + this.#o.closeTimeoutMs;
    if (this.#running) await this.#running.catch(() => undefined);
    while (this.size > 0) {
      try {
        await this.#drain();
      } catch {
        const left = deadline - this.#o.now();
        if (left <= 0) break;
        await new Promise<void>((resolve) => this.#o.setTimer(resolve, Math.min(left, this.#o.backoff.nextDelayMs(this.#failedAttempts))));
        if (this.#o.now() >= deadline) {
          // One last try at the deadline, so a server that came back just now still gets the points.
          await this.#drain().catch(() => undefined);
          break;
        }
      }
    }
    this.#clear('retry');
    const left = this.size;
    if (left > 0) {
      let forecasts = 0;
      for (const e of this.#forecasts.values()) if (!e.inflight) forecasts++;
      this.#stats.dropped += left;
      this.#stats.droppedForecast += forecasts;
      this.#forecasts.clear();
      this.#others.clear();
      this.#o.logger.error(
        { store: this.#o.store, dropped: left, droppedForecast: forecasts, lastError: this.#stats.lastError },
        `${left} point(s) could not be written before close and are lost`,
      );
    }
    this.#logDrops(true);
    this.#clear('dropLog');
  }

  #clear(which: 'flush' | 'retry' | 'dropLog'): void {
    const h = which === 'flush' ? this.#flushTimer : which === 'retry' ? this.#retryTimer : this.#dropLogTimer;
    if (h !== null) this.#o.clearTimer(h);
    if (which === 'flush') this.#flushTimer = null;
    else if (which === 'retry') this.#retryTimer = null;
    else this.#dropLogTimer = null;
  }

  #timer(fn: () => void, ms: number): unknown {
    const h = this.#o.setTimer(fn, ms);
    // Timers must not keep a finished process alive; close() is what drains the buffer.
    (h as { unref?: () => void } | null)?.unref?.();
    return h;
  }

  /** Starts a send when a batch is full, else arms the flush timer; never during a retry wait. */
  #schedule(): void {
    if (this.#closed || this.#running || this.#retryTimer !== null || this.size === 0) return;
    if (this.#pendingCount() >= this.#o.batchSize) {
      this.#clear('flush');
      this.#kick();
      return;
    }
    if (this.#flushTimer === null) {
      this.#flushTimer = this.#timer(() => {
        this.#flushTimer = null;
        this.#kick();
      }, this.#o.flushIntervalMs);
    }
  }

  #kick(): void {
    if (this.#running || this.#closed) return;
    this.#drain().catch(() => undefined);
  }

  #pendingCount(): number {
    let n = 0;
    for (const m of [this.#forecasts, this.#others]) for (const e of m.values()) if (!e.inflight) n++;
    return n;
  }

  /** Single-flight: sends batches until the buffer is empty; on a failure arms the retry timer and rethrows. */
  #drain(): Promise<void> {
    if (this.#running) return this.#running;
    const run = (async () => {
      for (;;) {
        const batch = this.#takeBatch();
        if (batch.length === 0) return;
        try {
          await this.#o.sink.send(batch.map((e) => e.line));
        } catch (err) {
          for (const e of batch) e.inflight = false;
          if (err instanceof StoreError && err.code === 'WRITE_REJECTED') {
            // The server wrote what it could parse and refused the rest; sending again cannot help.
            const refused = (err as StoreError & { refusedPoints?: number }).refusedPoints ?? batch.length;
            this.#remove(batch);
            this.#stats.rejected += Math.min(refused, batch.length);
            this.#stats.written += batch.length - Math.min(refused, batch.length);
            this.#o.logger.error({ store: this.#o.store, err: err.toJSON(), points: batch.length, refused }, 'store refused points');
            // The server answered: not an outage, so the backoff starts over.
            this.#onSuccess();
            continue;
          }
          throw err;
        }
        this.#remove(batch);
        this.#stats.written += batch.length;
        this.#onSuccess();
      }
    })();
    this.#running = run;
    run.then(
      () => {
        this.#running = null;
        this.#schedule();
      },
      (err: unknown) => {
        this.#running = null;
        this.#onFailure(err);
      },
    );
    return run;
  }

  #onSuccess(): void {
    if (this.#failedAttempts > 0) {
      this.#o.logger.info({ store: this.#o.store, afterFailedAttempts: this.#failedAttempts, buffered: this.size }, 'store writes recovered');
    }
    this.#failedAttempts = 0;
    this.#o.backoff.reset();
    this.#stats.failing = false;
    this.#stats.lastError = null;
  }

  #onFailure(err: unknown): void {
    const e = err instanceof StoreError ? err : new StoreError('STORE_UNREACHABLE', String(err), { cause: err });
    this.#failedAttempts++;
    this.#stats.retries++;
    this.#stats.failing = true;
    this.#stats.lastError = { code: e.code, message: e.message };
    if (this.#closed) return;
    const suggested = e.retryAfterMs() ?? 0;
    const delayMs = Math.min(this.#o.maxRetryDelayMs, Math.max(suggested, this.#o.backoff.nextDelayMs(this.#failedAttempts)));
    this.#o.logger.warn(
      { store: this.#o.store, err: e.toJSON(), attempt: this.#failedAttempts, retryInMs: Math.round(delayMs), buffered: this.size },
      'store write failed; points kept for retry',
    );
    this.#clear('flush');
    this.#clear('retry');
    this.#retryTimer = this.#timer(() => {
      this.#retryTimer = null;
      this.#kick();
    }, delayMs);
  }

  /** Oldest first across both maps, at most batchSize points that are not already being sent. */
  #takeBatch(): Entry[] {
    const out: Entry[] = [];
    const a = this.#forecasts.values();
    const b = this.#others.values();
    const nextFree = (it: IterableIterator<Entry>): Entry | undefined => {
      for (let r = it.next(); !r.done; r = it.next()) if (!r.value.inflight) return r.value;
      return undefined;
    };
    let x = nextFree(a);
    let y = nextFree(b);
    while (out.length < this.#o.batchSize && (x || y)) {
      if (x && (!y || x.seq < y.seq)) {
        out.push(x);
        x = nextFree(a);
      } else if (y) {
        out.push(y);
        y = nextFree(b);
      }
    }
    for (const e of out) e.inflight = true;
    return out;
  }

  /** Removes sent entries unless the key was re-written meanwhile (then the newer point stays). */
  #remove(batch: Entry[]): void {
    for (const e of batch) {
      const map = e.kind === 'forecast' ? this.#forecasts : this.#others;
      if (map.get(e.key) === e) map.delete(e.key);
    }
  }

  /** Enforces the bound: oldest waiting forecasts first, then the oldest other points. */
  #trim(): void {
    let over = this.size - this.#o.capacity;
    if (over <= 0) return;
    let forecasts = 0;
    let others = 0;
    for (const [map, isForecast] of [
      [this.#forecasts, true],
      [this.#others, false],
    ] as const) {
      if (over <= 0) break;
      for (const [k, e] of map) {
        if (over <= 0) break;
        if (e.inflight) continue;
        map.delete(k);
        over--;
        if (isForecast) forecasts++;
        else others++;
      }
    }
    const n = forecasts + others;
    if (n === 0) return;
    this.#stats.dropped += n;
    this.#stats.droppedForecast += forecasts;
    this.#droppedSinceLog += n;
    this.#logDrops(false);
  }

  #logDrops(force: boolean): void {
    if (this.#droppedSinceLog === 0) return;
    const now = this.#o.now();
    const due = now - this.#lastDropLogAt >= this.#o.dropLogIntervalMs;
    if (!force && !due) {
      if (this.#dropLogTimer === null && !this.#closed) {
        this.#dropLogTimer = this.#timer(() => {
          this.#dropLogTimer = null;
          this.#logDrops(true);
        }, this.#o.dropLogIntervalMs - (now - this.#lastDropLogAt));
      }
      return;
    }
    this.#o.logger.warn(
      {
        store: this.#o.store,
        dropped: this.#droppedSinceLog,
        droppedTotal: this.#stats.dropped,
        droppedForecastTotal: this.#stats.droppedForecast,
        capacity: this.#o.capacity,
        buffered: this.size,
        lastError: this.#stats.lastError,
      },
      'write buffer full: oldest points dropped',
    );
    this.#droppedSinceLog = 0;
    this.#lastDropLogAt = now;
  }
}
