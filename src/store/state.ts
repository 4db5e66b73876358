/**
 * radcast's own state, always a local SQLite file (it may be the embedded store's file; the
 * table names do not overlap):
 *   models           series -> model (warm start): JSON text, or packed bytes (a BLOB; the
 *                    daemon's forecaster, see encodeFittedForecaster), fitted_at
 *   ledger           (series, issued_at, lead) -> target t, value, bands: forecasts issued and
 *                    not yet scored; scoring takes the matured ones and removes them
 *   residuals        (series, lead, t) -> actual - forecast, for the quantile bands
 *   drift_state      series -> detector state JSON
 *   outbox           pending webhook notifications, kept until delivered
 *   cycles           series -> last attempt / success / error code; '*' = whole cycle
 *   kv               small JSON values for other components (backtest baselines, ...), or
 *                    bytes (BLOB; the daemon's residual pools)
 * The InfluxDB adapter's write spool (table write_spool, src/store/spool.ts) lives in the same file
 * under its own schema component and connection.
 * All methods are synchronous (better-sqlite3) and each one is a single transaction of prepared
 * statements; `transaction(fn)` groups several calls into one commit (nested calls become
 * savepoints), which is how a whole cycle of 1000 series is written at once.
 */
import type { RbfModel } from '../model/types.ts';
import type { ForecastBatch } from './types.ts';
import { StoreError } from './influx/errors.ts';
import { ensureSchema, openSqlite, type Db } from './sqlite.ts';

export const STATE_SCHEMA_VERSION = 1;

const DDL = `
CREATE TABLE IF NOT EXISTS models (
  series TEXT PRIMARY KEY,
  model TEXT NOT NULL,
  fitted_at INTEGER NOT NULL
) WITHOUT ROWID;
CREATE TABLE IF NOT EXISTS ledger (
  series TEXT NOT NULL,
  issued_at INTEGER NOT NULL,
  lead INTEGER NOT NULL,
  t INTEGER NOT NULL,
  value REAL NOT NULL,
  bands TEXT NOT NULL,
  PRIMARY KEY (series, issued_at, lead)
) WITHOUT ROWID;
CREATE INDEX IF NOT EXISTS ledger_by_target ON ledger (series, t);
CREATE TABLE IF NOT EXISTS residuals (
  series TEXT NOT NULL,
  lead INTEGER NOT NULL,
  t INTEGER NOT NULL,
  residual REAL NOT NULL,
  PRIMARY KEY (series, lead, t)
) WITHOUT ROWID;
CREATE TABLE IF NOT EXISTS drift_state (
  series TEXT PRIMARY KEY,
  state TEXT NOT NULL,
  updated_at INTEGER NOT NULL
) WITHOUT ROWID;
CREATE TABLE IF NOT EXISTS outbox (
  id INTEGER PRIMARY KEY AUTOINCREMENT,
  series TEXT NOT NULL,
  kind TEXT NOT NULL,
  payload TEXT NOT NULL,
  created_at INTEGER NOT NULL,
  attempts INTEGER NOT NULL DEFAULT 0,
  next_attempt_at INTEGER NOT NULL,
  last_error TEXT
);
CREATE INDEX IF NOT EXISTS outbox_due ON outbox (next_attempt_at);
CREATE TABLE IF NOT EXISTS cycles (
  series TEXT PRIMARY KEY,
  last_attempt_at INTEGER,
  last_success_at INTEGER,
  last_error_code TEXT
) WITHOUT ROWID;
CREATE TABLE IF NOT EXISTS kv (
  key TEXT PRIMARY KEY,
  value TEXT NOT NULL,
  updated_at INTEGER NOT NULL
) WITHOUT ROWID;
`;

/** One issued forecast step waiting for its actual. */
export interface LedgerEntry {
  series: string;
  issuedAt: number;
  lead: number;
  t: number;
  value: number;
  bands: Record<string, number>;
}

export interface ResidualRow {
  lead: number;
  /** Target time of the forecast step (epoch ms). */
  t: number;
  /** actual - forecast. */
  residual: number;
}

export interface OutboxEntry<P = unknown> {
  id: number;
  series: string;
  kind: string;
  payload: P;
  createdAt: number;
  attempts: number;
  nextAttemptAt: number;
  lastError: string | null;
}

export interface CycleRecord {
  series: string;
  lastAttemptAt: number | null;
  lastSuccessAt: number | null;
  lastErrorCode: string | null;
}

export interface StateStoreOptions {
  path: string;
  busyTimeoutMs?: number;
}

/** Key of the whole-cycle row in `cycles`. */
export const ALL_SERIES = '*';

export class StateStore {
  readonly path: string;
  readonly #db: Db;
  #closed = false;
  readonly #s: ReturnType<StateStore['prepare']>;

  constructor(opts: StateStoreOptions) {
    this.path = opts.path;
    this.#db = openSqlite(opts.path, { busyTimeoutMs: opts.busyTimeoutMs });
    ensureSchema(this.#db, 'state', STATE_SCHEMA_VERSION, DDL);
    this.#s = this.prepare();
  }

  private prepare() {
    const db = this.#db;
    return {
      putModel: db.prepare('INSERT INTO models (series, model, fitted_at) VALUES (?, ?, ?) ON CONFLICT (series) DO UPDATE SET model = excluded.model, fitted_at = excluded.fitted_at'),
      getModel: db.prepare<[string], { model: string | Buffer; fitted_at: number }>('SELECT model, fitted_at FROM models WHERE series = ?'),
      delModel: db.prepare('DELETE FROM models WHERE series = ?'),
      putLedger: db.prepare(
        'INSERT INTO ledger (series, issued_at, lead, t, value, bands) VALUES (?, ?, ?, ?, ?, ?) ON CONFLICT (series, issued_at, lead) DO UPDATE SET t = excluded.t, value = excluded.value, bands = excluded.bands',
      ),
      matured: db.prepare<[string, number], { issued_at: number; lead: number; t: number; value: number; bands: string }>(
        'SELECT issued_at, lead, t, value, bands FROM ledger WHERE series = ? AND t <= ? ORDER BY t, lead',
      ),
      delLedgerEntry: db.prepare('DELETE FROM ledger WHERE series = ? AND issued_at = ? AND lead = ?'),
      pruneLedger: db.prepare('DELETE FROM ledger WHERE series = ? AND t < ?'),
      countLedger: db.prepare<[string], { n: number }>('SELECT count(*) AS n FROM ledger WHERE series = ?'),
      putResidual: db.prepare('INSERT INTO residuals (series, lead, t, residual) VALUES (?, ?, ?, ?) ON CONFLICT (series, lead, t) DO UPDATE SET residual = excluded.residual'),
      residualsAll: db.prepare<[string], { lead: number; t: number; residual: number }>('SELECT lead, t, residual FROM residuals WHERE series = ? ORDER BY lead, t'),
      residualsLead: db.prepare<[string, number, number], { t: number; residual: number }>(
        'SELECT t, residual FROM (SELECT t, residual FROM residuals WHERE series = ? AND lead = ? ORDER BY t DESC LIMIT ?) ORDER BY t',
      ),
      trimResiduals: db.prepare(
        `DELETE FROM residuals WHERE series = @series AND lead = @lead AND t < COALESCE(
           (SELECT t FROM residuals WHERE series = @series AND lead = @lead ORDER BY t DESC LIMIT 1 OFFSET @keep - 1), -9223372036854775807)`,
      ),
      residualLeads: db.prepare<[string], { lead: number }>('SELECT DISTINCT lead FROM residuals WHERE series = ?'),
      clearResiduals: db.prepare('DELETE FROM residuals WHERE series = ?'),
      putDrift: db.prepare('INSERT INTO drift_state (series, state, updated_at) VALUES (?, ?, ?) ON CONFLICT (series) DO UPDATE SET state = excluded.state, updated_at = excluded.updated_at'),
      getDrift: db.prepare<[string], { state: string; updated_at: number }>('SELECT state, updated_at FROM drift_state WHERE series = ?'),
      enqueue: db.prepare('INSERT INTO outbox (series, kind, payload, created_at, attempts, next_attempt_at) VALUES (?, ?, ?, ?, 0, ?)'),
      due: db.prepare('SELECT id, series, kind, payload, created_at, attempts, next_attempt_at, last_error FROM outbox WHERE next_attempt_at <= ? ORDER BY id LIMIT ?'),
      pending: db.prepare('SELECT id, series, kind, payload, created_at, attempts, next_attempt_at, last_error FROM outbox ORDER BY id'),
      delivered: db.prepare('DELETE FROM outbox WHERE id = ?'),
      failed: db.prepare('UPDATE outbox SET attempts = attempts + 1, next_attempt_at = ?, last_error = ? WHERE id = ?'),
      outboxCount: db.prepare<[], { n: number }>('SELECT count(*) AS n FROM outbox'),
      attempt: db.prepare(
        'INSERT INTO cycles (series, last_attempt_at) VALUES (?, ?) ON CONFLICT (series) DO UPDATE SET last_attempt_at = excluded.last_attempt_at',
      ),
      success: db.prepare(
        'INSERT INTO cycles (series, last_attempt_at, last_success_at, last_error_code) VALUES (@series, @at, @at, NULL) ON CONFLICT (series) DO UPDATE SET last_attempt_at = @at, last_success_at = @at, last_error_code = NULL',
      ),
      failure: db.prepare(
        'INSERT INTO cycles (series, last_attempt_at, last_error_code) VALUES (@series, @at, @code) ON CONFLICT (series) DO UPDATE SET last_attempt_at = @at, last_error_code = @code',
      ),
      getCycle: db.prepare<[string], { series: string; last_attempt_at: number | null; last_success_at: number | null; last_error_code: string | null }>(
        'SELECT series, last_attempt_at, last_success_at, last_error_code FROM cycles WHERE series = ?',
      ),
      putKv: db.prepare('INSERT INTO kv (key, value, updated_at) VALUES (?, ?, ?) ON CONFLICT (key) DO UPDATE SET value = excluded.value, updated_at = excluded.updated_at'),
      getKv: db.prepare<[string], { value: string | Buffer }>('SELECT value FROM kv WHERE key = ?'),
      getKvTime: db.prepare<[string], number>('SELECT updated_at FROM kv WHERE key = ?').pluck(),
      delKv: db.prepare('DELETE FROM kv WHERE key = ?'),
    };
  }

  #open(): Db {
    if (this.#closed) throw new StoreError('STORE_CLOSED', `state store ${this.path} is closed`, { hint: 'open a new state store' });
    return this.#db;
  }

  #tx<T>(fn: () => T): T {
    const db = this.#open();
    try {
      return db.transaction(fn).immediate();
    } catch (e) {
      if (e instanceof StoreError) throw e;
      const code = (e as { code?: string }).code;
      if (code === 'SQLITE_BUSY' || code === 'SQLITE_LOCKED') {
        throw new StoreError('STORE_BUSY', `state store ${this.path} is locked by another writer`, { hint: 'is a second radcast daemon using the same state file?', cause: e });
      }
      throw e;
    }
  }

  /** Groups calls into one commit; throws roll everything back. */
  transaction<T>(fn: () => T): T {
    return this.#tx(fn);
  }

  // ---- models (warm start) ----
  /**
   * Any JSON-able model, kept as JSON text; or bytes (a Uint8Array, e.g. the daemon's packed
   * forecaster), kept as they are in a BLOB. The column's declared type is TEXT (older files);
   * SQLite keeps BLOBs as BLOBs in it.
   */
  saveModel(series: string, model: RbfModel | object | Uint8Array, fittedAt: number): void {
    const value = storedValue(model);
    this.#tx(() => this.#s.putModel.run(series, value, fittedAt));
  }
  /** Many models in one commit. */
  saveModels(rows: { series: string; model: RbfModel | object | Uint8Array; fittedAt: number }[]): void {
    const encoded = rows.map((r) => [r.series, storedValue(r.model), r.fittedAt] as const);
    this.#tx(() => {
      for (const r of encoded) this.#s.putModel.run(...r);
    });
  }
  /**
   * The model as stored: JSON text, or the bytes given to saveModel. No parsing (the daemon
   * hands the stored form to the fit worker, which decodes it there).
   */
  loadModelStored(series: string): { stored: string | Uint8Array; fittedAt: number } | null {
    this.#open();
    const r = this.#s.getModel.get(series);
    return r ? { stored: r.model, fittedAt: r.fitted_at } : null;
  }
  /**
   * The model parsed: JSON text with JSON.parse; a model stored as bytes with `decodeBytes`
   * (e.g. decodeFittedForecaster). Bytes without a decoder throw STORE_PROTOCOL.
   */
  loadModel<M = RbfModel>(series: string, decodeBytes?: (bytes: Uint8Array) => M): { model: M; fittedAt: number } | null {
    const r = this.loadModelStored(series);
    if (!r) return null;
    if (typeof r.stored === 'string') return { model: JSON.parse(r.stored) as M, fittedAt: r.fittedAt };
    if (!decodeBytes) {
      throw new StoreError('STORE_PROTOCOL', `the model of ${series} in ${this.path} is stored as ${r.stored.length} bytes, not JSON`, {
        series,
        hint: 'read it with loadModel(series, decodeFittedForecaster) or loadModelStored',
      });
    }
    return { model: decodeBytes(r.stored), fittedAt: r.fittedAt };
  }
  deleteModel(series: string): void {
    this.#tx(() => this.#s.delModel.run(series));
  }

  // ---- issued-forecast ledger ----
  /**
   * Records every step of the batches as issued (idempotent per series + issue time + lead) and
   * keeps each batch as the series' latest issued forecast (latestIssued), unless a newer one is there.
   */
  recordIssued(batches: ForecastBatch[]): void {
    this.#tx(() => {
      for (const b of batches) {
        for (const p of b.points) this.#s.putLedger.run(b.series, b.issuedAt, p.lead, p.t, p.value, JSON.stringify(p.bands));
        // The row's updated_at is the kept batch's issue time (only this method writes latest: rows).
        const key = `latest:${b.series}`;
        const prevAt = this.#s.getKvTime.get(key);
        if (prevAt === undefined || prevAt <= b.issuedAt) this.#s.putKv.run(key, JSON.stringify(b), b.issuedAt);
      }
    });
  }
  /** The newest forecast batch recorded for the series (survives scoring and restarts). */
  latestIssued(series: string): ForecastBatch | null {
    return this.getJson<ForecastBatch>(`latest:${series}`) ?? null;
  }
  /** Ledger entries of the series whose target time is <= upToMs (matured), oldest target first. */
  matured(series: string, upToMs: number): LedgerEntry[] {
    this.#open();
    return this.#s.matured.all(series, upToMs).map((r) => ({ series, issuedAt: r.issued_at, lead: r.lead, t: r.t, value: r.value, bands: JSON.parse(r.bands) as Record<string, number> }));
  }
  /** Removes scored entries. */
  removeIssued(entries: readonly Pick<LedgerEntry, 'series' | 'issuedAt' | 'lead'>[]): void {
    this.#tx(() => {
      for (const e of entries) this.#s.delLedgerEntry.run(e.series, e.issuedAt, e.lead);
    });
  }
  /** Drops entries whose target is older than beforeMs (their actual will never come). Returns the count. */
  pruneIssued(series: string, beforeMs: number): number {
    return this.#tx(() => this.#s.pruneLedger.run(series, beforeMs).changes);
  }
  issuedCount(series: string): number {
    this.#open();
    return this.#s.countLedger.get(series)?.n ?? 0;
  }

  // ---- residuals per lead ----
  /** Upserts residuals; with keepPerLead, only the newest that many per lead are kept. */
  addResiduals(series: string, rows: readonly ResidualRow[], keepPerLead?: number): void {
    this.#tx(() => {
      for (const r of rows) {
        if (!Number.isFinite(r.residual)) continue;
        this.#s.putResidual.run(series, r.lead, r.t, r.residual);
      }
      if (keepPerLead !== undefined && keepPerLead > 0) {
        // Only leads that just grew can exceed the bound.
        for (const lead of new Set(rows.map((r) => r.lead))) this.#s.trimResiduals.run({ series, lead, keep: keepPerLead });
      }
    });
  }
  /** Residuals grouped by lead (oldest first); `limitPerLead` = newest that many. */
  residuals(series: string, limitPerLead?: number): Map<number, ResidualRow[]> {
    this.#open();
    const out = new Map<number, ResidualRow[]>();
    if (limitPerLead === undefined) {
      for (const r of this.#s.residualsAll.all(series)) {
        let list = out.get(r.lead);
        if (!list) out.set(r.lead, (list = []));
        list.push({ lead: r.lead, t: r.t, residual: r.residual });
      }
      return out;
    }
    for (const { lead } of this.#s.residualLeads.all(series).sort((a, b) => a.lead - b.lead)) {
      out.set(lead, this.#s.residualsLead.all(series, lead, limitPerLead).map((r) => ({ lead, t: r.t, residual: r.residual })));
    }
    return out;
  }
  clearResiduals(series: string): void {
    this.#tx(() => this.#s.clearResiduals.run(series));
  }

  // ---- drift detector state ----
  saveDriftState(series: string, state: unknown, updatedAt: number): void {
    const json = JSON.stringify(state);
    this.#tx(() => this.#s.putDrift.run(series, json, updatedAt));
  }
  loadDriftState<T = unknown>(series: string): { state: T; updatedAt: number } | null {
    this.#open();
    const r = this.#s.getDrift.get(series);
    return r ? { state: JSON.parse(r.state) as T, updatedAt: r.updated_at } : null;
  }

  // ---- webhook outbox ----
  /** Queues a notification; returns its id. It stays until markDelivered. */
  enqueue(series: string, kind: string, payload: unknown, nowMs: number): number {
    const json = JSON.stringify(payload);
    return this.#tx(() => Number(this.#s.enqueue.run(series, kind, json, nowMs, nowMs).lastInsertRowid));
  }
  /** Entries whose next attempt is due, oldest first. */
  dueNotifications<P = unknown>(nowMs: number, limit = 100): OutboxEntry<P>[] {
    this.#open();
    return (this.#s.due.all(nowMs, limit) as OutboxRow[]).map(outboxEntry<P>);
  }
  pendingNotifications<P = unknown>(): OutboxEntry<P>[] {
    this.#open();
    return (this.#s.pending.all() as OutboxRow[]).map(outboxEntry<P>);
  }
  markDelivered(id: number): void {
    this.#tx(() => this.#s.delivered.run(id));
  }
  /** Records a failed attempt; the entry becomes due again at nextAttemptAt. */
  markFailed(id: number, error: string, nextAttemptAt: number): void {
    this.#tx(() => this.#s.failed.run(nextAttemptAt, error.slice(0, 500), id));
  }
  outboxSize(): number {
    this.#open();
    return this.#s.outboxCount.get()?.n ?? 0;
  }

  // ---- cycle bookkeeping ----
  recordAttempt(series: string, atMs: number): void {
    this.#tx(() => this.#s.attempt.run(series, atMs));
  }
  recordSuccess(series: string, atMs: number): void {
    this.#tx(() => this.#s.success.run({ series, at: atMs }));
  }
  recordFailure(series: string, atMs: number, errorCode: string): void {
    this.#tx(() => this.#s.failure.run({ series, at: atMs, code: errorCode }));
  }
  cycle(series: string): CycleRecord | null {
    this.#open();
    const r = this.#s.getCycle.get(series);
    return r ? { series: r.series, lastAttemptAt: r.last_attempt_at, lastSuccessAt: r.last_success_at, lastErrorCode: r.last_error_code } : null;
  }
  /** Time of the last whole cycle that completed (series key ALL_SERIES). */
  lastSuccessfulCycleAt(): number | null {
    return this.cycle(ALL_SERIES)?.lastSuccessAt ?? null;
  }

  // ---- small JSON values (and bytes) ----
  setJson(key: string, value: unknown, nowMs: number): void {
    const json = JSON.stringify(value);
    this.#tx(() => this.#s.putKv.run(key, json, nowMs));
  }
  getJson<T = unknown>(key: string): T | undefined {
    this.#open();
    const r = this.#s.getKv.get(key);
    if (!r) return undefined;
    if (typeof r.value !== 'string') {
      throw new StoreError('STORE_PROTOCOL', `kv value ${key} in ${this.path} is ${r.value.length} bytes, not JSON`, { at: key, hint: 'read it with getStored' });
    }
    return JSON.parse(r.value) as T;
  }
  /** Bytes under a key (a BLOB in kv, read back with getStored). */
  setBytes(key: string, bytes: Uint8Array, nowMs: number): void {
    const value = blob(bytes);
    this.#tx(() => this.#s.putKv.run(key, value, nowMs));
  }
  /** A kv value as stored: JSON text (setJson) or bytes (setBytes); undefined when absent. */
  getStored(key: string): string | Uint8Array | undefined {
    this.#open();
    return this.#s.getKv.get(key)?.value;
  }
  deleteJson(key: string): void {
    this.#tx(() => this.#s.delKv.run(key));
  }

  close(): void {
    if (this.#closed) return;
    this.#closed = true;
    try {
      this.#db.pragma('wal_checkpoint(TRUNCATE)');
    } catch {
      /* checkpoint is best effort */
    }
    this.#db.close();
  }

  /** The connection, for diagnostics in tests. */
  get db(): Db {
    return this.#open();
  }
}

/** A Uint8Array as better-sqlite3 binds a BLOB (a Buffer over the same memory, no copy). */
function blob(b: Uint8Array): Buffer {
  return Buffer.isBuffer(b) ? b : Buffer.from(b.buffer, b.byteOffset, b.byteLength);
}

function storedValue(model: object | Uint8Array): string | Buffer {
  return model instanceof Uint8Array ? blob(model) : JSON.stringify(model);
}

interface OutboxRow {
  id: number;
  series: string;
  kind: string;
  payload: string;
  created_at: number;
  attempts: number;
  next_attempt_at: number;
  last_error: string | null;
}

function outboxEntry<P>(r: OutboxRow): OutboxEntry<P> {
  return { id: r.id, series: r.series, kind: r.kind, payload: JSON.parse(r.payload) as P, createdAt: r.created_at, attempts: r.attempts, nextAttemptAt: r.next_attempt_at, lastError: r.last_error };
}
