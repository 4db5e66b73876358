/**
 * The durable side of the write buffer: where points the server has not confirmed yet are kept
 * so that a shutdown, a crash or a restart during a store outage loses none of them. The Outbox
 * talks to this interface only; the SQLite implementation (a table in radcast's state file) is
 * src/store/spool.ts, so the adapter itself never opens a file.
 *
 * The spool is a log: points are appended and leave only when the server confirmed them. `seq`
 * orders them by age, also across restarts (new points continue after maxSeq()), and is what
 * identifies a spooled point. A point written again while an older version of it (same key:
 * measurement + tags + time) is spooled is appended too; both are sent, oldest first, so the
 * server, which keeps one point per key, ends with the newer one. (A log, not a table keyed by
 * point: appending touches the end of the file only, which keeps each write call's commit cheap
 * during an outage; see bench/cases/spool.ts.)
 */
import type { OutLine } from './schema.ts';

/** A point as the spool keeps it. */
export interface SpooledLine extends OutLine {
  /** Age order: a higher seq was written later. */
  seq: number;
}

export interface PointSpool {
  /** Points kept for this store target. */
  count(): number;
  /** Highest seq kept (0 when empty). */
  maxSeq(): number;
  /** Appends in one transaction (a seq already kept is skipped). Returns how many were added. */
  put(lines: readonly SpooledLine[]): number;
  /** The oldest points (lowest seq first), at most `limit`. */
  oldest(limit: number): SpooledLine[];
  /** Removes the points with these seqs, in one transaction. Returns how many went. */
  remove(lines: readonly Pick<SpooledLine, 'seq'>[]): number;
  /**
   * Enforces a bound: removes the `n` oldest points, forecasts first, other points only when no
   * forecast is left, never one listed in `keep` (the batch being sent).
   */
  dropOldest(n: number, keep: readonly Pick<SpooledLine, 'seq'>[]): { forecasts: number; others: number };
  /** Releases the file (the adapter calls it from its close()). */
  close(): void;
}
