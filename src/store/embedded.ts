/**
 * The embedded store: a SeriesStore over one SQLite file (better-sqlite3, WAL).
 *
 * Tables (see /work/notes/config-store.md and the README for dashboard queries):
 *   readings          (series, t) -> v                              raw readings, epoch ms
 *   forecast_latest   (series, lead) -> t, value, lo, hi, bands, issued_at, step_ms
 *                     only the newest forecast of each series (replaced on every write)
 *   forecast_history  (series, lead, t) -> value, lo, hi, bands, issued_at
 *                     every forecast ever issued, by lead time: "what we said 24 h ahead"
 *   scores            (series, lead, t) -> mae, rmse, mase, bias, coverage, n, season
 *   health            (series, t) -> state, state_code, statistic, recent_mase, baseline_mase,
 *                     novelty_share, last_reading_at
 * Every write is one transaction of prepared upserts, so it is idempotent (the same key
 * overwrites) and a crash leaves either the whole batch or none of it.
 */
import type { Reading } from '../series/types.ts';
import type { ForecastBatch, ForecastPoint, HealthPoint, ScorePoint, SeriesStore, SourceSelector, DriftState } from './types.ts';
import { DRIFT_STATE_CODE } from './types.ts';
import { StoreError } from './influx/errors.ts';
import { dbNum, ensureSchema, num, openSqlite, type Db } from './sqlite.ts';

export const EMBEDDED_SCHEMA_VERSION = 1;

const DDL = `
CREATE TABLE IF NOT EXISTS readings (
  series TEXT NOT NULL,
  t INTEGER NOT NULL,
  v REAL,
  PRIMARY KEY (series, t)
) WITHOUT ROWID;
CREATE TABLE IF NOT EXISTS forecast_latest (
  series TEXT NOT NULL,
  lead INTEGER NOT NULL,
  t INTEGER NOT NULL,
  value REAL NOT NULL,
  lo REAL,
  hi REAL,
  bands TEXT NOT NULL,
  issued_at INTEGER NOT NULL,
  step_ms INTEGER NOT NULL,
  PRIMARY KEY (series, lead)
) WITHOUT ROWID;
CREATE TABLE IF NOT EXISTS forecast_history (
  series TEXT NOT NULL,
  lead INTEGER NOT NULL,
  t INTEGER NOT NULL,
  value REAL NOT NULL,
  lo REAL,
  hi REAL,
  bands TEXT NOT NULL,
  issued_at INTEGER NOT NULL,
  PRIMARY KEY (series, lead, t)
) WITHOUT ROWID;
CREATE INDEX IF NOT EXISTS forecast_history_by_time ON forecast_history (series, t);
CREATE TABLE IF NOT EXISTS scores (
  series TEXT NOT NULL,
  lead INTEGER NOT NULL,
  t INTEGER NOT NULL,
  mae REAL, rmse REAL, mase REAL, bias REAL, coverage REAL,
  n INTEGER NOT NULL,
  season INTEGER NOT NULL,
  PRIMARY KEY (series, lead, t)
) WITHOUT ROWID;
CREATE TABLE IF NOT EXISTS health (
  series TEXT NOT NULL,
  t INTEGER NOT NULL,
  state TEXT NOT NULL,
  state_code INTEGER NOT NULL,
  statistic REAL, recent_mase REAL, baseline_mase REAL, novelty_share REAL,
  last_reading_at INTEGER,
  PRIMARY KEY (series, t)
) WITHOUT ROWID;
`;

export interface EmbeddedStoreOptions {
  /** SQLite file (":memory:" for tests). */
  path: string;
  busyTimeoutMs?: number;
}

/** One point of the forecast history, with the time it was issued. */
export interface HistoryPoint extends ForecastPoint {
  issuedAt: number;
}

export interface ReadingsExtent {
  count: number;
  firstMs: number;
  lastMs: number;
}

function checkSeries(series: unknown): asserts series is string {
  if (typeof series !== 'string' || series.length === 0) {
    throw new StoreError('SERIES_NAME_INVALID', `series name ${JSON.stringify(series)} is empty or not a string`, { hint: 'give every series a non-empty name' });
  }
}

function checkTime(t: number, series: string, what: string): void {
  if (!Number.isSafeInteger(t)) {
    throw new StoreError('POINT_INVALID', `${what} time ${t} of series ${series} is not an epoch-ms integer`, { series, hint: 'times are whole milliseconds since 1970-01-01T00:00Z' });
  }
}

/** Outermost band quantiles as columns beside the JSON, so dashboard SQL stays simple. */
function loHi(bands: Record<string, number>): [number | null, number | null] {
  const keys = Object.keys(bands).filter((k) => Number.isFinite(Number(k))).sort((a, b) => Number(a) - Number(b));
  if (keys.length === 0) return [null, null];
  return [dbNum(bands[keys[0]]), keys.length > 1 ? dbNum(bands[keys[keys.length - 1]]) : null];
}

export class EmbeddedStore implements SeriesStore {
  readonly kind = 'embedded';
  readonly path: string;
  readonly #db: Db;
  #closed = false;
  readonly #stmt: ReturnType<EmbeddedStore['prepare']>;

  constructor(opts: EmbeddedStoreOptions) {
    this.path = opts.path;
    this.#db = openSqlite(opts.path, { busyTimeoutMs: opts.busyTimeoutMs });
    ensureSchema(this.#db, 'embedded', EMBEDDED_SCHEMA_VERSION, DDL);
    this.#stmt = this.prepare();
  }

  private prepare() {
    const db = this.#db;
    return {
      // Raw rows ([t, v] arrays): a third cheaper than building a result object per row.
      readRange: db.prepare<[string, number, number], [number, unknown]>('SELECT t, v FROM readings WHERE series = ? AND t >= ? AND t < ? ORDER BY t').raw(true),
      upsertReading: db.prepare('INSERT INTO readings (series, t, v) VALUES (?, ?, ?) ON CONFLICT (series, t) DO UPDATE SET v = excluded.v'),
      clearLatest: db.prepare('DELETE FROM forecast_latest WHERE series = ?'),
      insertLatest: db.prepare('INSERT INTO forecast_latest (series, lead, t, value, lo, hi, bands, issued_at, step_ms) VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?)'),
      upsertHistory: db.prepare(
        `INSERT INTO forecast_history (series, lead, t, value, lo, hi, bands, issued_at) VALUES (?, ?, ?, ?, ?, ?, ?, ?)
         ON CONFLICT (series, lead, t) DO UPDATE SET value = excluded.value, lo = excluded.lo, hi = excluded.hi, bands = excluded.bands, issued_at = excluded.issued_at`,
      ),
      upsertScore: db.prepare(
        `INSERT INTO scores (series, lead, t, mae, rmse, mase, bias, coverage, n, season) VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?, ?)
         ON CONFLICT (series, lead, t) DO UPDATE SET mae = excluded.mae, rmse = excluded.rmse, mase = excluded.mase, bias = excluded.bias,
           coverage = excluded.coverage, n = excluded.n, season = excluded.season`,
      ),
      upsertHealth: db.prepare(
        `INSERT INTO health (series, t, state, state_code, statistic, recent_mase, baseline_mase, novelty_share, last_reading_at) VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?)
         ON CONFLICT (series, t) DO UPDATE SET state = excluded.state, state_code = excluded.state_code, statistic = excluded.statistic,
           recent_mase = excluded.recent_mase, baseline_mase = excluded.baseline_mase, novelty_share = excluded.novelty_share, last_reading_at = excluded.last_reading_at`,
      ),
      latest: db.prepare<[string], { lead: number; t: number; value: number; bands: string; issued_at: number; step_ms: number }>(
        'SELECT lead, t, value, bands, issued_at, step_ms FROM forecast_latest WHERE series = ? ORDER BY lead',
      ),
      history: db.prepare<[string, number, number, number, number], { lead: number; t: number; value: number; bands: string; issued_at: number }>(
        'SELECT lead, t, value, bands, issued_at FROM forecast_history WHERE series = ? AND t >= ? AND t < ? AND (? = 0 OR lead = ?) ORDER BY t, lead',
      ),
      scores: db.prepare('SELECT series, t, lead, mae, rmse, mase, bias, coverage, n, season FROM scores WHERE series = ? AND t >= ? AND t < ? ORDER BY t, lead'),
      health: db.prepare('SELECT series, t, state, statistic, recent_mase, baseline_mase, novelty_share, last_reading_at FROM health WHERE series = ? AND t >= ? AND t < ? ORDER BY t'),
      extent: db.prepare<[string], { count: number; first: number | null; last: number | null }>('SELECT count(*) AS count, min(t) AS first, max(t) AS last FROM readings WHERE series = ?'),
      seriesList: db.prepare<[], { series: string }>('SELECT DISTINCT series FROM readings ORDER BY series'),
      deleteReadings: db.prepare('DELETE FROM readings WHERE series = ?'),
    };
  }

  #open(): Db {
    if (this.#closed) throw new StoreError('STORE_CLOSED', `embedded store ${this.path} is closed`, { hint: 'open a new store' });
    return this.#db;
  }

  #busy(e: unknown): never {
    const code = (e as { code?: string }).code;
    if (e instanceof StoreError) throw e;
    if (code === 'SQLITE_BUSY' || code === 'SQLITE_LOCKED') {
      throw new StoreError('STORE_BUSY', `embedded store ${this.path} is locked by another writer`, { hint: 'another radcast process holds the file; retried next cycle', cause: e });
    }
    throw new StoreError('STORE_PROTOCOL', `embedded store ${this.path}: ${(e as Error).message}`, { hint: 'run `PRAGMA integrity_check` on the file; restore it from a backup if it fails', cause: e });
  }

  #tx<T>(fn: () => T): T {
    const db = this.#open();
    try {
      return db.transaction(fn).immediate();
    } catch (e) {
      this.#busy(e);
    }
  }

  // ---------- SeriesStore ----------

  async readReadings(sel: SourceSelector, fromMs: number, toMs: number): Promise<Reading[]> {
    this.#open();
    checkSeries(sel.name);
    try {
      // SQLite columns are not typed: another program may have put text or a blob into v. The
      // contract is numbers only (non-numeric values as NaN).
      const rows = this.#stmt.readRange.all(sel.name, Math.floor(fromMs), Math.ceil(toMs));
      const out: Reading[] = new Array(rows.length);
      for (let i = 0; i < rows.length; i++) {
        const [t, v] = rows[i];
        out[i] = { t, v: typeof v === 'number' ? v : NaN };
      }
      return out;
    } catch (e) {
      this.#busy(e);
    }
  }

  async writeForecast(batch: ForecastBatch): Promise<void> {
    this.writeForecastsSync([batch]);
  }

  /** Several batches in one transaction (the daemon writes a whole cycle at once). */
  async writeForecasts(batches: ForecastBatch[]): Promise<void> {
    this.writeForecastsSync(batches);
  }

  writeForecastsSync(batches: ForecastBatch[]): void {
    for (const b of batches) {
      checkSeries(b.series);
      checkTime(b.issuedAt, b.series, 'issue');
      if (!(b.stepMs > 0)) throw new StoreError('POINT_INVALID', `forecast of ${b.series} has step ${b.stepMs}`, { series: b.series, hint: 'stepMs must be positive' });
      for (const p of b.points) {
        checkTime(p.t, b.series, 'target');
        if (!Number.isFinite(p.value)) {
          throw new StoreError('POINT_INVALID', `forecast of ${b.series} at lead ${p.lead} is ${p.value}`, { series: b.series, hint: 'a forecast point must be a finite number; nothing of this batch was written' });
        }
        for (const [q, v] of Object.entries(p.bands)) {
          if (!Number.isFinite(v)) throw new StoreError('POINT_INVALID', `band ${q} of ${b.series} at lead ${p.lead} is ${v}`, { series: b.series, hint: 'band values must be finite numbers' });
        }
      }
    }
    const s = this.#stmt;
    this.#tx(() => {
      for (const b of batches) {
        s.clearLatest.run(b.series);
        for (const p of b.points) {
          const bands = JSON.stringify(p.bands);
          const [lo, hi] = loHi(p.bands);
          s.insertLatest.run(b.series, p.lead, p.t, p.value, lo, hi, bands, b.issuedAt, b.stepMs);
          s.upsertHistory.run(b.series, p.lead, p.t, p.value, lo, hi, bands, b.issuedAt);
        }
      }
    });
  }

  async writeScores(points: ScorePoint[]): Promise<void> {
    for (const p of points) {
      checkSeries(p.series);
      checkTime(p.t, p.series, 'score');
    }
    const s = this.#stmt;
    this.#tx(() => {
      for (const p of points) {
        s.upsertScore.run(p.series, p.lead, p.t, dbNum(p.mae), dbNum(p.rmse), dbNum(p.mase), dbNum(p.bias), dbNum(p.coverage), Math.round(p.n), Math.round(p.season));
      }
    });
  }

  async writeHealth(points: HealthPoint[]): Promise<void> {
    for (const p of points) {
      checkSeries(p.series);
      checkTime(p.t, p.series, 'health');
      if (!(p.state in DRIFT_STATE_CODE)) throw new StoreError('POINT_INVALID', `health state ${JSON.stringify(p.state)} of ${p.series} is unknown`, { series: p.series, hint: `one of ${Object.keys(DRIFT_STATE_CODE).join(', ')}` });
    }
    const s = this.#stmt;
    this.#tx(() => {
      for (const p of points) {
        s.upsertHealth.run(p.series, p.t, p.state, DRIFT_STATE_CODE[p.state], dbNum(p.statistic), dbNum(p.recentMase), dbNum(p.baselineMase), dbNum(p.noveltyShare), p.lastReadingAt);
      }
    });
  }

  async ping(): Promise<boolean> {
    if (this.#closed) return false;
    try {
      return (this.#db.prepare('SELECT 1 AS one').get() as { one: number }).one === 1;
    } catch {
      return false;
    }
  }

  /** Writes are committed when each call returns; nothing is buffered. */
  async flush(): Promise<void> {}

  async close(): Promise<void> {
    if (this.#closed) return;
    this.#closed = true;
    try {
      this.#db.pragma('wal_checkpoint(TRUNCATE)');
    } catch {
      /* another process may hold the WAL; it checkpoints itself */
    }
    this.#db.close();
  }

  // ---------- beyond the interface: import, export, page, tests ----------

  /** Upserts readings of one series in one transaction; returns how many were written. */
  writeReadings(series: string, readings: readonly Reading[]): number {
    checkSeries(series);
    for (const r of readings) checkTime(r.t, series, 'reading');
    const s = this.#stmt;
    this.#tx(() => {
      for (const r of readings) s.upsertReading.run(series, r.t, dbNum(r.v));
    });
    return readings.length;
  }

  /** Runs `fn` in one transaction: everything written inside commits together or not at all. */
  transaction<T>(fn: () => T): T {
    return this.#tx(fn);
  }

  deleteReadings(series: string): number {
    return this.#tx(() => this.#stmt.deleteReadings.run(series).changes);
  }

  readingsExtent(series: string): ReadingsExtent | null {
    const r = this.#stmt.extent.get(series);
    if (!r || r.count === 0 || r.first === null || r.last === null) return null;
    return { count: r.count, firstMs: r.first, lastMs: r.last };
  }

  /** Series that have readings. */
  listSeries(): string[] {
    return this.#stmt.seriesList.all().map((r) => r.series);
  }

  async readLatestForecast(series: string): Promise<ForecastBatch | null> {
    const rows = this.#stmt.latest.all(series);
    if (rows.length === 0) return null;
    return {
      series,
      issuedAt: rows[0].issued_at,
      stepMs: rows[0].step_ms,
      points: rows.map((r) => ({ t: r.t, lead: r.lead, value: r.value, bands: JSON.parse(r.bands) as Record<string, number> })),
    };
  }

  /** Forecast history with fromMs <= target time < toMs; lead 0/undefined = every lead. */
  async readForecastHistory(series: string, opts: { fromMs?: number; toMs?: number; lead?: number } = {}): Promise<HistoryPoint[]> {
    const lead = opts.lead ?? 0;
    return this.#stmt.history
      .all(series, opts.fromMs ?? Number.MIN_SAFE_INTEGER, opts.toMs ?? Number.MAX_SAFE_INTEGER, lead, lead)
      .map((r) => ({ t: r.t, lead: r.lead, value: r.value, bands: JSON.parse(r.bands) as Record<string, number>, issuedAt: r.issued_at }));
  }

  async readScores(series: string, fromMs = Number.MIN_SAFE_INTEGER, toMs = Number.MAX_SAFE_INTEGER): Promise<ScorePoint[]> {
    type Row = { series: string; t: number; lead: number; mae: number | null; rmse: number | null; mase: number | null; bias: number | null; coverage: number | null; n: number; season: number };
    return (this.#stmt.scores.all(series, fromMs, toMs) as Row[]).map((r) => ({
      series: r.series, t: r.t, lead: r.lead, mae: num(r.mae), rmse: num(r.rmse), mase: num(r.mase), bias: num(r.bias), coverage: num(r.coverage), n: r.n, season: r.season,
    }));
  }

  async readHealth(series: string, fromMs = Number.MIN_SAFE_INTEGER, toMs = Number.MAX_SAFE_INTEGER): Promise<HealthPoint[]> {
    type Row = { series: string; t: number; state: DriftState; statistic: number | null; recent_mase: number | null; baseline_mase: number | null; novelty_share: number | null; last_reading_at: number | null };
    return (this.#stmt.health.all(series, fromMs, toMs) as Row[]).map((r) => ({
      series: r.series, t: r.t, state: r.state, statistic: num(r.statistic), recentMase: num(r.recent_mase), baselineMase: num(r.baseline_mase), noveltyShare: num(r.novelty_share), lastReadingAt: r.last_reading_at,
    }));
  }

  /** The underlying connection, for read-only diagnostics in tests (integrity checks, pragmas). */
  get db(): Db {
    return this.#open();
  }
}
