/**
 * The adapter's write buffer: every point radcast writes waits here until the server confirmed
 * it. Failed sends stay buffered and are retried with capped, jittered backoff, so a store outage
 * loses nothing until a bound is hit. At a bound the oldest forecast points go first (a newer
 * forecast supersedes them anyway); scores and health points only when no forecast point is left.
 * Every drop is counted in stats() and logged (at most one warning per dropLogIntervalMs).
 *
 * Two places to wait:
 *  - memory (bound `capacity`): while the server takes every batch, points wait here only until
 *    the next send.
 *  - the durable spool (optional, bound `spoolCapacity`; a table in the state file): as soon as a
 *    send fails, when the memory bound is reached, and on close(), the waiting points move there in
 *    one transaction, and while the spool holds anything new points go straight to it (one
 *    transaction per write call). Sends then take the oldest spooled points first; a point leaves
 *    the spool only once the server confirmed it. Points left in the spool by an earlier run are
 *    sent when the next one starts, so a shutdown, a crash or a restart during an outage loses
 *    nothing; a point sent again after a crash overwrites itself in the server (same key).
 * Without a spool, the memory bound drops points and close() gives up after closeTimeoutMs.
 *
 * Points are keyed by measurement + tags + time: writing the same point again while it waits in
 * memory replaces it, just as the server would overwrite it. The spool is a log in age order
 * instead: a rewritten point is appended and both versions are sent, oldest first, so the server
 * ends with the newer one.
 */
import type { Backoff } from './backoff.ts';
import { StoreError } from './errors.ts';
import type { Logger } from './log.ts';
import type { LineKind, OutLine } from './schema.ts';
import type { PointSpool, SpooledLine } from './spool.ts';

/** Sends lines to the server; throws a StoreError when they were not (all) accepted. */
export interface LineSink {
  send(lines: string[]): Promise<void>;
}

export interface OutboxStats {
  /** Points waiting, in memory and in the spool (including the batch being sent). */
  buffered: number;
  /** Of `buffered`: points in the durable spool. */
  spooled: number;
  /** Points moved into the spool by this process (a point moved twice counts twice). */
  spooledTotal: number;
  /** Points an earlier run left in the spool that the server has confirmed since this one started. */
  replayed: number;
  /** Spool reads or writes that failed (the points stayed in memory, or stayed spooled). */
  spoolFailures: number;
  /** Failed write attempts that were (or will be) retried. */
  retries: number;
  /** Points dropped because a bound was hit, or still unsent when close() gave up without a spool. */
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
  /** Bound of points waiting in memory; beyond it they move to the spool, or (without one) the oldest are dropped. */
  capacity: number;
  /** Durable place for unconfirmed points; absent = memory only. The Outbox never closes it. */
  spool?: PointSpool;
  /** Bound of points in the spool; beyond it the oldest forecasts are dropped first. */
  spoolCapacity?: number;
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
  /** A copy of a spooled point (taken for a send); memory entries are false. */
  spooled: boolean;
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
  readonly #spool: PointSpool | null;
  readonly #spoolCapacity: number;
  /** Points of this target in the spool (kept in step with every spool call). */
  #spoolSize = 0;
  /** The spooled points being sent now (protected from the bound). */
  #spoolBatch: Entry[] | null = null;
  /** Points with seq <= this were spooled by an earlier run. */
  #replayUpTo = 0;
  #lastSpoolLogAt = -Infinity;
  /** During close(): the drain stops taking batches at this time. */
  #stopAt: number | null = null;
  readonly #stats: OutboxStats = {
    buffered: 0,
    spooled: 0,
    spooledTotal: 0,
    replayed: 0,
    spoolFailures: 0,
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
    this.#spool = opts.spool ?? null;
    this.#spoolCapacity = opts.spoolCapacity ?? Number.POSITIVE_INFINITY;
    if (this.#spool) {
      const spool = this.#spool;
      const found = this.#spoolTry('open', () => ({ points: spool.count(), seq: spool.maxSeq() }));
      if (found) {
        this.#spoolSize = found.points;
        // New points continue the age order of the spooled ones.
        this.#seq = found.seq;
        this.#replayUpTo = found.seq;
        if (found.points > 0) {
          this.#o.logger.info({ store: this.#o.store, spooled: found.points }, 'points an earlier run could not write were found in the spool; sending them');
          this.#flushTimer = this.#timer(() => {
            this.#flushTimer = null;
            this.#kick();
          }, 0);
        }
      }
    }
  }

  /** Points waiting, in memory and in the spool. */
  get size(): number {
    return this.#memSize() + this.#spoolSize;
  }

  stats(): OutboxStats {
    return { ...this.#stats, buffered: this.size, spooled: this.#spoolSize, lastError: this.#stats.lastError && { ...this.#stats.lastError } };
  }

  #memSize(): number {
    return this.#forecasts.size + this.#others.size;
  }

  /** Buffers the lines and makes sure a send is scheduled. Throws STORE_CLOSED after close(). */
  add(lines: OutLine[]): void {
    if (this.#closed) {
      throw new StoreError('STORE_CLOSED', `${this.#o.store} store is closed; ${lines.length} point(s) not accepted`, {
        hint: 'a bug in the caller: writes after close()',
      });
    }
    if (lines.length === 0) return;
    if (this.#spool && (this.#spoolSize > 0 || this.#stats.failing) && this.#addToSpool(lines)) {
      this.#schedule();
      return;
    }
    for (const l of lines) {
      const map = l.kind === 'forecast' ? this.#forecasts : this.#others;
      map.delete(l.key);
      map.set(l.key, { key: l.key, line: l.line, kind: l.kind, seq: ++this.#seq, inflight: false, spooled: false });
    }
    if (this.#memSize() > this.#o.capacity && !this.#spill()) this.#trim();
    this.#schedule();
  }

  /** While the server fails or the spool holds a backlog, new points go straight to the spool. False when the spool failed. */
  #addToSpool(lines: OutLine[]): boolean {
    const spool = this.#spool!;
    const rows: SpooledLine[] = lines.map((l) => ({ kind: l.kind, key: l.key, line: l.line, seq: ++this.#seq }));
    const added = this.#spoolTry('put', () => spool.put(rows));
    if (added === undefined) return false;
    this.#spoolSize += added;
    this.#stats.spooledTotal += rows.length;
    for (const l of lines) {
      // A waiting memory version of the key is older now and must not be sent after the spooled one.
      const map = l.kind === 'forecast' ? this.#forecasts : this.#others;
      const e = map.get(l.key);
      if (e && !e.inflight) map.delete(l.key);
    }
    this.#trimSpool();
    return true;
  }

  /**
   * Moves every point waiting in memory into the spool, in one transaction. True when no point is
   * left waiting in memory (also when there was none); false without a spool or when it failed.
   */
  #spill(): boolean {
    const spool = this.#spool;
    if (!spool) return false;
    const rows: Entry[] = [];
    for (const m of [this.#forecasts, this.#others]) for (const e of m.values()) if (!e.inflight) rows.push(e);
    if (rows.length === 0) return true;
    const added = this.#spoolTry('put', () => spool.put(rows.map((e) => ({ kind: e.kind, key: e.key, line: e.line, seq: e.seq }))));
    if (added === undefined) return false;
    for (const e of rows) (e.kind === 'forecast' ? this.#forecasts : this.#others).delete(e.key);
    this.#spoolSize += added;
    this.#stats.spooledTotal += rows.length;
    this.#o.logger.info({ store: this.#o.store, points: rows.length, spooled: this.#spoolSize }, 'unconfirmed points moved to the spool');
    this.#trimSpool();
    return true;
  }

  /** Runs a spool call; a failure is counted and logged (at most once per dropLogIntervalMs) and gives undefined. */
  #spoolTry<T>(op: string, fn: () => T): T | undefined {
    try {
      return fn();
    } catch (err) {
      this.#stats.spoolFailures++;
      const e = err instanceof StoreError ? err : new StoreError('SPOOL_FAILED', String(err), { cause: err });
      const now = this.#o.now();
      if (now - this.#lastSpoolLogAt >= this.#o.dropLogIntervalMs) {
        this.#lastSpoolLogAt = now;
        this.#o.logger.error(
          { store: this.#o.store, err: e.toJSON(), op, spoolFailures: this.#stats.spoolFailures, inMemory: this.#memSize() },
          'write spool failed; points are kept in memory (bounded) meanwhile',
        );
      }
      return undefined;
    }
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
   * Stops accepting points and sends what waits, for at most closeTimeoutMs. With a spool: as long
   * as the server takes the batches; at the first failed send (no backoff waits) or at the
   * deadline the rest stays in the spool for the next run. Without one: waiting out backoff delays
   * within that time; points still unsent then are counted as dropped and logged.
   */
  async close(): Promise<void> {
    if (this.#closed) return;
    this.#closed = true;
    this.#clear('flush');
    this.#clear('retry');
    const deadline = this.#o.now() + this.#o.closeTimeoutMs;
    if (this.#running) await this.#running.catch(() => undefined);
    if (this.#spool) {
      this.#stopAt = deadline;
      while (this.size > 0 && this.#o.now() < deadline) {
        const before = this.size;
        try {
          await this.#drain();
        } catch {
          break;
        }
        if (this.size >= before) break;
      }
      this.#stopAt = null;
      this.#clear('retry');
      if (this.#spill()) {
        if (this.#spoolSize > 0) {
          this.#o.logger.warn(
            { store: this.#o.store, spooled: this.#spoolSize, lastError: this.#stats.lastError },
            `${this.#spoolSize} point(s) not confirmed before close are kept in the spool; the next start sends them`,
          );
        }
        this.#logDrops(true);
        this.#clear('dropLog');
        return;
      }
      // The spool cannot take them: what waits in memory is lost below, counted and logged.
    }
    while (!this.#spool && this.#memSize() > 0) {
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
    const left = this.#memSize();
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
    let n = this.#spoolBatch ? 0 : this.#spoolSize;
    for (const m of [this.#forecasts, this.#others]) for (const e of m.values()) if (!e.inflight) n++;
    return n;
  }

  /** Single-flight: sends batches until the buffer is empty; on a failure arms the retry timer and rethrows. */
  #drain(): Promise<void> {
    if (this.#running) return this.#running;
    const run = (async () => {
      for (;;) {
        if (this.#stopAt !== null && this.#o.now() >= this.#stopAt) return;
        const batch = this.#takeBatch();
        if (batch.length === 0) return;
        try {
          await this.#o.sink.send(batch.map((e) => e.line));
        } catch (err) {
          for (const e of batch) e.inflight = false;
          if (err instanceof StoreError && err.code === 'WRITE_REJECTED') {
            // The server wrote what it could parse and refused the rest; sending again cannot help.
            const refused = (err as StoreError & { refusedPoints?: number }).refusedPoints ?? batch.length;
            this.#stats.rejected += Math.min(refused, batch.length);
            this.#stats.written += batch.length - Math.min(refused, batch.length);
            this.#o.logger.error({ store: this.#o.store, err: err.toJSON(), points: batch.length, refused }, 'store refused points');
            this.#remove(batch);
            // The server answered: not an outage, so the backoff starts over.
            this.#onSuccess();
            continue;
          }
          this.#spoolBatch = null;
          throw err;
        }
        this.#stats.written += batch.length;
        this.#remove(batch);
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
    // An outage may outlast the process: what waits goes where a restart finds it.
    this.#spill();
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

  /**
   * The oldest spooled points while the spool holds any (they are older than anything in memory),
   * else the oldest in memory across both maps: at most batchSize points not already being sent.
   */
  #takeBatch(): Entry[] {
    const spool = this.#spool;
    if (spool && this.#spoolSize > 0) {
      const rows = this.#spoolTry('read', () => spool.oldest(this.#o.batchSize));
      if (rows && rows.length > 0) {
        this.#spoolBatch = rows.map((r) => ({ key: r.key, line: r.line, kind: r.kind, seq: r.seq, inflight: true, spooled: true }));
        return this.#spoolBatch;
      }
      // Nothing there after all (the count was off, e.g. another process sent them): go on with memory.
      if (rows) this.#spoolSize = 0;
      else if (this.#pendingCount() - this.#spoolSize === 0) {
        // Unreadable and nothing in memory: back off like a failed send instead of spinning.
        throw new StoreError('SPOOL_FAILED', `the write spool cannot be read; ${this.#spoolSize} point(s) wait in it`, {
          hint: 'check that the state file is readable and not locked by another process',
        });
      }
    }
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

  /**
   * Removes confirmed entries unless the key was re-written meanwhile (then the newer point stays).
   * Throws SPOOL_FAILED when spooled ones cannot be removed: the drain then backs off instead of
   * sending them again at once (a resend is harmless, the server overwrites them).
   */
  #remove(batch: Entry[]): void {
    const spooled: Entry[] = [];
    for (const e of batch) {
      if (e.spooled) {
        spooled.push(e);
        continue;
      }
      const map = e.kind === 'forecast' ? this.#forecasts : this.#others;
      if (map.get(e.key) === e) map.delete(e.key);
    }
    if (spooled.length === 0) return;
    this.#spoolBatch = null;
    const spool = this.#spool!;
    const removed = this.#spoolTry('remove', () => spool.remove(spooled));
    if (removed === undefined) {
      throw new StoreError('SPOOL_FAILED', `${spooled.length} confirmed point(s) could not be removed from the write spool`, {
        hint: 'check free disk space and that the state file is writable; the points are sent again (the server overwrites them)',
      });
    }
    this.#spoolSize = Math.max(0, this.#spoolSize - removed);
    for (const e of spooled) if (e.seq <= this.#replayUpTo) this.#stats.replayed++;
  }

  /** Enforces the spool bound: the oldest spooled forecasts first, never the batch being sent. */
  #trimSpool(): void {
    const spool = this.#spool;
    const over = this.#spoolSize - this.#spoolCapacity;
    if (!spool || over <= 0) return;
    const d = this.#spoolTry('trim', () => spool.dropOldest(over, this.#spoolBatch ?? []));
    if (!d) return;
    this.#spoolSize -= d.forecasts + d.others;
    this.#countDrops(d.forecasts, d.others);
  }

  #countDrops(forecasts: number, others: number): void {
    const n = forecasts + others;
    if (n === 0) return;
    this.#stats.dropped += n;
    this.#stats.droppedForecast += forecasts;
    this.#droppedSinceLog += n;
    this.#logDrops(false);
  }

  /** Enforces the memory bound (without a spool): oldest waiting forecasts first, then the oldest other points. */
  #trim(): void {
    let over = this.#memSize() - this.#o.capacity;
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
    this.#countDrops(forecasts, others);
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
        ...(this.#spool ? { spoolCapacity: this.#spoolCapacity, spooled: this.#spoolSize } : {}),
        buffered: this.size,
        lastError: this.#stats.lastError,
      },
      'write buffer full: oldest points dropped',
    );
    this.#droppedSinceLog = 0;
    this.#lastDropLogAt = now;
  }
}
