/**
 * The write spool of the InfluxDB adapter as a table in radcast's state file (SQLite, WAL):
 *
 *   write_spool   seq (age order, rowid) -> target, key, kind, line, spooled_at
 *
 * Appended to, never updated: a rewritten point is a new row (see influx/spool.ts), so each
 * commit touches the end of the table and of its one index only.
 * `target` names the server and database / bucket the points are for, so points spooled for one
 * store are never sent to another after a config change (they stay, and the factory warns). The
 * table belongs to its own schema component ("spool"), so it is created by whichever of the two
 * connections to the file opens first; the StateStore's tables do not overlap with it.
 *
 * Every method is one transaction: a point is either spooled whole or not at all, also when the
 * process is killed in the middle. In WAL mode a commit is complete once its frames are in the
 * WAL file, so a killed process keeps every committed transaction and the next open ignores the
 * unfinished one (SQLite documentation, "Write-Ahead Logging", from memory); synchronous=NORMAL
 * risks only the last commits on a power cut, not on a process crash.
 */
import { StoreError } from './influx/errors.ts';
import type { PointSpool, SpooledLine } from './influx/spool.ts';
import type { LineKind } from './influx/schema.ts';
import { ensureSchema, openSqlite, type Db } from './sqlite.ts';

export const SPOOL_SCHEMA_VERSION = 1;

const DDL = `
CREATE TABLE IF NOT EXISTS write_spool (
  seq INTEGER PRIMARY KEY,
  target TEXT NOT NULL,
  key TEXT NOT NULL,
  kind TEXT NOT NULL,
  line TEXT NOT NULL,
  spooled_at INTEGER NOT NULL
);
CREATE INDEX IF NOT EXISTS write_spool_target ON write_spool (target, seq);
`;

export interface SqliteSpoolOptions {
  /** The SQLite file (radcast's state file, config state.path). */
  path: string;
  /** Which store the points are for (see spoolTarget()). */
  target: string;
  busyTimeoutMs?: number;
  now?: () => number;
}

/** A store target without credentials: adapter kind, URL without user info, database / bucket. */
export function spoolTarget(t: { api: 'v1' | 'v2'; url: string; database?: string; retentionPolicy?: string; org?: string; bucket?: string }): string {
  let url = t.url.replace(/\/+$/, '');
  try {
    const u = new URL(url);
    u.username = '';
    u.password = '';
    url = u.toString().replace(/\/+$/, '');
  } catch {
    /* not a URL: keep as given (the adapter rejects it on first use) */
  }
  return t.api === 'v1' ? `influxdb-v1 ${url} db=${t.database ?? ''} rp=${t.retentionPolicy ?? ''}` : `influxdb-v2 ${url} org=${t.org ?? ''} bucket=${t.bucket ?? ''}`;
}

export class SqliteSpool implements PointSpool {
  readonly path: string;
  readonly target: string;
  readonly #db: Db;
  readonly #now: () => number;
  readonly #s: ReturnType<SqliteSpool['prepare']>;
  #closed = false;

  constructor(opts: SqliteSpoolOptions) {
    this.path = opts.path;
    this.target = opts.target;
    this.#now = opts.now ?? Date.now;
    this.#db = openSqlite(opts.path, { busyTimeoutMs: opts.busyTimeoutMs });
    try {
      ensureSchema(this.#db, 'spool', SPOOL_SCHEMA_VERSION, DDL);
    } catch (e) {
      this.#db.close();
      throw e;
    }
    this.#s = this.prepare();
  }

  private prepare() {
    const db = this.#db;
    return {
      count: db.prepare<[string], { n: number }>('SELECT count(*) AS n FROM write_spool WHERE target = ?'),
      maxSeq: db.prepare<[], { m: number | null }>('SELECT max(seq) AS m FROM write_spool'),
      insert: db.prepare('INSERT INTO write_spool (seq, target, key, kind, line, spooled_at) VALUES (?, ?, ?, ?, ?, ?) ON CONFLICT (seq) DO NOTHING'),
      oldest: db.prepare<[string, number], { key: string; seq: number; kind: LineKind; line: string }>(
        'SELECT key, seq, kind, line FROM write_spool WHERE target = ? ORDER BY seq LIMIT ?',
      ),
      remove: db.prepare('DELETE FROM write_spool WHERE seq = ? AND target = ?'),
      oldestForecasts: db.prepare<[string, number], { seq: number }>("SELECT seq FROM write_spool WHERE target = ? AND kind = 'forecast' ORDER BY seq LIMIT ?"),
      oldestOthers: db.prepare<[string, number], { seq: number }>("SELECT seq FROM write_spool WHERE target = ? AND kind <> 'forecast' ORDER BY seq LIMIT ?"),
      targets: db.prepare<[], { target: string; n: number; oldest: number }>('SELECT target, count(*) AS n, min(spooled_at) AS oldest FROM write_spool GROUP BY target'),
    };
  }

  #open(): Db {
    if (this.#closed) throw new StoreError('STORE_CLOSED', `write spool ${this.path} is closed`, { at: this.path });
    return this.#db;
  }

  #tx<T>(fn: () => T): T {
    const db = this.#open();
    try {
      return db.transaction(fn).immediate();
    } catch (e) {
      throw spoolError(e, this.path);
    }
  }

  #read<T>(fn: () => T): T {
    this.#open();
    try {
      return fn();
    } catch (e) {
      throw spoolError(e, this.path);
    }
  }

  count(): number {
    return this.#read(() => this.#s.count.get(this.target)?.n ?? 0);
  }

  maxSeq(): number {
    return this.#read(() => this.#s.maxSeq.get()?.m ?? 0);
  }

  put(lines: readonly SpooledLine[]): number {
    if (lines.length === 0) return 0;
    const at = this.#now();
    return this.#tx(() => {
      let added = 0;
      for (const l of lines) added += this.#s.insert.run(l.seq, this.target, l.key, l.kind, l.line, at).changes;
      return added;
    });
  }

  oldest(limit: number): SpooledLine[] {
    return this.#read(() => this.#s.oldest.all(this.target, Math.max(0, Math.floor(limit))));
  }

  remove(lines: readonly Pick<SpooledLine, 'seq'>[]): number {
    if (lines.length === 0) return 0;
    return this.#tx(() => {
      let n = 0;
      for (const l of lines) n += this.#s.remove.run(l.seq, this.target).changes;
      return n;
    });
  }

  dropOldest(n: number, keep: readonly Pick<SpooledLine, 'seq'>[]): { forecasts: number; others: number } {
    if (!(n > 0)) return { forecasts: 0, others: 0 };
    const kept = new Set(keep.map((k) => k.seq));
    return this.#tx(() => {
      const out = { forecasts: 0, others: 0 };
      for (const [stmt, which] of [
        [this.#s.oldestForecasts, 'forecasts'],
        [this.#s.oldestOthers, 'others'],
      ] as const) {
        const left = n - out.forecasts - out.others;
        if (left <= 0) break;
        for (const r of stmt.all(this.target, left + kept.size)) {
          if (out.forecasts + out.others >= n) break;
          if (kept.has(r.seq)) continue;
          out[which] += this.#s.remove.run(r.seq, this.target).changes;
        }
      }
      return out;
    });
  }

  /** Points per target in the file, with the time the oldest was spooled (ms); for the start-up log. */
  targets(): { target: string; points: number; oldestSpooledAt: number }[] {
    return this.#read(() => this.#s.targets.all().map((r) => ({ target: r.target, points: r.n, oldestSpooledAt: r.oldest })));
  }

  close(): void {
    if (this.#closed) return;
    this.#closed = true;
    this.#db.close();
  }
}

function spoolError(e: unknown, path: string): StoreError {
  if (e instanceof StoreError) return e;
  const code = (e as { code?: string }).code;
  const busy = code === 'SQLITE_BUSY' || code === 'SQLITE_LOCKED';
  return new StoreError('SPOOL_FAILED', `write spool in ${path}: ${(e as Error).message ?? String(e)}`, {
    at: path,
    hint: busy ? 'another process holds the state file; is a second radcast daemon using the same state.path?' : 'check free disk space and that the state file is writable by the radcast user',
    cause: e,
  });
}
