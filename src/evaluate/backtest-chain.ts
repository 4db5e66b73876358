/**
 * One chain of consecutive backtest origins, run in a worker thread or inline: at each origin the
 * model is fitted on the window before it (warm-started from the previous origin of the chain),
 * forecasts H steps, and the baselines forecast from the same origin. Pure computation; the
 * scoring and the bands are done afterwards over all chains (see backtest.ts).
 */
import type { RegularSeries } from '../series/types.ts';
import type { ForecastSettings } from '../forecast/types.ts';
import type { FittedForecaster, HoldoutResiduals } from '../forecast/engine.ts';
import { fitAt, forecastAt } from '../forecast/engine.ts';
import { errorInfo } from '../forecast/errors.ts';
import { seasonalScale } from './metrics.ts';
import { fitRidgeAr, forecastRidgeAr, seasonalNaiveForecast, type SeasonalBaseline } from './baselines.ts';

/** Name of the model row in every table. */
export const MODEL_METHOD = 'rbf';
/** Name of the ridge autoregression baseline. */
export const RIDGE_METHOD = 'ridge-ar';

/**
 * An exogenous input used at target time that is itself a configured series: at each origin it is
 * forecast with its own settings, and the target's forecast uses that forecast (as the daemon
 * does), not the observed future values.
 */
export interface ExoModel {
  name: string;
  settings: ForecastSettings;
  /** Forecasts of this input already made at some origins (its own backtest), keyed by origin time (ms). */
  known?: Record<string, number[]>;
}

export interface ChainTask {
  target: RegularSeries;
  exo: Record<string, RegularSeries>;
  settings: ForecastSettings;
  /** At-target exogenous inputs forecast at each origin (the others use observed values). */
  exoModels: ExoModel[];
  /** Origin indices into target.values, ascending. */
  origins: number[];
  seasonal: SeasonalBaseline[];
  /** Relative ridge penalty of the ridge-AR baseline. */
  ridgeArPenalty: number;
  /** Compute hold-out residuals before the first origin (seed of the bands). */
  calibrate: boolean;
  /** Most hold-out residuals kept per lead. */
  calibrationCap: number;
}

export type OriginOutcome =
  | {
      ok: true;
      originIndex: number;
      originMs: number;
      /** MASE scale on this origin's training window, season m = settings.features.seasonSteps. */
      scale: number;
      actual: number[];
      /** forecasts[method] = H values (NaN where a method had no forecast). */
      forecasts: Record<string, number[]>;
      novelty: number;
      fitMs: number;
      warmStarted: boolean;
      chosen: FittedForecaster['chosen'];
      autoSearched: boolean;
      /** Errors of baselines that could not forecast at this origin (the model still counts). */
      baselineErrors: Record<string, string>;
    }
  | { ok: false; originIndex: number; originMs: number; code: string; message: string; hint: string };

/** Hold-out residuals of one method: residualsByLead[h][k] at origin originMs[k]. */
export interface Calibration {
  residualsByLead: number[][];
  originMs: number[];
}

export interface ChainResult {
  outcomes: OriginOutcome[];
  /** Hold-out residuals per method (only when task.calibrate). */
  calibration?: Record<string, Calibration>;
}

function windowStart(settings: ForecastSettings, originIndex: number): number {
  return originIndex - settings.windowSteps + 1;
}

/**
 * Hold-out residuals of the baselines at every origin v = vFirst .. originIndex - H (the model's
 * hold-out origins): the ridge baseline is fitted on the window up to vFirst only.
 */
function baselineCalibration(task: ChainTask, originIndex: number, vFirstIn: number | undefined): Record<string, Calibration> {
  const { settings, target } = task;
  const H = settings.features.horizon;
  const values = target.values;
  const ws = Math.max(0, windowStart(settings, originIndex));
  const vFirst = vFirstIn ?? originIndex - H - Math.floor((originIndex - ws + 1) * settings.fit.validationFraction) + 1;
  const out: Record<string, Calibration> = {};
  const empty = (): Calibration => ({ residualsByLead: Array.from({ length: H }, () => []), originMs: [] });
  for (const b of task.seasonal) out[b.name] = empty();
  out[RIDGE_METHOD] = empty();
  if (vFirst + H > originIndex || vFirst <= ws) return out;
  let ridge: ReturnType<typeof fitRidgeAr> | null = null;
  try {
    ridge = fitRidgeAr(values, ws, vFirst, settings.features.lags, H, { ridge: task.ridgeArPenalty });
  } catch {
    ridge = null;
  }
  // Evenly spread over the tail, at most calibrationCap origins (as the model's hold-out).
  const nV = originIndex - H - vFirst + 1;
  const keep = Math.min(nV, task.calibrationCap);
  for (let k = 0; k < keep; k++) {
    const v = vFirst + (keep === nV ? k : Math.floor((k * nV) / keep));
    const fc: Record<string, Float64Array> = {};
    for (const b of task.seasonal) fc[b.name] = seasonalNaiveForecast(values, v, H, b.m);
    if (ridge) fc[RIDGE_METHOD] = forecastRidgeAr(ridge, values, v);
    for (const [name, f] of Object.entries(fc)) {
      // NaN residuals are kept here (skipped when added to a pool) so leads stay aligned with originMs.
      for (let h = 0; h < H; h++) out[name].residualsByLead[h].push(values[v + 1 + h] - f[h]);
      out[name].originMs.push(target.startMs + v * target.stepMs);
    }
  }
  return out;
}

/**
 * The exogenous series as known at an origin: observed values up to the origin, then (for the
 * inputs in task.exoModels) their own H-step forecast from that origin.
 */
function exoWithForecasts(task: ChainTask, originMs: number, warm: Map<string, FittedForecaster>): Record<string, RegularSeries> {
  if (task.exoModels.length === 0) return task.exo;
  const out: Record<string, RegularSeries> = { ...task.exo };
  for (const m of task.exoModels) {
    const s = task.exo[m.name];
    if (!s) continue;
    const oE = Math.floor((originMs - s.startMs) / s.stepMs);
    const H = m.settings.features.horizon;
    let forecast: ArrayLike<number>;
    const known = m.known?.[String(originMs)];
    if (known && known.length >= H && known.slice(0, H).every(Number.isFinite)) {
      forecast = known.slice(0, H);
    } else {
      const f = fitAt(s, {}, m.settings, oE, warm.get(m.name));
      warm.set(m.name, f);
      forecast = forecastAt(f, s, {}, m.settings, oE).values;
    }
    const values = new Float64Array(oE + 1 + forecast.length);
    values.set(s.values.subarray(0, oE + 1));
    values.set(forecast, oE + 1);
    const next: RegularSeries = { ...s, values };
    if (s.filled) {
      const filled = new Uint8Array(values.length);
      filled.set(s.filled.subarray(0, oE + 1));
      next.filled = filled;
    }
    out[m.name] = next;
  }
  return out;
}

/** Runs the chain; `onOrigin` is called after each origin (progress). */
export function runChain(task: ChainTask, onOrigin?: (o: OriginOutcome) => void): ChainResult {
  const { settings, target, exo } = task;
  const H = settings.features.horizon;
  const m = settings.features.seasonSteps;
  const values = target.values;
  const outcomes: OriginOutcome[] = [];
  let warm: FittedForecaster | undefined;
  const exoWarm = new Map<string, FittedForecaster>();
  let calibration: Record<string, Calibration> | undefined;
  for (let i = 0; i < task.origins.length; i++) {
    const o = task.origins[i];
    const originMs = target.startMs + o * target.stepMs;
    let outcome: OriginOutcome;
    try {
      const wantCalibration = task.calibrate && calibration === undefined;
      let holdout: HoldoutResiduals | undefined;
      const exoHere = exoWithForecasts(task, originMs, exoWarm);
      const fitted = fitAt(target, exoHere, settings, o, warm, wantCalibration ? { holdout: true, onHoldout: (h) => (holdout = h) } : { holdout: false });
      const fc = forecastAt(fitted, target, exoHere, settings, o);
      warm = fitted;
      const ws = Math.max(0, windowStart(settings, o));
      const actual: number[] = [];
      for (let h = 1; h <= H; h++) actual.push(o + h < values.length ? values[o + h] : Number.NaN);
      const forecasts: Record<string, number[]> = { [MODEL_METHOD]: Array.from(fc.values) };
      const baselineErrors: Record<string, string> = {};
      for (const b of task.seasonal) forecasts[b.name] = Array.from(seasonalNaiveForecast(values, o, H, b.m));
      try {
        const ridge = fitRidgeAr(values, ws, o, settings.features.lags, H, { ridge: task.ridgeArPenalty });
        forecasts[RIDGE_METHOD] = Array.from(forecastRidgeAr(ridge, values, o));
      } catch (err) {
        forecasts[RIDGE_METHOD] = new Array<number>(H).fill(Number.NaN);
        baselineErrors[RIDGE_METHOD] = errorInfo(err).message;
      }
      if (wantCalibration) {
        calibration = baselineCalibration(task, o, (holdout as HoldoutResiduals | undefined)?.firstOrigin);
        const h0 = holdout as HoldoutResiduals | undefined;
        calibration[MODEL_METHOD] = h0 ? { residualsByLead: h0.residualsByLead, originMs: h0.originMs } : { residualsByLead: Array.from({ length: H }, () => []), originMs: [] };
      }
      outcome = {
        ok: true,
        originIndex: o,
        originMs,
        scale: seasonalScale(values, ws, o, m).scale,
        actual,
        forecasts,
        novelty: fc.novelty,
        fitMs: fitted.fitMs,
        warmStarted: fitted.warmStarted,
        chosen: fitted.chosen,
        autoSearched: fitted.auto?.searched ?? false,
        baselineErrors,
      };
    } catch (err) {
      // One bad origin (a gap in its inputs, too little history) does not stop the backtest.
      outcome = { ok: false, originIndex: o, originMs, ...errorInfo(err) };
      warm = undefined;
      exoWarm.clear();
    }
    outcomes.push(outcome);
    onOrigin?.(outcome);
  }
  return calibration ? { outcomes, calibration } : { outcomes };
}
