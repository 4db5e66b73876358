/**
 * The daemon's in-memory view of each series, kept up to date by the cycle and read by the HTTP
 * page and /readyz. Bounded: one entry per configured series, no history.
 */
import type { DriftState, ForecastBatch } from '../store/types.ts';
import type { ErrorRecord } from './errors.ts';

export interface SeriesStatus {
  series: string;
  /** IANA zone the series' calendar (and the page's axis) uses. */
  timeZone: string;
  stepMs: number;
  schedule: string;
  /** False when drift detection is off for the series (the page says "off"). */
  driftEnabled: boolean;
  driftState: DriftState | null;
  driftStatistic: number | null;
  recentMase: number | null;
  baselineMase: number | null;
  noveltyShare: number | null;
  lastAttemptAt: number | null;
  lastSuccessAt: number | null;
  lastError: ErrorRecord | null;
  consecutiveFailures: number;
  /** Latest forecast written by this process (also kept in the state store across restarts). */
  latestForecast: ForecastBatch | null;
  lastReadingAt: number | null;
}

export function blankStatus(s: { series: string; timeZone: string; stepMs: number; schedule: string; driftEnabled?: boolean }): SeriesStatus {
  return {
    driftEnabled: true,
    ...s,
    driftState: null,
    driftStatistic: null,
    recentMase: null,
    baselineMase: null,
    noveltyShare: null,
    lastAttemptAt: null,
    lastSuccessAt: null,
    lastError: null,
    consecutiveFailures: 0,
    latestForecast: null,
    lastReadingAt: null,
  };
}
