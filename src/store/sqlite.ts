/**
 * Opening a SQLite file the way both local stores want it: WAL journal (readers never block the
 * writer; a crash mid-transaction rolls back on the next open), synchronous=NORMAL (durable at
 * each checkpoint, fast commits), a busy timeout so a CLI import can run beside the daemon.
 */
import Database from 'better-sqlite3';
import { mkdirSync } from 'node:fs';
import { dirname } from 'node:path';
import { StoreError } from './influx/errors.ts';

export type Db = Database.Database;

export interface OpenOptions {
  /** Wait this long for a lock held by another process before SQLITE_BUSY (ms). */
  busyTimeoutMs?: number;
  readonly?: boolean;
}

export function openSqlite(path: string, opts: OpenOptions = {}): Db {
  let db: Db;
  try {
    if (path !== ':memory:' && !opts.readonly) mkdirSync(dirname(path), { recursive: true });
    db = new Database(path, { readonly: opts.readonly ?? false, fileMustExist: opts.readonly ?? false });
  } catch (e) {
    throw new StoreError('STORE_UNREACHABLE', `cannot open SQLite file ${path}: ${(e as Error).message}`, {
      at: path,
      hint: 'check that the directory exists and is writable by the radcast user',
      cause: e,
    });
  }
  db.pragma(`busy_timeout = ${Math.max(0, Math.round(opts.busyTimeoutMs ?? 5_000))}`);
  if (!opts.readonly) {
    db.pragma('journal_mode = WAL');
    db.pragma('synchronous = NORMAL');
  }
  db.pragma('foreign_keys = ON');
  return db;
}

/** Reads and bumps a per-file schema version kept in `radcast_meta`, running `migrate` once per component. */
export function ensureSchema(db: Db, component: string, version: number, ddl: string): void {
  db.exec('CREATE TABLE IF NOT EXISTS radcast_meta (key TEXT PRIMARY KEY, value TEXT NOT NULL) WITHOUT ROWID');
  const key = `schema:${component}`;
  const row = db.prepare('SELECT value FROM radcast_meta WHERE key = ?').get(key) as { value: string } | undefined;
  const have = row ? Number(row.value) : 0;
  if (have > version) {
    throw new StoreError('STORE_PROTOCOL', `${component} schema version ${have} in the file is newer than this radcast (${version})`, {
      hint: 'upgrade radcast, or point the config at a new file',
    });
  }
  if (have === version) return;
  db.transaction(() => {
    db.exec(ddl);
    db.prepare('INSERT INTO radcast_meta (key, value) VALUES (?, ?) ON CONFLICT(key) DO UPDATE SET value = excluded.value').run(key, String(version));
  })();
}

/** SQLite stores NaN as NULL; map NULL back to NaN for numeric columns. */
export const num = (v: number | null | undefined): number => (v === null || v === undefined ? NaN : v);
/** Non-finite numbers go in as NULL (SQLite has no NaN). */
export const dbNum = (v: number): number | null => (Number.isFinite(v) ? v : null);
