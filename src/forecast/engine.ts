/**
 * The one fit + forecast path of radcast, used by the daemon cycle, the backtest and the tuner:
 *
 *   fitAt(target, exo, settings, originIndex, warm?)   -> FittedForecaster (plain JSON data)
 *   forecastAt(fitted, target, exo, settings, originIndex) -> H values, target times, novelty
 *
 * Origin o means values[0..o] are known. Both functions cut the series at the origin before
 * anything else (exogenous inputs too: at the origin, or at the last target time for inputs used
 * at target time), so no code path below can see a value after the origin.
 *
 * Settings given as 'auto' (nCentres, widthMode, ridge) are chosen on the validation tail of the
 * training window, i.e. on samples before the origin, never on the scored actuals.
 */
import type { Dense, FitOptions, FitReport, RbfModel, WidthMode } from '../model/types.ts';
import type { RegularSeries, SampleSet, Scaler } from '../series/types.ts';
import type { ForecastSettings } from './types.ts';
import { fitRbf, predictRbf, checkModel } from '../model/index.ts';
import { buildSamples, buildForecastInput } from '../series/index.ts';
import { ForecastError, isoAt } from './errors.ts';

/** Candidates tried for 'auto' settings (coordinate search: K, then width mode, then ridge). */
export const AUTO_CANDIDATES = Object.freeze({
  nCentres: [8, 16, 32, 64, 128] as readonly number[],
  widthMode: ['shared', 'per-centre'] as readonly WidthMode[],
  ridge: [1e-6, 1e-5, 1e-4, 1e-3, 1e-2, 1e-1] as readonly number[],
  /** Starting point for the tunables that are auto. */
  start: { nCentres: 32, widthMode: 'shared' as WidthMode, ridge: 1e-3 },
});

/** Most hold-out residuals handed over per lead (spread evenly over the validation tail). */
export const HOLDOUT_RESIDUALS_PER_LEAD = 336;

export type Tunable = 'nCentres' | 'widthMode' | 'ridge';

export interface ChosenSettings {
  nCentres: number;
  widthMode: WidthMode;
  ridge: number;
}

export interface AutoCandidate extends ChosenSettings {
  /** MSE on the validation tail (series units squared). */
  validationMse: number;
}

export interface AutoReport {
  tunables: Tunable[];
  /** false: the choice of the warm-start model was reused without a new search. */
  searched: boolean;
  candidates: AutoCandidate[];
  /** Samples in the validation tail the choice was made on. */
  validationSamples: number;
  /** ISO time of the first validation origin. */
  validationFrom: string | null;
}

export interface HoldoutResiduals {
  /** residualsByLead[h - 1][k]: actual - forecast at lead h of hold-out origin k (time order, evenly thinned to the cap). */
  residualsByLead: number[][];
  /** originMs[k]: time of hold-out origin k (for phase-aware bands). */
  originMs: number[];
  /** Index (into the series) of the first hold-out origin; the hold-out model saw only targets up to it. */
  firstOrigin: number;
  nOrigins: number;
  validationMse: number;
}

/**
 * A fitted forecaster as plain JSON data: the network (K centres, widths, weights), the feature
 * scaler and what was chosen. It holds no window data; the daemon keeps it in the state store
 * and passes it back as `warm` for the next refit.
 */
export interface FittedForecaster {
  version: 1;
  series: string;
  /** Fingerprint of the settings that shape the features and the fit; a warm start with another key starts cold. */
  settingsKey: string;
  originIndex: number;
  /** Time of the origin step (epoch ms): the last step the fit could see. */
  originMs: number;
  stepMs: number;
  horizon: number;
  model: RbfModel;
  scaler: Scaler;
  featureNames: string[];
  chosen: ChosenSettings;
  /** What the auto search tried and chose; null when nothing was auto. */
  auto: AutoReport | null;
  fitReport: FitReport;
  nSamples: number;
  /** First and last sample origin of the training window (epoch ms). */
  trainFromMs: number;
  trainToMs: number;
  /** Wall time of fitAt (ms), auto search included. */
  fitMs: number;
  warmStarted: boolean;
}

export interface FitAtOptions {
  /**
   * Compute hold-out residuals on the validation tail (seed for the bands when no matured
   * residuals exist yet) and pass them to onHoldout. Default: true when onHoldout is given and the
   * fit is cold. Free when an auto search runs; otherwise one extra fit on the shorter window.
   */
  holdout?: boolean;
  /**
   * Receives the hold-out residuals when they were computed. They are handed over here rather
   * than kept in the FittedForecaster so the stored forecaster stays small (the daemon seeds its
   * residual pool with them; the backtest seeds its bands).
   */
  onHoldout?: (h: HoldoutResiduals) => void;
  /** Search the auto settings again even when the warm start carries a choice (default false). */
  reselectAuto?: boolean;
  /** Clock for fitMs; default performance.now. */
  now?: () => number;
}

export interface ForecastOutput {
  originIndex: number;
  originMs: number;
  /** Start instant (epoch ms) of each target step, lead 1..H. */
  targetTimes: number[];
  values: Float64Array;
  /** Largest Gaussian activation of the input, in (0, 1]; small = input unlike the training data. */
  novelty: number;
  /** Inputs that were missing and replaced by their training mean. */
  imputed: string[];
}

/** Stable short fingerprint (FNV-1a 32) of the settings that must match for a warm start or reused choice. */
export function settingsKey(settings: ForecastSettings): string {
  const text = JSON.stringify({ stepMs: settings.stepMs, windowSteps: settings.windowSteps, features: settings.features, fit: settings.fit });
  let h = 0x811c9dc5;
  for (let i = 0; i < text.length; i++) {
    h ^= text.charCodeAt(i);
    h = Math.imul(h, 0x01000193) >>> 0;
  }
  return h.toString(16).padStart(8, '0');
}

/** values[0..lastIndex] of a series (a view, no copy). */
function cutAtIndex(s: RegularSeries, lastIndex: number): RegularSeries {
  const end = Math.max(0, Math.min(s.values.length, lastIndex + 1));
  const out: RegularSeries = { ...s, values: s.values.subarray(0, end) };
  if (s.filled) out.filled = s.filled.subarray(0, end);
  return out;
}

/** Steps of a series with start time <= tMs. */
function cutAtTime(s: RegularSeries, tMs: number): RegularSeries {
  return cutAtIndex(s, Math.floor((tMs - s.startMs) / s.stepMs));
}

/** Exogenous inputs as far as they may be known: at the origin, or at the last target for at-target inputs. */
function cutExo(exo: Record<string, RegularSeries>, settings: ForecastSettings, originMs: number, horizonMs: number): Record<string, RegularSeries> {
  const out: Record<string, RegularSeries> = {};
  for (const [name, s] of Object.entries(exo)) {
    const spec = settings.features.exogenous.find((e) => e.name === name);
    out[name] = cutAtTime(s, spec?.atTarget ? originMs + horizonMs : originMs);
  }
  return out;
}

function checkOrigin(target: RegularSeries, settings: ForecastSettings, originIndex: number): void {
  if (!Number.isInteger(originIndex) || originIndex < 0 || originIndex >= target.values.length) {
    throw new ForecastError({
      code: 'ORIGIN_OUT_OF_RANGE',
      series: settings.series,
      field: 'originIndex',
      message: `origin index ${originIndex} is outside the series (0..${target.values.length - 1})`,
      hint: 'pass the index of the last known step',
    });
  }
  if (target.stepMs !== settings.stepMs) {
    throw new ForecastError({
      code: 'BAD_SETTINGS',
      series: settings.series,
      field: 'step',
      message: `series step ${target.stepMs} ms differs from the configured step ${settings.stepMs} ms`,
      hint: 'regularise the readings to the configured step first',
    });
  }
}

function rows(d: Dense, from: number, to: number): Dense {
  return { data: d.data.subarray(from * d.cols, to * d.cols), rows: to - from, cols: d.cols };
}

function fitOptions(settings: ForecastSettings, chosen: ChosenSettings, warm?: RbfModel): FitOptions {
  const { nCentres: _k, widthMode: _w, ridge: _r, ...rest } = settings.fit;
  const o: FitOptions = { ...rest, nCentres: chosen.nCentres, widthMode: chosen.widthMode, ridge: chosen.ridge };
  if (warm) o.warmStart = warm;
  return o;
}

/**
 * Validation split of a sample set: training rows end H steps before the first validation origin,
 * so no training target lies after it. The feature scaler is the one of the whole window (input
 * means and spreads only; no target of the tail enters the fit).
 */
function splitTail(samples: SampleSet, horizon: number, fraction: number): { nTrain: number; vFrom: number } | null {
  const n = samples.x.rows;
  const nVal = Math.floor(n * fraction);
  if (nVal < 1) return null;
  const vFrom = n - nVal;
  const vOrigin = samples.originIndex[vFrom];
  let nTrain = 0;
  while (nTrain < vFrom && samples.originIndex[nTrain] + horizon <= vOrigin) nTrain++;
  if (nTrain < 2) return null;
  return { nTrain, vFrom };
}

/** Fits on the training rows, predicts the validation rows; residuals in series units per lead. */
function holdoutFit(samples: SampleSet, split: { nTrain: number; vFrom: number }, settings: ForecastSettings, c: ChosenSettings): { mse: number; residuals: Float64Array } {
  const H = samples.y.cols;
  const { model } = fitRbf(rows(samples.x, 0, split.nTrain), rows(samples.y, 0, split.nTrain), fitOptions(settings, c));
  const xv = rows(samples.x, split.vFrom, samples.x.rows);
  const yv = rows(samples.y, split.vFrom, samples.y.rows);
  const pred = predictRbf(model, xv).y.data;
  const residuals = new Float64Array(yv.data.length);
  let ss = 0;
  for (let i = 0; i < residuals.length; i++) {
    // y and the prediction share the same base, so target-space residuals are value residuals.
    const r = yv.data[i] - pred[i];
    residuals[i] = r;
    ss += r * r;
  }
  return { mse: ss / Math.max(1, xv.rows * H), residuals };
}

function holdoutFromResiduals(residuals: Float64Array, samples: SampleSet, vFrom: number, mse: number, target: RegularSeries): HoldoutResiduals {
  const H = samples.y.cols;
  const nV = samples.x.rows - vFrom;
  const byLead: number[][] = Array.from({ length: H }, () => []);
  const originMs: number[] = [];
  // Spread over the whole tail (not just its newest part) so every weekday and hour is represented.
  const keep = Math.min(nV, HOLDOUT_RESIDUALS_PER_LEAD);
  for (let k = 0; k < keep; k++) {
    const r = keep === nV ? k : Math.floor((k * nV) / keep);
    for (let h = 0; h < H; h++) byLead[h].push(residuals[r * H + h]);
    originMs.push(target.startMs + samples.originIndex[vFrom + r] * target.stepMs);
  }
  return { residualsByLead: byLead, originMs, firstOrigin: samples.originIndex[vFrom], nOrigins: nV, validationMse: mse };
}

/**
 * Fits the forecaster on the training window ending at originIndex (values after it are never
 * read). With `warm` (the previous FittedForecaster of the same series) the network starts from
 * its centres and widths, and its auto choice is reused when the settings have not changed.
 */
export function fitAt(target: RegularSeries, exo: Record<string, RegularSeries>, settings: ForecastSettings, originIndex: number, warm?: FittedForecaster, opts: FitAtOptions = {}): FittedForecaster {
  const now = opts.now ?? (() => performance.now());
  const t0 = now();
  checkOrigin(target, settings, originIndex);
  const H = settings.features.horizon;
  const originMs = target.startMs + originIndex * target.stepMs;
  const known = cutAtIndex(target, originIndex);
  const exoKnown = cutExo(exo, settings, originMs, 0);
  const key = settingsKey(settings);
  const fit = settings.fit;
  const tunables = (['nCentres', 'widthMode', 'ridge'] as const).filter((k) => fit[k] === 'auto');
  const minSamples = Math.max(2, typeof fit.nCentres === 'number' ? fit.nCentres : AUTO_CANDIDATES.nCentres[0]);
  const samples = buildSamples(known, exoKnown, settings.features, { lastKnownIndex: originIndex, windowSteps: settings.windowSteps, minSamples });
  const n = samples.x.rows;

  const warmUsable = warm !== undefined && warm.version === 1 && warm.series === settings.series && warm.settingsKey === key;
  let chosen: ChosenSettings = {
    nCentres: fit.nCentres === 'auto' ? AUTO_CANDIDATES.start.nCentres : fit.nCentres,
    widthMode: fit.widthMode === 'auto' ? AUTO_CANDIDATES.start.widthMode : fit.widthMode,
    ridge: fit.ridge === 'auto' ? AUTO_CANDIDATES.start.ridge : fit.ridge,
  };
  let auto: AutoReport | null = null;
  let holdout: HoldoutResiduals | undefined;
  const wantHoldout = opts.holdout ?? (opts.onHoldout !== undefined && !warmUsable);
  const split = splitTail(samples, H, fit.validationFraction);
  const validationFrom = split ? isoAt(target.startMs + samples.originIndex[split.vFrom] * target.stepMs) : null;

  if (tunables.length > 0 && warmUsable && warm.auto && !opts.reselectAuto) {
    chosen = { ...warm.chosen };
    auto = { tunables: [...tunables], searched: false, candidates: [], validationSamples: 0, validationFrom: null };
  } else if (tunables.length > 0) {
    if (!split) {
      throw new ForecastError({
        code: 'TOO_LITTLE_HISTORY',
        series: settings.series,
        at: isoAt(originMs),
        message: `auto settings need a validation tail, but ${n} samples with validationFraction=${fit.validationFraction} leave none`,
        hint: 'raise fit.validationFraction, lengthen the window, or set centres / widthMode / ridge explicitly',
      });
    }
    const candidates: AutoCandidate[] = [];
    let best: { c: ChosenSettings; mse: number; residuals: Float64Array } | null = null;
    const tried = new Map<string, { mse: number; residuals: Float64Array }>();
    const evaluate = (c: ChosenSettings): { mse: number; residuals: Float64Array } => {
      const k = `${c.nCentres}|${c.widthMode}|${c.ridge}`;
      let r = tried.get(k);
      if (!r) {
        r = holdoutFit(samples, split, settings, c);
        tried.set(k, r);
        candidates.push({ ...c, validationMse: r.mse });
      }
      return r;
    };
    for (const t of tunables) {
      const options: ChosenSettings[] =
        t === 'nCentres'
          ? AUTO_CANDIDATES.nCentres.filter((k) => 2 * k <= split.nTrain).map((k) => ({ ...chosen, nCentres: k }))
          : t === 'widthMode'
            ? AUTO_CANDIDATES.widthMode.map((w) => ({ ...chosen, widthMode: w }))
            : AUTO_CANDIDATES.ridge.map((r) => ({ ...chosen, ridge: r }));
      if (options.length === 0) options.push({ ...chosen, nCentres: Math.max(1, Math.floor(split.nTrain / 2)) });
      let stepBest: { c: ChosenSettings; mse: number; residuals: Float64Array } | null = null;
      for (const c of options) {
        const r = evaluate(c);
        // Strictly better only: ties keep the earlier (smaller / simpler) candidate.
        if (!stepBest || r.mse < stepBest.mse) stepBest = { c, ...r };
      }
      chosen = stepBest!.c;
      best = stepBest;
    }
    auto = { tunables: [...tunables], searched: true, candidates, validationSamples: samples.x.rows - split.vFrom, validationFrom };
    if (best) holdout = holdoutFromResiduals(best.residuals, samples, split.vFrom, best.mse, target);
  }
  if (wantHoldout && opts.onHoldout && !holdout && split) {
    const r = holdoutFit(samples, split, settings, chosen);
    holdout = holdoutFromResiduals(r.residuals, samples, split.vFrom, r.mse, target);
  }

  const warmModel = warmUsable ? warm.model : undefined;
  const { model, report } = fitRbf(samples.x, samples.y, fitOptions(settings, chosen, warmModel));
  const out: FittedForecaster = {
    version: 1,
    series: settings.series,
    settingsKey: key,
    originIndex,
    originMs,
    stepMs: target.stepMs,
    horizon: H,
    model,
    scaler: samples.scaler,
    featureNames: samples.featureNames,
    chosen,
    auto,
    fitReport: report,
    nSamples: n,
    trainFromMs: target.startMs + samples.originIndex[0] * target.stepMs,
    trainToMs: target.startMs + samples.originIndex[n - 1] * target.stepMs,
    fitMs: 0,
    warmStarted: report.warmStarted,
  };
  out.fitMs = now() - t0;
  if (holdout) opts.onHoldout?.(holdout);
  return out;
}

/** The network's input at an origin (checked by the caller): inputs cut to what is known there. */
function inputAt(fitted: FittedForecaster, target: RegularSeries, exo: Record<string, RegularSeries>, settings: ForecastSettings, originIndex: number) {
  const originMs = target.startMs + originIndex * target.stepMs;
  const known = cutAtIndex(target, originIndex);
  const exoKnown = cutExo(exo, settings, originMs, settings.features.horizon * target.stepMs);
  return buildForecastInput(known, exoKnown, settings.features, fitted.scaler, originIndex);
}

/**
 * Forecasts the H steps after originIndex with a fitted forecaster (usually the origin it was
 * fitted at; a later origin forecasts with the older model). Throws MISSING_INPUT when an input
 * is missing, never returns NaN values.
 */
export function forecastAt(fitted: FittedForecaster, target: RegularSeries, exo: Record<string, RegularSeries>, settings: ForecastSettings, originIndex: number): ForecastOutput {
  checkOrigin(target, settings, originIndex);
  const originMs = target.startMs + originIndex * target.stepMs;
  const H = settings.features.horizon;
  if (fitted.horizon !== H || fitted.model.nOutputs !== H) {
    throw new ForecastError({ code: 'BAD_FITTED', series: settings.series, message: `the fitted model forecasts ${fitted.model.nOutputs} steps, the settings ask for ${H}`, hint: 'refit after changing the horizon' });
  }
  const input = inputAt(fitted, target, exo, settings, originIndex);
  const pred = predictRbf(fitted.model, { data: input.x, rows: 1, cols: input.x.length });
  const values = new Float64Array(H);
  for (let h = 0; h < H; h++) {
    values[h] = pred.y.data[h] + input.base[h];
    if (!Number.isFinite(values[h])) {
      throw new ForecastError({ code: 'MISSING_INPUT', series: settings.series, at: isoAt(originMs), message: `forecast at lead ${h + 1} is not a finite number`, hint: 'check the inputs of this origin for gaps or extreme values' });
    }
  }
  return { originIndex, originMs, targetTimes: input.targetTimes, values, novelty: pred.novelty[0], imputed: input.imputed };
}

/**
 * Novelty (largest Gaussian activation) of the inputs at several origins with one fitted
 * forecaster, in one prediction: the same values forecastAt would give one by one. An origin
 * whose input cannot be built (a gap) gets null.
 */
export function noveltyAt(fitted: FittedForecaster, target: RegularSeries, exo: Record<string, RegularSeries>, settings: ForecastSettings, originIndices: readonly number[]): Array<number | null> {
  const d = fitted.model.nFeatures;
  const rowsOk: number[] = [];
  const x = new Float64Array(originIndices.length * d);
  originIndices.forEach((originIndex, i) => {
    try {
      checkOrigin(target, settings, originIndex);
      x.set(inputAt(fitted, target, exo, settings, originIndex).x, rowsOk.length * d);
      rowsOk.push(i);
    } catch {
      // no input at this origin
    }
  });
  const out: Array<number | null> = originIndices.map(() => null);
  if (rowsOk.length === 0) return out;
  const pred = predictRbf(fitted.model, { data: x.subarray(0, rowsOk.length * d), rows: rowsOk.length, cols: d });
  rowsOk.forEach((i, r) => (out[i] = pred.novelty[r]));
  return out;
}

/** Checks a FittedForecaster read back from JSON (shape and model); throws BAD_FITTED. */
export function parseFittedForecaster(json: string | unknown, series = '(unnamed)'): FittedForecaster {
  let v: unknown = json;
  if (typeof json === 'string') {
    try {
      v = JSON.parse(json);
    } catch (e) {
      throw new ForecastError({ code: 'BAD_FITTED', series, message: `stored forecaster is not valid JSON: ${(e as Error).message}`, hint: 'delete the stored model; the next cycle refits cold' });
    }
  }
  const f = v as FittedForecaster;
  const bad = (what: string): never => {
    throw new ForecastError({ code: 'BAD_FITTED', series, message: `stored forecaster ${what}`, hint: 'delete the stored model; the next cycle refits cold' });
  };
  if (!f || typeof f !== 'object') bad('is not an object');
  if (f.version !== 1) bad(`has version ${String(f.version)}, expected 1`);
  if (typeof f.settingsKey !== 'string') bad('has no settingsKey');
  if (!f.scaler || !Array.isArray(f.scaler.mean) || !Array.isArray(f.scaler.scale) || f.scaler.mean.length !== f.model?.nFeatures || f.scaler.scale.length !== f.model.nFeatures) bad('has a scaler that does not match its model');
  for (let i = 0; i < f.scaler.mean.length; i++) {
    if (!Number.isFinite(f.scaler.mean[i])) bad(`has scaler mean ${String(f.scaler.mean[i])} at index ${i}, not a finite number`);
    if (!(f.scaler.scale[i] > 0 && Number.isFinite(f.scaler.scale[i]))) bad(`has scaler scale ${String(f.scaler.scale[i])} at index ${i}, not a positive finite number`);
  }
  try {
    checkModel(f.model, 'fitted.model');
  } catch (e) {
    bad(`has a damaged model: ${(e as Error).message}`);
  }
  return f;
}

/**
 * How a FittedForecaster is kept in the state store: the older JSON text, or the packed bytes of
 * encodeFittedForecaster. Both decode with decodeFittedForecaster.
 */
export type StoredForecaster = string | Uint8Array;

/** The big numeric arrays of a forecaster, packed as raw float64 in this order. */
const PACKED_ARRAYS = [
  ['model', 'centres'],
  ['model', 'gammas'],
  ['model', 'weights'],
  ['scaler', 'mean'],
  ['scaler', 'scale'],
] as const;
/** "RCFP": radcast forecaster, packed. */
const PACKED_MAGIC = 0x50464352;
const PACKED_VERSION = 1;
/** Bytes before the header JSON: magic, format version, header length, number of float64 values. */
const PACKED_PREFIX = 16;

const utf8Encoder = new TextEncoder();
const utf8Decoder = new TextDecoder('utf-8', { fatal: true });

/**
 * Packs a forecaster for the state store: everything but the big numeric arrays as JSON (as
 * JSON.stringify would write it), the centres, gammas, weights and scaler arrays as raw float64
 * (little-endian), so the bytes decode to exactly the same numbers and are about half the size
 * of the JSON text. Layout: "RCFP", u32 format version, u32 header length, u32 float64 count, the
 * header JSON (`{ f, lengths }`), zero padding to a multiple of 8 bytes, the float64 values.
 * The result owns its ArrayBuffer (it can be transferred between threads).
 */
export function encodeFittedForecaster(f: FittedForecaster): Uint8Array {
  const arrays = PACKED_ARRAYS.map(([part, field]) => (f[part] as unknown as Record<string, ArrayLike<number>>)[field]);
  const lengths = arrays.map((a) => a.length);
  const rest = { ...f, model: { ...f.model, centres: undefined, gammas: undefined, weights: undefined }, scaler: { ...f.scaler, mean: undefined, scale: undefined } };
  const header = utf8Encoder.encode(JSON.stringify({ f: rest, lengths }));
  const valuesAt = PACKED_PREFIX + header.length + ((8 - ((PACKED_PREFIX + header.length) % 8)) % 8);
  const n = lengths.reduce((a, b) => a + b, 0);
  const out = new Uint8Array(valuesAt + 8 * n);
  const view = new DataView(out.buffer);
  view.setUint32(0, PACKED_MAGIC, true);
  view.setUint32(4, PACKED_VERSION, true);
  view.setUint32(8, header.length, true);
  view.setUint32(12, n, true);
  out.set(header, PACKED_PREFIX);
  let at = valuesAt;
  for (const a of arrays) {
    for (let i = 0; i < a.length; i++, at += 8) view.setFloat64(at, a[i], true);
  }
  return out;
}

/** True when the bytes start like a packed forecaster. */
export function isPackedForecaster(b: Uint8Array): boolean {
  return b.length >= PACKED_PREFIX && new DataView(b.buffer, b.byteOffset, b.byteLength).getUint32(0, true) === PACKED_MAGIC;
}

/**
 * A stored forecaster back as a checked FittedForecaster: JSON text (older state files) or the
 * bytes of encodeFittedForecaster. Throws BAD_FITTED (with the series) when it is damaged.
 */
export function decodeFittedForecaster(stored: StoredForecaster | unknown, series = '(unnamed)'): FittedForecaster {
  if (!(stored instanceof Uint8Array)) return parseFittedForecaster(stored, series);
  const bad = (what: string): never => {
    throw new ForecastError({ code: 'BAD_FITTED', series, message: `stored forecaster ${what}`, hint: 'delete the stored model; the next cycle refits cold' });
  };
  if (!isPackedForecaster(stored)) bad(`is ${stored.length} bytes that are not a packed forecaster`);
  const view = new DataView(stored.buffer, stored.byteOffset, stored.byteLength);
  const version = view.getUint32(4, true);
  if (version !== PACKED_VERSION) bad(`is packed in format ${version}, expected ${PACKED_VERSION}`);
  const headerLength = view.getUint32(8, true);
  const n = view.getUint32(12, true);
  const valuesAt = PACKED_PREFIX + headerLength + ((8 - ((PACKED_PREFIX + headerLength) % 8)) % 8);
  if (stored.length !== valuesAt + 8 * n) bad(`is ${stored.length} bytes long, its header says ${valuesAt + 8 * n}`);
  let header: { f?: unknown; lengths?: unknown };
  try {
    header = JSON.parse(utf8Decoder.decode(stored.subarray(PACKED_PREFIX, PACKED_PREFIX + headerLength))) as typeof header;
  } catch (e) {
    return bad(`has an unreadable header: ${(e as Error).message}`);
  }
  const f = header?.f as Record<string, Record<string, unknown>> | undefined;
  const lengths = header?.lengths;
  if (!f || typeof f !== 'object' || !f.model || typeof f.model !== 'object' || !f.scaler || typeof f.scaler !== 'object') return bad('has a header without model and scaler');
  if (!Array.isArray(lengths) || lengths.length !== PACKED_ARRAYS.length || !lengths.every((l) => Number.isInteger(l) && l >= 0)) return bad('has a header without the array lengths');
  if ((lengths as number[]).reduce((a, b) => a + b, 0) !== n) bad(`has array lengths that do not add up to its ${n} values`);
  let at = valuesAt;
  PACKED_ARRAYS.forEach(([part, field], k) => {
    const len = (lengths as number[])[k];
    const a: number[] = [];
    for (let i = 0; i < len; i++, at += 8) a.push(view.getFloat64(at, true));
    f[part][field] = a;
  });
  return parseFittedForecaster(f, series);
}
