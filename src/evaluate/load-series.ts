/**
 * Reading one series and its exogenous inputs from a store for a backtest (or a tune run) and
 * putting them on the series' grid, the way the daemon cycle does (read, then regularise with the
 * series' own regularize options). Shared by `radcast backtest` and `radcast tune`.
 *
 * The range read ends after the newest reading of the series (embedded store) or at the clock
 * (other stores), unless the caller gives an end; it reaches back `historySteps` steps.
 */
import type { ResolvedSeries } from '../config/resolve.ts';
import type { ForecastSettings } from '../forecast/types.ts';
import { ForecastError, isoAt } from '../forecast/errors.ts';
import type { RegularSeries } from '../series/types.ts';
import { regularize } from '../series/regularize.ts';
import type { SeriesStore, SourceSelector } from '../store/types.ts';

export interface BacktestInputs {
  target: RegularSeries;
  exo: Record<string, RegularSeries>;
  /** Settings of the configured series among the inputs used at target time (BacktestOptions.exoSettings). */
  exoSettings: Record<string, ForecastSettings>;
  /** Range read: fromMs <= t < toMs (epoch ms, aligned to the step). */
  fromMs: number;
  toMs: number;
  /** Raw readings of the target in that range. */
  readings: number;
}

export interface LoadInputsOptions {
  /** Steps read before the end: training window + backtest span + a margin (see historyStepsFor). */
  historySteps: number;
  /** End of the range, exclusive (epoch ms); default see endOfReadings. */
  toMs?: number;
  /** Every resolved series of the config (to find the settings of configured inputs). */
  configured?: readonly ResolvedSeries[];
  /** Clock (epoch ms) for stores that cannot tell their newest reading; default Date.now. */
  now?: () => number;
}

/** Stores that can tell the extent of a series' readings (the embedded store can). */
interface ExtentStore {
  readingsExtent(series: string): { lastMs: number } | null;
}

function hasExtent(store: SeriesStore): store is SeriesStore & ExtentStore {
  return typeof (store as Partial<ExtentStore>).readingsExtent === 'function';
}

/**
 * End of the range to read, exclusive: the step after the newest reading when the store can tell
 * it (the embedded store), else the start of the current, incomplete step (as the daemon).
 */
export function endOfReadings(store: SeriesStore, series: ResolvedSeries, now: () => number = Date.now): number {
  const step = series.settings.stepMs;
  if (hasExtent(store)) {
    const ext = store.readingsExtent(series.source.name);
    if (ext) return (Math.floor(ext.lastMs / step) + 1) * step;
  }
  return Math.floor(now() / step) * step;
}

/**
 * Steps of history a backtest needs: the span of the origins, the longest training window (of the
 * series, of the given candidate windows, and of configured inputs forecast at each origin) and
 * one horizon of actuals after the newest origin.
 */
export function historyStepsFor(series: ResolvedSeries, spanSteps: number, opts: { windowSteps?: readonly number[]; configured?: readonly ResolvedSeries[] } = {}): number {
  let reach = Math.max(series.settings.windowSteps, ...(opts.windowSteps ?? []));
  for (const e of series.exogenous) {
    if (!e.atTarget) continue;
    const other = opts.configured?.find((r) => r.name === e.name);
    if (other) reach = Math.max(reach, other.settings.windowSteps);
  }
  return spanSteps + reach + series.settings.features.horizon;
}

/** Reads and regularises the series and its exogenous inputs for a backtest. */
export async function loadBacktestInputs(store: SeriesStore, series: ResolvedSeries, opts: LoadInputsOptions): Promise<BacktestInputs> {
  const s = series.settings;
  const step = s.stepMs;
  const toMs = opts.toMs ?? endOfReadings(store, series, opts.now);
  const fromMs = toMs - opts.historySteps * step;
  const regOpts = { ...s.regularize, stepMs: step, startMs: fromMs, endMs: toMs };
  const read = (sel: SourceSelector) => store.readReadings(sel, fromMs, toMs);
  const readings = await read(series.source);
  if (readings.length === 0) {
    throw new ForecastError({
      code: 'TOO_LITTLE_HISTORY',
      series: series.name,
      message: `no readings of ${series.name} between ${isoAt(fromMs)} and ${isoAt(toMs)}`,
      hint: 'import readings first (radcast import), or check the series source selector',
    });
  }
  const target = regularize(readings, { ...regOpts, series: series.name });
  const exo: Record<string, RegularSeries> = {};
  const exoSettings: Record<string, ForecastSettings> = {};
  for (const e of series.exogenous) {
    // Same range as the target: inputs used at target time are observed (or forecast) inside it.
    exo[e.name] = regularize(await read(e.source), { ...regOpts, series: e.name });
    const other = e.atTarget ? opts.configured?.find((r) => r.name === e.name) : undefined;
    if (other) exoSettings[e.name] = other.settings;
  }
  return { target, exo, exoSettings, fromMs, toMs, readings: readings.length };
}
