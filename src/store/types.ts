/**
 * The one storage interface. Adapters (embedded SQLite, InfluxDB v1/v2) are the only code that
 * speaks a wire protocol; everything above talks to these interfaces.
 *
 * Two roles:
 *  - SeriesStore: where readings live and where forecasts, bands, scores and health go, so
 *    dashboards and alert rules see them (embedded SQLite file or InfluxDB).
 *  - StateStore: radcast's own local state (always a SQLite file): warm-start models, the
 *    issued-forecast ledger used for scoring, residuals for bands, drift detector state, the
 *    durable write outbox and the webhook outbox. Kept local so a store outage loses nothing.
 */
import type { Reading } from '../series/types.ts';

/** Where a series' readings come from. For the embedded store only `name` matters. */
export interface SourceSelector {
  /** radcast's series name (also the key of everything radcast writes). */
  name: string;
  measurement?: string;
  field?: string;
  /** Tag equality filters. */
  tags?: Record<string, string>;
  /** Push a mean-per-window aggregation down to the server (ms), 0/undefined = raw. */
  aggregateMs?: number;
}

/** One forecast step as written to the store. */
export interface ForecastPoint {
  /** Target time (epoch ms). */
  t: number;
  /** Lead time in steps, 1..H. */
  lead: number;
  value: number;
  /** Band quantiles, e.g. { "0.1": 12.3, "0.9": 15.8 }. */
  bands: Record<string, number>;
}

export interface ForecastBatch {
  series: string;
  /** Forecast origin: time of the last observed step (epoch ms). */
  issuedAt: number;
  stepMs: number;
  points: ForecastPoint[];
}

/** Accuracy of matured forecasts, per series (lead 0 = all leads together). */
export interface ScorePoint {
  series: string;
  /** Time the score refers to (epoch ms), e.g. the target time of the newest scored step. */
  t: number;
  lead: number;
  mae: number;
  rmse: number;
  mase: number;
  bias: number;
  coverage: number;
  n: number;
  season: number;
}

export type DriftState = 'ok' | 'watch' | 'alert' | 'stale';
/** Integer codes written beside the state string so numeric alert rules can fire. */
export const DRIFT_STATE_CODE: Record<DriftState, number> = { ok: 0, watch: 1, alert: 2, stale: 3 };

export interface HealthPoint {
  series: string;
  t: number;
  state: DriftState;
  statistic: number;
  recentMase: number;
  baselineMase: number;
  noveltyShare: number;
  lastReadingAt: number | null;
}

export interface SeriesStore {
  /** Short adapter name for logs and metrics ("embedded", "influxdb-v1", "influxdb-v2"). */
  readonly kind: string;
  /** Readings with fromMs <= t < toMs, any order. Non-numeric values may appear as NaN. */
  readReadings(sel: SourceSelector, fromMs: number, toMs: number): Promise<Reading[]>;
  /** Idempotent: the same series + lead + target time overwrites. Also replaces the "latest" forecast. */
  writeForecast(batch: ForecastBatch): Promise<void>;
  writeScores(points: ScorePoint[]): Promise<void>;
  writeHealth(points: HealthPoint[]): Promise<void>;
  /** True when the store answers. */
  ping(): Promise<boolean>;
  /** Flush buffered writes (adapters with buffers). */
  flush(): Promise<void>;
  close(): Promise<void>;
}
