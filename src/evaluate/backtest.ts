/**
 * Rolling-origin backtest: origins every `everySteps` over the last `spanSteps` of history; at
 * each origin the engine fits on the window before it (same window length as the daemon,
 * warm-started from the previous origin of its chain), forecasts H steps and is scored against the
 * actuals, beside the baselines forecasting from the same origin. Bands per lead come from the
 * residuals that had matured before each origin (seeded with hold-out residuals from before the
 * first origin), so the measured coverage is honest.
 *
 * Callable programmatically (the tune command passes its own settings grid, progress callback and
 * worker count); `radcast backtest` is a thin layer over it.
 */
import type { RegularSeries } from '../series/types.ts';
import type { ForecastSettings } from '../forecast/types.ts';
import { ForecastError, isoAt } from '../forecast/errors.ts';
import { scoreForecasts, type MetricSet } from './metrics.ts';
import { addResiduals, applyBands, bandOffsets, bandScale, createResidualPool, originPhase, scaleOffsets, DEFAULT_RESIDUAL_CAPACITY, type BandOptions } from './bands.ts';
import { seasonalBaselines } from './baselines.ts';
import { MODEL_METHOD, RIDGE_METHOD, type ChainTask, type OriginOutcome } from './backtest-chain.ts';
import { defaultWorkers, runChains } from './pool.ts';

export { MODEL_METHOD, RIDGE_METHOD } from './backtest-chain.ts';

export interface BacktestProgress {
  /** Origins finished (successfully or not). */
  done: number;
  total: number;
  failed: number;
}

export interface BacktestOptions {
  /** Origins lie in the last spanSteps steps of the series. */
  spanSteps: number;
  /** Spacing of the origins in steps. */
  everySteps: number;
  /** Worker threads; 0 = inline in the calling thread; default: one per core (at most one per chain). */
  workers?: number;
  /**
   * Consecutive origins per chain (default 6). Each chain starts with a cold fit and warm-starts
   * every later refit from the previous origin; chains run in parallel. Results depend on this,
   * never on the worker count.
   */
  chainLength?: number;
  onProgress?: (p: BacktestProgress) => void;
  /** Residuals kept per lead for the bands (default 120). */
  residualCapacity?: number;
  band?: BandOptions;
  /** Relative ridge penalty of the ridge-AR baseline (default 1e-4). */
  ridgeArPenalty?: number;
  signal?: AbortSignal;
  /** Clock for elapsed time (ms); default performance.now. */
  now?: () => number;
  /**
   * Settings of exogenous inputs that are configured series. An input used at target time is then
   * forecast at every origin with these settings and the target uses that forecast, as the daemon
   * does. Without them (or when the input has inputs of its own) the observed future values are
   * used, i.e. a perfect forecast of the input; the result says which (exoAtTarget).
   */
  exoSettings?: Record<string, ForecastSettings>;
  /**
   * Forecasts of those inputs already made by their own backtest (origin time ms -> H values), e.g.
   * from `modelForecasts(result)`; origins found here are not forecast again.
   */
  exoForecasts?: Record<string, Record<string, number[]>>;
}

export interface MethodResult {
  /** "rbf", "seasonal-naive-daily", "seasonal-naive-weekly", "ridge-ar". */
  name: string;
  kind: 'model' | 'baseline';
  /** Season in steps (seasonal naive), else null. */
  m: number | null;
  overall: MetricSet;
  /** byLead[h - 1] for lead h. */
  byLead: MetricSet[];
  /** One entry per scored origin, in time order. */
  byOrigin: Array<{ originMs: number; mase: number | null; mae: number | null; rmse: number | null; n: number }>;
}

export interface OriginDetail {
  originIndex: number;
  originMs: number;
  /** H actuals before and including the origin (context for charts). */
  history: number[];
  actual: number[];
  forecasts: Record<string, number[]>;
  /** bands[method][quantileIndex][h]; NaN where no band could be formed yet. */
  bands: Record<string, number[][]>;
  scale: number;
  novelty: number;
  fitMs: number;
  warmStarted: boolean;
  chosen: { nCentres: number; widthMode: string; ridge: number };
}

export interface BacktestResult {
  series: string;
  stepMs: number;
  /** Season m in steps behind every MASE. */
  season: number;
  horizon: number;
  windowSteps: number;
  spanSteps: number;
  everySteps: number;
  quantiles: number[];
  /** Origins scored. */
  origins: number;
  originTimes: number[];
  failed: Array<{ originMs: number; code: string; message: string; hint: string }>;
  /** Candidate origins left out because their window reached before the first value. */
  skippedForHistory: number;
  methods: MethodResult[];
  details: OriginDetail[];
  auto: {
    tunables: string[];
    /** Fits that searched the auto settings (the cold start of each chain). */
    searches: number;
    /** Distinct chosen settings with the number of origins that used them. */
    chosen: Array<{ nCentres: number; widthMode: string; ridge: number; origins: number }>;
  };
  fit: { medianMs: number; meanMs: number; coldFits: number; warmFits: number };
  /** How each exogenous input used at target time was supplied: its own forecast, or the observed values. */
  exoAtTarget: Record<string, 'forecast' | 'observed'>;
  workers: number;
  chainLength: number;
  elapsedMs: number;
}

/** The origin indices of a backtest, ascending; see BacktestOptions. */
export function backtestOrigins(target: RegularSeries, settings: ForecastSettings, spanSteps: number, everySteps: number): { origins: number[]; skippedForHistory: number } {
  const series = settings.series;
  if (!Number.isInteger(everySteps) || everySteps < 1) {
    throw new ForecastError({ code: 'BAD_SETTINGS', series, field: 'backtest.every', message: `every=${everySteps} steps is not a positive integer`, hint: 'use e.g. 24 (one day of hourly steps)' });
  }
  if (!Number.isInteger(spanSteps) || spanSteps < 1) {
    throw new ForecastError({ code: 'BAD_SETTINGS', series, field: 'backtest.span', message: `span=${spanSteps} steps is not a positive integer`, hint: 'use e.g. 672 (four weeks of hourly steps)' });
  }
  const H = settings.features.horizon;
  const values = target.values;
  let last = values.length - 1;
  while (last >= 0 && !Number.isFinite(values[last])) last--;
  const oMax = last - H;
  const oMin = last - spanSteps;
  const origins: number[] = [];
  let skippedForHistory = 0;
  for (let o = oMax; o >= Math.max(0, oMin); o -= everySteps) {
    if (o - settings.windowSteps + 1 < 0) skippedForHistory++;
    else origins.push(o);
  }
  origins.reverse();
  return { origins, skippedForHistory };
}

function median(a: number[]): number {
  if (a.length === 0) return Number.NaN;
  const s = [...a].sort((x, y) => x - y);
  const k = s.length >> 1;
  return s.length % 2 ? s[k] : (s[k - 1] + s[k]) / 2;
}

/** Runs the rolling-origin backtest of one series with explicit settings. */
export async function backtest(target: RegularSeries, exo: Record<string, RegularSeries>, settings: ForecastSettings, opts: BacktestOptions): Promise<BacktestResult> {
  const now = opts.now ?? (() => performance.now());
  const t0 = now();
  const H = settings.features.horizon;
  const quantiles = [...settings.quantiles].sort((a, b) => a - b);
  const { origins, skippedForHistory } = backtestOrigins(target, settings, opts.spanSteps, opts.everySteps);
  if (origins.length === 0) {
    throw new ForecastError({
      code: 'NO_ORIGINS',
      series: settings.series,
      message: `no backtest origin has a full window of ${settings.windowSteps} steps and ${H} actuals after it (series has ${target.values.length} steps)`,
      hint: 'load more history, shorten the window, or lengthen backtest.span',
      details: { windowSteps: settings.windowSteps, horizon: H, available: target.values.length },
    });
  }
  const chainLength = Math.max(1, Math.floor(opts.chainLength ?? 6));
  const seasonal = seasonalBaselines(settings.stepMs).filter((b) => b.m < settings.windowSteps);
  const cap = opts.residualCapacity ?? DEFAULT_RESIDUAL_CAPACITY;
  // Send each worker only the part of the series it can use: from the first window to the end
  // (the window of an input forecast with its own settings may reach further back).
  let reach = settings.windowSteps;
  for (const spec of settings.features.exogenous) {
    const es = opts.exoSettings?.[spec.name];
    if (spec.atTarget && es) reach = Math.max(reach, es.windowSteps);
  }
  const from = Math.max(0, origins[0] - reach + 1);
  const trimmed: RegularSeries = { ...target, startMs: target.startMs + from * target.stepMs, values: target.values.slice(from), ...(target.filled ? { filled: target.filled.slice(from) } : {}) };
  const exoTrimmed: Record<string, RegularSeries> = {};
  const fromMs = trimmed.startMs;
  for (const [name, s] of Object.entries(exo)) {
    const skip = Math.max(0, Math.floor((fromMs - s.startMs) / s.stepMs));
    exoTrimmed[name] = { ...s, startMs: s.startMs + skip * s.stepMs, values: s.values.slice(skip), ...(s.filled ? { filled: s.filled.slice(skip) } : {}) };
  }
  const exoModels: ChainTask['exoModels'] = [];
  const exoAtTarget: Record<string, 'forecast' | 'observed'> = {};
  for (const spec of settings.features.exogenous) {
    if (!spec.atTarget) continue;
    const es = opts.exoSettings?.[spec.name];
    const usable = es !== undefined && es.features.exogenous.length === 0 && es.features.horizon >= H && es.stepMs === settings.stepMs;
    if (usable) {
      const known = opts.exoForecasts?.[spec.name];
      exoModels.push({ name: spec.name, settings: { ...es, features: { ...es.features, horizon: H } }, ...(known ? { known } : {}) });
    }
    exoAtTarget[spec.name] = usable ? 'forecast' : 'observed';
  }
  const tasks: ChainTask[] = [];
  for (let i = 0; i < origins.length; i += chainLength) {
    tasks.push({
      target: trimmed,
      exo: exoTrimmed,
      settings,
      exoModels,
      origins: origins.slice(i, i + chainLength).map((o) => o - from),
      seasonal,
      ridgeArPenalty: opts.ridgeArPenalty ?? 1e-4,
      calibrate: i === 0,
      calibrationCap: cap,
    });
  }
  const workers = opts.workers ?? defaultWorkers(tasks.length);
  let done = 0;
  let failed = 0;
  opts.onProgress?.({ done, total: origins.length, failed });
  const results = await runChains(tasks, {
    workers,
    signal: opts.signal,
    onOrigin: (ok) => {
      done++;
      if (!ok) failed++;
      opts.onProgress?.({ done, total: origins.length, failed });
    },
  });

  const outcomes: OriginOutcome[] = results.flatMap((r) => r.outcomes);
  const good = outcomes.filter((o): o is Extract<OriginOutcome, { ok: true }> => o.ok);
  const calibration = results[0]?.calibration ?? {};
  const methodNames = [MODEL_METHOD, ...seasonal.map((b) => b.name), RIDGE_METHOD];

  // Bands: for each origin, from the residuals matured before it (lead h of origin j matures at o_j + h).
  const bandsByOrigin: Array<Record<string, number[][]>> = good.map(() => ({}));
  // Errors depend on the hour a forecast is issued at, so the pool keeps the origin's phase in the
  // season; and they grow with the series' variability (heat load errors scale with the load), so
  // residuals are kept relative to their origin's seasonal scale and bands are scaled back with
  // the scale at the new origin (see bands.ts).
  const phases = settings.features.seasonSteps;
  const phaseOf = (ms: number): number => originPhase(ms, settings.stepMs, phases);
  const m = settings.features.seasonSteps;
  const scaleAt = (oi: number): number => bandScale(trimmed.values, oi, settings.windowSteps, m);
  for (const name of methodNames) {
    const pool = createResidualPool(H, cap, phases);
    const seed = calibration[name];
    if (seed) {
      for (let k = 0; k < seed.originMs.length; k++) {
        const p = phaseOf(seed.originMs[k]);
        const sc = scaleAt(Math.round((seed.originMs[k] - trimmed.startMs) / trimmed.stepMs));
        for (let h = 0; h < H && h < seed.residualsByLead.length; h++) addResiduals(pool, h + 1, [seed.residualsByLead[h][k] / sc], p);
      }
    }
    const addedLeads = new Int32Array(good.length);
    for (let i = 0; i < good.length; i++) {
      const oi = good[i].originIndex;
      for (let j = 0; j < i; j++) {
        const oj = good[j].originIndex;
        while (addedLeads[j] < H && oj + addedLeads[j] + 1 <= oi) {
          const h = addedLeads[j];
          addResiduals(pool, h + 1, [(good[j].actual[h] - good[j].forecasts[name][h]) / scaleAt(good[j].originIndex)], phaseOf(good[j].originMs));
          addedLeads[j]++;
        }
      }
      const off = scaleOffsets(bandOffsets(pool, quantiles, { ...opts.band, phase: phaseOf(good[i].originMs) }), scaleAt(oi));
      bandsByOrigin[i][name] = applyBands(good[i].forecasts[name], off).map((b) => Array.from(b));
    }
  }

  const methods: MethodResult[] = methodNames.map((name) => {
    const summary = scoreForecasts(
      good.map((g, i) => ({ actual: g.actual, forecast: g.forecasts[name], scale: g.scale, bands: bandsByOrigin[i][name] })),
      H,
      quantiles,
      m,
    );
    const sb = seasonal.find((b) => b.name === name);
    return {
      name,
      kind: name === MODEL_METHOD ? 'model' : 'baseline',
      m: sb ? sb.m : null,
      overall: summary.overall,
      byLead: summary.byLead,
      byOrigin: summary.byForecast.map((s, i) => ({ originMs: good[i].originMs, mase: s.mase, mae: s.mae, rmse: s.rmse, n: s.n })),
    };
  });

  const details: OriginDetail[] = good.map((g, i) => {
    const history: number[] = [];
    for (let k = g.originIndex - H + 1; k <= g.originIndex; k++) history.push(k >= 0 ? trimmed.values[k] : Number.NaN);
    return {
      originIndex: g.originIndex + from,
      originMs: g.originMs,
      history,
      actual: g.actual,
      forecasts: g.forecasts,
      bands: bandsByOrigin[i],
      scale: g.scale,
      novelty: g.novelty,
      fitMs: g.fitMs,
      warmStarted: g.warmStarted,
      chosen: g.chosen,
    };
  });

  const chosenCounts = new Map<string, { nCentres: number; widthMode: string; ridge: number; origins: number }>();
  for (const g of good) {
    const key = `${g.chosen.nCentres}|${g.chosen.widthMode}|${g.chosen.ridge}`;
    const e = chosenCounts.get(key) ?? { ...g.chosen, origins: 0 };
    e.origins++;
    chosenCounts.set(key, e);
  }
  const tunables = (['nCentres', 'widthMode', 'ridge'] as const).filter((k) => settings.fit[k] === 'auto');
  const fitTimes = good.map((g) => g.fitMs);
  return {
    series: settings.series,
    stepMs: settings.stepMs,
    season: m,
    horizon: H,
    windowSteps: settings.windowSteps,
    spanSteps: opts.spanSteps,
    everySteps: opts.everySteps,
    quantiles,
    origins: good.length,
    originTimes: good.map((g) => g.originMs),
    failed: outcomes.filter((o): o is Extract<OriginOutcome, { ok: false }> => !o.ok).map((o) => ({ originMs: o.originMs, code: o.code, message: o.message, hint: o.hint })),
    skippedForHistory,
    methods,
    details,
    auto: { tunables, searches: good.filter((g) => g.autoSearched).length, chosen: [...chosenCounts.values()].sort((a, b) => b.origins - a.origins) },
    fit: {
      medianMs: median(fitTimes),
      meanMs: fitTimes.length ? fitTimes.reduce((s, x) => s + x, 0) / fitTimes.length : Number.NaN,
      coldFits: good.filter((g) => !g.warmStarted).length,
      warmFits: good.filter((g) => g.warmStarted).length,
    },
    exoAtTarget,
    workers,
    chainLength,
    elapsedMs: now() - t0,
  };
}

/** The model's forecast at every scored origin (origin time ms -> H values), for reuse as an input's forecast. */
export function modelForecasts(r: BacktestResult): Record<string, number[]> {
  const out: Record<string, number[]> = {};
  for (const d of r.details) out[String(d.originMs)] = d.forecasts[MODEL_METHOD];
  return out;
}

/** Metrics that scripts compare, for one method (the `--json` shape). */
function jsonMetrics(s: MetricSet): Record<string, unknown> {
  return {
    mae: s.mae,
    rmse: s.rmse,
    mase: s.mase,
    bias: s.bias,
    coverage: s.coverage,
    nominalCoverage: s.nominalCoverage,
    width: s.width,
    pinball: s.pinball,
    pinballByQuantile: s.pinballByQuantile,
    n: s.n,
    missing: s.missing,
  };
}

/** The `--json` document of one backtest (no per-origin forecasts; byLead per method). */
export function backtestJson(r: BacktestResult): Record<string, unknown> {
  const model = r.methods.find((x) => x.kind === 'model');
  const baselines: Record<string, unknown> = {};
  const byLead: Record<string, unknown> = {};
  for (const x of r.methods) {
    if (x.kind === 'baseline') baselines[x.name] = { ...jsonMetrics(x.overall), m: x.m };
    byLead[x.name] = x.byLead.map((s, h) => ({ lead: h + 1, mae: s.mae, rmse: s.rmse, mase: s.mase, bias: s.bias, coverage: s.coverage, width: s.width, pinball: s.pinball, n: s.n }));
  }
  return {
    series: r.series,
    step: formatStep(r.stepMs),
    stepMs: r.stepMs,
    season: r.season,
    horizon: r.horizon,
    windowSteps: r.windowSteps,
    spanSteps: r.spanSteps,
    everySteps: r.everySteps,
    quantiles: r.quantiles,
    origins: r.origins,
    originTimes: r.originTimes.map(isoAt),
    failedOrigins: r.failed.map((f) => ({ at: isoAt(f.originMs), code: f.code, message: f.message })),
    model: model ? jsonMetrics(model.overall) : null,
    baselines,
    byLead,
    maseByOrigin: Object.fromEntries(r.methods.map((x) => [x.name, x.byOrigin.map((o) => ({ at: isoAt(o.originMs), mase: o.mase }))])),
    auto: r.auto,
    fit: r.fit,
    exoAtTarget: r.exoAtTarget,
  };
}

/** "1h", "15m", "1d", "90s" (largest whole unit). */
export function formatStep(ms: number): string {
  const units: Array<[string, number]> = [
    ['w', 604_800_000],
    ['d', 86_400_000],
    ['h', 3_600_000],
    ['m', 60_000],
    ['s', 1000],
  ];
  for (const [u, size] of units) if (ms >= size && ms % size === 0) return `${ms / size}${u}`;
  return `${ms}ms`;
}
