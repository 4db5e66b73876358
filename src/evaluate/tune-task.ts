/**
 * One combination of a tune run: the rolling-origin backtest of `radcast backtest` with that
 * combination's settings, scored on the tune run's common yardstick. Runs on a tune worker thread
 * (tune-worker.mjs) or inline; returns only the summary the ranking needs, not the forecasts.
 *
 * Common yardstick: the backtest scales each origin's errors by the mean absolute seasonal
 * difference of that setting's own training window, so two windows would divide the same error by
 * different numbers. Here every combination is scaled per origin over the same span before the
 * origin (`scaleWindowSteps`, the longest window of the grid), so MASE compares across windows.
 */
import type { RegularSeries } from '../series/types.ts';
import type { ForecastSettings } from '../forecast/types.ts';
import { errorInfo } from '../forecast/errors.ts';
import { backtest, MODEL_METHOD, type BacktestProgress } from './backtest.ts';
import { scoreForecasts, seasonalScale, type MetricSet } from './metrics.ts';

export interface TuneTask {
  id: number;
  target: RegularSeries;
  exo: Record<string, RegularSeries>;
  settings: ForecastSettings;
  exoSettings?: Record<string, ForecastSettings>;
  /** Forecasts of those inputs made once for the whole run (origin time ms -> values); see BacktestOptions.exoForecasts. */
  exoForecasts?: Record<string, Record<string, number[]>>;
  spanSteps: number;
  everySteps: number;
  /** Steps before (and including) each origin over which the common MASE scale is taken. */
  scaleWindowSteps: number;
  chainLength?: number;
  /** Worker threads for the origins of this combination (0 = inline in the calling thread). */
  originWorkers: number;
}

export interface TuneTaskProgress {
  id: number;
  done: number;
  total: number;
  failed: number;
}

export interface LeadScore {
  mase: number | null;
  mae: number | null;
  rmse: number | null;
}

export interface MethodSummary {
  mase: number | null;
  mae: number | null;
  rmse: number | null;
  bias: number | null;
  coverage: number | null;
  nominalCoverage: number | null;
  width: number | null;
  pinball: number | null;
  n: number;
}

export interface CandidateScore {
  id: number;
  ok: true;
  /** Origins scored (model forecast available). */
  origins: number;
  originTimes: number[];
  /** MASE per scored origin, aligned with originTimes (null where no point had a scale). */
  maseByOrigin: Array<number | null>;
  model: MethodSummary;
  byLead: LeadScore[];
  /** The baselines on the same origins and yardstick, by method name (seasonal naive, ridge AR). */
  baselines: Record<string, MethodSummary & { m: number | null; byLead: LeadScore[] }>;
  fit: { meanMs: number; medianMs: number; coldFits: number; warmFits: number };
  failedOrigins: Array<{ at: number; code: string; message: string }>;
  elapsedMs: number;
}

export interface CandidateFailure {
  id: number;
  ok: false;
  code: string;
  message: string;
  hint: string;
}

export type CandidateOutcome = CandidateScore | CandidateFailure;

function summary(s: MetricSet): MethodSummary {
  return { mase: s.mase, mae: s.mae, rmse: s.rmse, bias: s.bias, coverage: s.coverage, nominalCoverage: s.nominalCoverage, width: s.width, pinball: s.pinball, n: s.n };
}

const lead = (s: MetricSet): LeadScore => ({ mase: s.mase, mae: s.mae, rmse: s.rmse });

/** Runs the backtest of one combination and scores it on the common yardstick. Never throws. */
export async function runTuneTask(task: TuneTask, onProgress?: (p: TuneTaskProgress) => void, now: () => number = () => performance.now()): Promise<CandidateOutcome> {
  const t0 = now();
  try {
    const r = await backtest(task.target, task.exo, task.settings, {
      spanSteps: task.spanSteps,
      everySteps: task.everySteps,
      workers: task.originWorkers,
      ...(task.chainLength !== undefined ? { chainLength: task.chainLength } : {}),
      ...(task.exoSettings ? { exoSettings: task.exoSettings } : {}),
      ...(task.exoForecasts ? { exoForecasts: task.exoForecasts } : {}),
      onProgress: (p: BacktestProgress) => onProgress?.({ id: task.id, ...p }),
    });
    const m = task.settings.features.seasonSteps;
    const values = task.target.values;
    const scales = r.details.map((d) => seasonalScale(values, d.originIndex - task.scaleWindowSteps + 1, d.originIndex, m).scale);
    const score = (name: string) =>
      scoreForecasts(
        r.details.map((d, i) => ({ actual: d.actual, forecast: d.forecasts[name] ?? [], scale: scales[i], ...(d.bands[name] ? { bands: d.bands[name] } : {}) })),
        r.horizon,
        r.quantiles,
        m,
      );
    const model = score(MODEL_METHOD);
    const baselines: CandidateScore['baselines'] = {};
    for (const meth of r.methods) {
      if (meth.kind !== 'baseline') continue;
      const s = score(meth.name);
      baselines[meth.name] = { ...summary(s.overall), m: meth.m, byLead: s.byLead.map(lead) };
    }
    return {
      id: task.id,
      ok: true,
      origins: r.origins,
      originTimes: r.originTimes,
      maseByOrigin: model.byForecast.map((s) => s.mase),
      model: summary(model.overall),
      byLead: model.byLead.map(lead),
      baselines,
      fit: { meanMs: r.fit.meanMs, medianMs: r.fit.medianMs, coldFits: r.fit.coldFits, warmFits: r.fit.warmFits },
      failedOrigins: r.failed.map((f) => ({ at: f.originMs, code: f.code, message: f.message })),
      elapsedMs: now() - t0,
    };
  } catch (err) {
    return { id: task.id, ok: false, ...errorInfo(err) };
  }
}
