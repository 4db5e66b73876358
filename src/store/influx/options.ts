/**
 * Options of the InfluxDB adapter. The daemon builds them from `store.influxdb` in the config
 * (src/config/schema.ts, durations already converted to ms) and hands in the resolved secret;
 * the adapter never reads the environment or files itself.
 */
import type { Logger } from './log.ts';
import type { PointSpool } from './spool.ts';

/** Measurement names radcast writes (config `store.influxdb.measurements`). */
export interface MeasurementNames {
  /** Forecast history: one point per series, lead and target time. */
  forecast: string;
  /** Latest forecast per series and target time. */
  latest: string;
  /** Accuracy scores. */
  score: string;
  /** Drift state and health. */
  health: string;
}

interface CommonOptions {
  /** Base URL, e.g. http://127.0.0.1:8086 (no /api/v2 suffix). */
  url: string;
  /** Timeout of one HTTP request (ms). */
  timeoutMs?: number;
  /**
   * Bound of points waiting in memory (points). Beyond it they move to the spool; without a spool
   * the oldest forecasts are dropped first.
   */
  writeBufferPoints?: number;
  /**
   * Durable place for points the server has not confirmed (the factory passes a table in the
   * state file). They move there when a send fails, at the memory bound and on close(), and are
   * sent by the next instance on the same spool. The adapter closes it in close().
   */
  spool?: PointSpool;
  /** Bound of points in the spool; beyond it the oldest forecasts are dropped first (points). */
  spoolMaxPoints?: number;
  /** Points per write request. */
  batchSize?: number;
  /** Longest time a point waits in the buffer before it is sent (ms). */
  flushIntervalMs?: number;
  /** First retry delay after a failed write (ms). */
  minRetryDelayMs?: number;
  /** Cap of the exponential backoff between write retries (ms). */
  maxRetryDelayMs?: number;
  /** Fraction of each retry delay that is random, 0..1 (0 in tests). */
  retryJitter?: number;
  /** close() keeps trying to send buffered points for at most this long (ms). */
  closeTimeoutMs?: number;
  /** Request bodies larger than this are gzipped (bytes). */
  gzipThresholdBytes?: number;
  /** At most one "points dropped" warning per this interval; the count is summed (ms). */
  dropLogIntervalMs?: number;
  measurements?: Partial<MeasurementNames>;
  /** Injected logger (pino-compatible); default: silent. */
  logger?: Logger;
  /** Injected clock and timers (tests). */
  now?: () => number;
  setTimer?: (fn: () => void, ms: number) => unknown;
  clearTimer?: (handle: unknown) => void;
  /** Random source for retry jitter. */
  random?: () => number;
}

/** InfluxDB 1.x HTTP API (also served by 1.8+/2.x for compatibility): /write, /query with InfluxQL. */
export interface InfluxV1Options extends CommonOptions {
  api: 'v1';
  database: string;
  /** Retention policy; the database default when absent. */
  retentionPolicy?: string;
  /** User name for user/password authentication. */
  user?: string;
  /** Resolved password (from env or file). Never logged. */
  password?: string;
  /** Resolved token (InfluxDB 2.x v1-compatibility auth). Never logged. */
  token?: string;
}

/** InfluxDB 2.x API: WriteApi to /api/v2/write, Flux through /api/v2/query. */
export interface InfluxV2Options extends CommonOptions {
  api: 'v2';
  org: string;
  bucket: string;
  /** Resolved API token (from env or file). Never logged. */
  token: string;
}

export type InfluxStoreOptions = InfluxV1Options | InfluxV2Options;

/** The one place for defaults (they match src/config/schema.ts where the config has the key). */
export const INFLUX_DEFAULTS = {
  timeoutMs: 10_000,
  writeBufferPoints: 100_000,
  spoolMaxPoints: 2_000_000,
  batchSize: 5_000,
  flushIntervalMs: 1_000,
  minRetryDelayMs: 500,
  maxRetryDelayMs: 30_000,
  retryJitter: 0.2,
  closeTimeoutMs: 10_000,
  gzipThresholdBytes: 1_000,
  dropLogIntervalMs: 10_000,
  measurements: {
    forecast: 'radcast_forecast',
    latest: 'radcast_forecast_latest',
    score: 'radcast_score',
    health: 'radcast_health',
  } satisfies MeasurementNames,
} as const;
