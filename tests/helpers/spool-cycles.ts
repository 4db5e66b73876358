/**
 * The writes of one invented forecasting cycle for the write-spool tests, shared by the test and
 * its child process: two Oskaveld substations, each with a 6-step forecast (history + latest), a
 * score and a health point. Values encode cycle and lead, so the test can tell which write of
 * which cycle a point in the database came from.
 */
import type { ForecastBatch, SeriesStore } from '../../src/store/types.ts';

export const HOUR = 3_600_000;
export const SPOOL_SERIES = ['oskaveld-north', 'brennick-yard'] as const;
export const LEADS = 6;

export function spoolBatch(t0: number, series: string, cycle: number): ForecastBatch {
  const issuedAt = t0 + cycle * HOUR;
  const base = (SPOOL_SERIES.indexOf(series as (typeof SPOOL_SERIES)[number]) + 1) * 10_000 + cycle * 100;
  return {
    series,
    issuedAt,
    stepMs: HOUR,
    points: Array.from({ length: LEADS }, (_, i) => ({ t: issuedAt + (i + 1) * HOUR, lead: i + 1, value: base + i, bands: { '0.1': base + i - 5, '0.9': base + i + 5 } })),
  };
}

/** The value cycle `cycle` forecasts for `series` at lead `lead`. */
export function spoolValue(series: string, cycle: number, lead: number): number {
  return (SPOOL_SERIES.indexOf(series as (typeof SPOOL_SERIES)[number]) + 1) * 10_000 + cycle * 100 + lead - 1;
}

/** One cycle's writes, as the daemon's cycle makes them: forecast, scores, health. */
export async function writeSpoolCycle(store: SeriesStore, t0: number, cycle: number): Promise<void> {
  for (const series of SPOOL_SERIES) {
    await store.writeForecast(spoolBatch(t0, series, cycle));
    await store.writeScores([{ series, t: t0 + cycle * HOUR, lead: 0, mae: cycle, rmse: cycle + 1, mase: cycle / 10, bias: 0, coverage: 0.8, n: 24, season: 24 }]);
    await store.writeHealth([{ series, t: t0 + cycle * HOUR, state: 'ok', statistic: cycle, recentMase: 1, baselineMase: 1, noveltyShare: 0, lastReadingAt: null }]);
  }
}

/**
 * Distinct points (measurement + tags + time) that cycles fromCycle..toCycle write: history
 * (series x lead x cycle), score and health (series x cycle), latest (series x target time; the
 * cycles' target times overlap, the newest issue overwrites).
 */
export function distinctPoints(fromCycle: number, toCycle: number): number {
  const n = toCycle - fromCycle + 1;
  if (n <= 0) return 0;
  const series = SPOOL_SERIES.length;
  return series * (n * LEADS + n + n + (n - 1 + LEADS));
}
