/**
 * Regular series -> feature matrix and multi-step targets (training), and the feature vector of
 * one forecast origin. Convention: origin o means values[0..o] are known; the targets are
 * values[o+1 .. o+H]; the first target bucket starts at startMs + (o+1) * stepMs.
 *
 * Raw features of origin o, in this order (names in parentheses):
 *  - lags (lag_k): values[o - k + 1] for each configured k (lag 1 = values[o]);
 *  - seasonal inputs (season_h{h}), if enabled: for each target step h the latest value one
 *    or more whole seasons before the target that is known at the origin:
 *    values[o + h - S * ceil(h / S)] (one season earlier when h <= S);
 *  - exogenous, per spec: lagged (NAME_lag_k) at exo index o' - k + 1, and at each target time
 *    (NAME_at_h{h}) at exo index o' + h, where o' is the exo index of the origin step;
 *  - calendar (hour_sin ... holiday_d{d}) of the first target bucket's start instant.
 * Groups: lags + seasonal inputs -> 'lags', calendar -> 'calendar', exogenous -> 'exogenous'.
 */
import type { Dense } from '../model/types.ts';
import { CalendarEncoder } from './calendar.ts';
import { isoAt, SeriesError } from './errors.ts';
import { DAY_MS } from './zone.ts';
import type { FeatureGroup, FeatureOptions, RegularSeries, SampleSet, SampleStats, Scaler } from './types.ts';

/** Relative tolerance under which a training standard deviation counts as zero. */
const CONSTANT_REL_TOL = 1e-12;

interface ExoPlan {
  name: string;
  series: RegularSeries;
  /** exoIndex = targetIndex + shift */
  shift: number;
  lags: number[];
  atTarget: boolean;
}

/** Everything needed to compute raw features of any origin, resolved once per build call. */
export interface FeatureLayout {
  series: string;
  names: string[];
  groups: FeatureGroup[];
  /** For diagnostics: which series a feature reads and at which index relative to the origin (NaN = calendar). */
  sourceName: string[];
  sourceRel: number[];
  nFeatures: number;
  horizon: number;
  lags: number[];
  seasonSteps: number;
  seasonalInputs: boolean;
  targetMode: FeatureOptions['targetMode'];
  exo: ExoPlan[];
  calendar: CalendarEncoder;
  /** Inputs and base of origin o read target indices down to o - lookback + 1. */
  lookback: number;
  /** Exogenous inputs read exo indices down to o' - exoLookback + 1 (0 = none lagged). */
  exoLookback: number;
  stepMs: number;
  startMs: number;
  groupWeights: FeatureOptions['groupWeights'];
}

/** Index one or more whole seasons before target step h that is known at the origin (relative to o). */
function seasonalRel(h: number, seasonSteps: number): number {
  return h - seasonSteps * Math.ceil(h / seasonSteps);
}

function badOption(series: string, field: string, message: string, hint: string): never {
  throw new SeriesError({ code: 'BAD_OPTIONS', series, field, message, hint });
}

function checkSteps(series: string, field: string, list: number[]): void {
  const seen = new Set<number>();
  for (const k of list) {
    if (!Number.isInteger(k) || k < 1) badOption(series, field, `lag ${k} is not a positive whole number of steps`, 'use steps like 1, 2, 24, 168');
    if (seen.has(k)) badOption(series, field, `lag ${k} appears twice`, 'list each lag once');
    seen.add(k);
  }
}

/** Validate options, resolve exogenous series onto the target grid and name the features. */
export function planFeatures(target: RegularSeries, exo: Record<string, RegularSeries>, opts: FeatureOptions): FeatureLayout {
  const s = opts.series;
  if (!Number.isInteger(opts.horizon) || opts.horizon < 1) badOption(s, 'horizon', `horizon=${opts.horizon} is not a positive whole number of steps`, 'e.g. 24 for next-day hourly forecasts');
  checkSteps(s, 'lags', opts.lags);
  const needSeason = opts.seasonalInputs || opts.targetMode === 'seasonal';
  if (needSeason && (!Number.isInteger(opts.seasonSteps) || opts.seasonSteps < 1)) badOption(s, 'seasonSteps', `seasonSteps=${opts.seasonSteps} is not a positive whole number`, 'e.g. 24 for hourly data with a daily cycle');
  if (!['absolute', 'level', 'seasonal'].includes(opts.targetMode)) badOption(s, 'targetMode', `unknown targetMode "${String(opts.targetMode)}"`, 'use absolute, level or seasonal');
  for (const g of ['lags', 'calendar', 'exogenous'] as const) {
    const w = opts.groupWeights[g];
    if (!Number.isFinite(w) || w < 0) badOption(s, `groupWeights.${g}`, `weight ${w} is not a finite number >= 0`, 'use 1 for equal weight, 0 to ignore the group');
  }

  const names: string[] = [];
  const groups: FeatureGroup[] = [];
  const sourceName: string[] = [];
  const sourceRel: number[] = [];
  const add = (name: string, group: FeatureGroup, src: string, rel: number): void => {
    names.push(name);
    groups.push(group);
    sourceName.push(src);
    sourceRel.push(rel);
  };

  let lookback = 1; // the origin value itself (level base, seasonal inputs at h = S)
  for (const k of opts.lags) {
    add(`lag_${k}`, 'lags', s, 1 - k);
    lookback = Math.max(lookback, k);
  }
  if (needSeason) lookback = Math.max(lookback, opts.seasonSteps);
  if (opts.seasonalInputs) {
    for (let h = 1; h <= opts.horizon; h++) add(`season_h${h}`, 'lags', s, seasonalRel(h, opts.seasonSteps));
  }

  const plans: ExoPlan[] = [];
  let exoLookback = 0;
  for (const spec of opts.exogenous) {
    const e = exo[spec.name];
    if (e === undefined) {
      throw new SeriesError({
        code: 'MISSING_EXOGENOUS',
        series: s,
        field: `exogenous.${spec.name}`,
        message: `exogenous series "${spec.name}" was not supplied`,
        hint: `read ${spec.name} from the store and pass it, or remove it from the exogenous inputs`,
      });
    }
    const shiftMs = target.startMs - e.startMs;
    if (e.stepMs !== target.stepMs || shiftMs % target.stepMs !== 0) {
      throw new SeriesError({
        code: 'GRID_MISMATCH',
        series: s,
        field: `exogenous.${spec.name}`,
        message: `exogenous "${spec.name}" (step ${e.stepMs} ms, start ${isoAt(e.startMs)}) is not on the grid of the target (step ${target.stepMs} ms, start ${isoAt(target.startMs)})`,
        hint: 'regularize the exogenous series with the same stepMs and a start aligned to the target grid',
      });
    }
    checkSteps(s, `exogenous.${spec.name}.lags`, spec.lags);
    if (spec.lags.length === 0 && !spec.atTarget) badOption(s, `exogenous.${spec.name}`, 'no lags and atTarget off: the input would add no features', 'add lags or set atTarget');
    for (const k of spec.lags) {
      add(`${spec.name}_lag_${k}`, 'exogenous', spec.name, 1 - k);
      exoLookback = Math.max(exoLookback, k);
    }
    if (spec.atTarget) for (let h = 1; h <= opts.horizon; h++) add(`${spec.name}_at_h${h}`, 'exogenous', spec.name, h);
    plans.push({ name: spec.name, series: e, shift: shiftMs / target.stepMs, lags: spec.lags, atTarget: spec.atTarget });
  }

  // Holiday flags for every local day the targets can touch: the day of the first target and
  // the following days up to the last target.
  const spanMs = (opts.horizon - 1) * target.stepMs;
  const nHolidayDays = Math.floor(spanMs / DAY_MS) + (target.stepMs < DAY_MS ? 2 : 1);
  const calendar = new CalendarEncoder(opts.timeZone, opts.calendar, nHolidayDays, s);
  for (const n of calendar.names) add(n, 'calendar', '', NaN);

  return {
    series: s,
    names,
    groups,
    sourceName,
    sourceRel,
    nFeatures: names.length,
    horizon: opts.horizon,
    lags: opts.lags,
    seasonSteps: opts.seasonSteps,
    seasonalInputs: opts.seasonalInputs,
    targetMode: opts.targetMode,
    exo: plans,
    calendar,
    lookback: Math.max(lookback, exoLookback),
    exoLookback,
    stepMs: target.stepMs,
    startMs: target.startMs,
    groupWeights: opts.groupWeights,
  };
}

function at(values: Float64Array, i: number, limit: number): number {
  return i >= 0 && i < values.length && i < limit ? values[i] : NaN;
}

/**
 * Exclusive bound on the indices that may be read when everything after `known` is unknown:
 * an interpolated run that contains `known` was filled from a value after it, so that whole run
 * counts as missing.
 */
export function knownLimit(series: RegularSeries, known: number): number {
  const f = series.filled;
  let p = Math.min(known, series.values.length - 1);
  if (f !== undefined) while (p >= 0 && f[p] === 1) p--;
  return p + 1;
}

/** Per-call read limits (exclusive indices) of the target and each exogenous series. */
export interface ReadLimits {
  target: number;
  exo: number[];
}

const NO_LIMITS: ReadLimits = { target: Infinity, exo: [] };

/**
 * Raw (unscaled) features of origin o into out[offset .. offset + nFeatures). Missing inputs
 * are written as NaN; returns how many were missing.
 */
export function rawFeatures(
  layout: FeatureLayout,
  target: RegularSeries,
  o: number,
  out: Float64Array,
  offset = 0,
  limits: ReadLimits = NO_LIMITS,
): number {
  const v = target.values;
  const tEnd = Math.min(v.length, limits.target); // readable target indices: [0, tEnd)
  const H = layout.horizon;
  let j = offset;
  let missing = 0;
  const lags = layout.lags;
  for (let q = 0; q < lags.length; q++) {
    const i = o - lags[q] + 1;
    const x = i >= 0 && i < tEnd ? v[i] : NaN;
    if (x !== x) missing++;
    out[j++] = x;
  }
  if (layout.seasonalInputs) {
    const S = layout.seasonSteps;
    for (let h = 1; h <= H; h++) {
      const i = o + h - S * Math.ceil(h / S);
      const x = i >= 0 && i < tEnd ? v[i] : NaN;
      if (x !== x) missing++;
      out[j++] = x;
    }
  }
  for (let q = 0; q < layout.exo.length; q++) {
    const e = layout.exo[q];
    const ev = e.series.values;
    const eEnd = Math.min(ev.length, limits.exo[q] ?? Infinity);
    const oe = o + e.shift;
    for (let p = 0; p < e.lags.length; p++) {
      const i = oe - e.lags[p] + 1;
      const x = i >= 0 && i < eEnd ? ev[i] : NaN;
      if (x !== x) missing++;
      out[j++] = x;
    }
    if (e.atTarget) {
      for (let h = 1; h <= H; h++) {
        const i = oe + h;
        const x = i >= 0 && i < eEnd ? ev[i] : NaN;
        if (x !== x) missing++;
        out[j++] = x;
      }
    }
  }
  layout.calendar.encode(layout.startMs + (o + 1) * layout.stepMs, out, j);
  return missing;
}

/**
 * Base of origin o for each target step (prediction in target space + base = value):
 * absolute -> 0, level -> values[o], seasonal -> values[o + h - S * ceil(h / S)].
 * Returns false if a base value is missing.
 */
export function targetBase(layout: FeatureLayout, target: RegularSeries, o: number, out: Float64Array, offset = 0, limit = Infinity): boolean {
  const v = target.values;
  const H = layout.horizon;
  if (layout.targetMode === 'absolute') {
    for (let h = 0; h < H; h++) out[offset + h] = 0;
    return true;
  }
  if (layout.targetMode === 'level') {
    const b = at(v, o, limit);
    for (let h = 0; h < H; h++) out[offset + h] = b;
    return !Number.isNaN(b);
  }
  let ok = true;
  for (let h = 1; h <= H; h++) {
    const b = at(v, o + seasonalRel(h, layout.seasonSteps), limit);
    if (Number.isNaN(b)) ok = false;
    out[offset + h - 1] = b;
  }
  return ok;
}

/** True when filled[i..end] are all 1: an interpolated value at i then used a value after `end`. */
function fillReachesPast(filled: Uint8Array | undefined, i: number, end: number): boolean {
  if (filled === undefined || i > end || i < 0) return false;
  for (let p = i; p <= end; p++) if (p >= filled.length || filled[p] !== 1) return false;
  return true;
}

/** Fit the per-feature standardisation on rows of raw (nRows x nFeatures). */
export function fitScaler(raw: Float64Array, nRows: number, layout: FeatureLayout): Scaler {
  const nF = layout.nFeatures;
  // two row-major passes (cache friendly): mean, then population variance sum((x - mean)^2) / n
  const mu = new Float64Array(nF);
  const ss = new Float64Array(nF);
  for (let r = 0; r < nRows; r++) {
    const off = r * nF;
    for (let f = 0; f < nF; f++) mu[f] += raw[off + f];
  }
  if (nRows > 0) for (let f = 0; f < nF; f++) mu[f] /= nRows;
  for (let r = 0; r < nRows; r++) {
    const off = r * nF;
    for (let f = 0; f < nF; f++) {
      const d = raw[off + f] - mu[f];
      ss[f] += d * d;
    }
  }
  const mean = new Array<number>(nF);
  const scale = new Array<number>(nF);
  const constant = new Array<boolean>(nF);
  for (let f = 0; f < nF; f++) {
    const sd = nRows > 0 ? Math.sqrt(ss[f] / nRows) : 0;
    const w = layout.groupWeights[layout.groups[f]];
    mean[f] = mu[f];
    constant[f] = !(sd > CONSTANT_REL_TOL * Math.max(1, Math.abs(mu[f]))) || w === 0;
    scale[f] = constant[f] ? 1 : sd / w;
  }
  return { mean, scale, constant, featureNames: layout.names.slice() };
}

/** x = (raw - mean) / scale; constant features map to 0. In place on nRows rows of raw from offset. */
export function applyScaler(scaler: Scaler, raw: Float64Array, offset = 0, nRows = 1): void {
  const nF = scaler.mean.length;
  const mean = Float64Array.from(scaler.mean);
  const mult = new Float64Array(nF);
  for (let f = 0; f < nF; f++) mult[f] = scaler.constant[f] ? 0 : 1 / scaler.scale[f];
  for (let r = 0; r < nRows; r++) {
    const off = offset + r * nF;
    for (let f = 0; f < nF; f++) raw[off + f] = (raw[off + f] - mean[f]) * mult[f];
  }
}

function tooLittle(series: string, message: string, hint: string, details: Record<string, number>, atMs?: number): never {
  throw new SeriesError({
    code: 'TOO_LITTLE_HISTORY',
    series,
    message,
    hint,
    details,
    ...(atMs !== undefined ? { at: isoAt(atMs) } : {}),
  });
}

export interface SampleSelection {
  /** Last index whose value may be used (inputs and targets at indices <= lastKnownIndex). */
  lastKnownIndex: number;
  /** Inputs and targets lie at indices > lastKnownIndex - windowSteps. */
  windowSteps: number;
  /** Fewer usable samples than this is a TOO_LITTLE_HISTORY error (default 1). */
  minSamples?: number;
}

/**
 * Training samples of the window (lastKnownIndex - windowSteps, lastKnownIndex]: every input,
 * base and target of every sample lies inside it. Origins with a missing input, base or target
 * are skipped. Interpolation reads the value after a gap, so two more rules keep later values
 * out: an interpolated run that reaches past lastKnownIndex counts as missing, and an origin whose
 * own step (or the newest step of a lagged exogenous input) was interpolated is skipped. The
 * scaler is fitted on the kept samples only. Throws TOO_LITTLE_HISTORY (details: needed,
 * available) when the window cannot hold minSamples samples or fewer remain after skipping.
 */
export function buildSamples(
  target: RegularSeries,
  exo: Record<string, RegularSeries>,
  opts: FeatureOptions,
  sel: SampleSelection,
): SampleSet {
  const layout = planFeatures(target, exo, opts);
  const s = opts.series;
  const H = layout.horizon;
  const nF = layout.nFeatures;
  const L = sel.lastKnownIndex;
  const W = sel.windowSteps;
  if (!Number.isInteger(L) || !Number.isInteger(W) || W < 1) badOption(s, 'windowSteps', `lastKnownIndex=${L}, windowSteps=${W} must be whole numbers, windowSteps >= 1`, 'pass grid indices');
  const minSamples = sel.minSamples ?? 1;
  const lo = Math.max(0, L - W + 1);
  const hi = Math.min(L, target.values.length - 1);
  const oMin = lo + layout.lookback - 1;
  const needed = layout.lookback + H + minSamples - 1;
  const available = Math.max(0, hi - lo + 1);
  if (hi - H < oMin + minSamples - 1) {
    const reason = W < needed
      ? `windowSteps=${W} is shorter than the ${needed} steps needed`
      : `only ${available} steps of history are available`;
    tooLittle(
      s,
      `needs ${needed} steps (longest lookback ${layout.lookback} + horizon ${H}${minSamples > 1 ? ` + ${minSamples - 1} more samples` : ''}) inside the training window; ${reason}`,
      W < needed ? `raise windowSteps to at least ${needed} or shorten the lags/horizon` : 'wait for more data or read further back from the store',
      { needed, available, windowSteps: W, lookback: layout.lookback, horizon: H },
    );
  }
  // Values interpolated from a value after L count as unknown (targets stop before them).
  const limits: ReadLimits = {
    target: knownLimit(target, hi),
    exo: layout.exo.map((e) => knownLimit(e.series, hi + e.shift)),
  };
  const oMax = limits.target - 1 - H;

  const nCand = Math.max(0, oMax - oMin + 1);
  const raw = new Float64Array(nCand * nF);
  const y = new Float64Array(nCand * H);
  const base = new Float64Array(nCand * H);
  const origins = new Int32Array(nCand);
  const v = target.values;
  // Per exogenous series: newest index read relative to the exo origin, and the index it is known through.
  const exoNewest = layout.exo.map((e) => (e.atTarget ? H : 1 - Math.min(...e.lags)));
  const exoKnown = layout.exo.map((e) => (e.atTarget ? H : 0));
  let n = 0;
  let skippedMissing = 0;
  let skippedFilledOrigin = 0;
  let firstMissingOrigin = -1;
  for (let o = oMin; o <= oMax; o++) {
    // An interpolated origin value was filled from a later value: its inputs would know the future.
    let leaks = fillReachesPast(target.filled, o, o);
    for (let q = 0; q < layout.exo.length && !leaks; q++) {
      const e = layout.exo[q];
      const oe = o + e.shift;
      if (fillReachesPast(e.series.filled, oe + exoNewest[q], oe + exoKnown[q])) leaks = true;
    }
    if (leaks) {
      skippedFilledOrigin++;
      continue;
    }
    const missing = rawFeatures(layout, target, o, raw, n * nF, limits);
    let ok = missing === 0 && targetBase(layout, target, o, base, n * H, limits.target);
    if (ok) {
      for (let h = 1; h <= H; h++) {
        const t = v[o + h];
        if (Number.isNaN(t)) {
          ok = false;
          break;
        }
        y[n * H + h - 1] = t - base[n * H + h - 1];
      }
    }
    if (!ok) {
      skippedMissing++;
      if (firstMissingOrigin < 0) firstMissingOrigin = o;
      continue;
    }
    origins[n] = o;
    n++;
  }
  if (n < minSamples) {
    tooLittle(
      s,
      `${n} usable samples of ${nCand} candidate origins, ${minSamples} needed: ${skippedMissing} skipped for missing values, ${skippedFilledOrigin} for an interpolated origin`,
      'fill the gaps in the store, raise maxFillSteps, or lengthen the training window',
      { needed: minSamples, available: n, candidates: nCand, skippedMissing, skippedFilledOrigin },
      firstMissingOrigin >= 0 ? target.startMs + (firstMissingOrigin + 1) * target.stepMs : undefined,
    );
  }

  const scaler = fitScaler(raw, n, layout);
  applyScaler(scaler, raw, 0, n);
  const stats: SampleStats = { candidates: nCand, skippedMissing, skippedFilledOrigin, usableSamples: n };
  // subarray, not a copy: the unused tail of skipped candidates stays in the buffer
  const dense = (data: Float64Array, cols: number): Dense => ({ data: data.subarray(0, n * cols), rows: n, cols });
  return {
    x: dense(raw, nF),
    y: dense(y, H),
    base: dense(base, H),
    originIndex: origins.slice(0, n),
    featureNames: layout.names.slice(),
    featureGroups: layout.groups.slice(),
    scaler,
    stats,
  };
}

export interface ForecastInputPolicy {
  /**
   * At most this many missing inputs are replaced by their training mean (scaled value 0)
   * instead of failing; their names are returned in `imputed`. Default 0: any missing input
   * is a MISSING_INPUT error. A missing base value is always an error.
   */
  imputeMissingMax?: number;
}

export interface ForecastInput {
  /** Scaled, group-weighted features (same order as the training features). */
  x: Float64Array;
  /** Per target step: value = prediction in target space + base. */
  base: Float64Array;
  /** Start instant (epoch ms) of each target bucket. */
  targetTimes: number[];
  /** Names of features that were missing and replaced by their training mean. */
  imputed: string[];
}

/**
 * Feature vector for forecasting the H steps after originIndex with a scaler from buildSamples.
 * Exogenous inputs used at target time must be present (observed or forecast) up to the last
 * target step in the exogenous series passed in. Interpolated runs that reach past the origin
 * (or past the last target step, for at-target exogenous inputs) count as missing, exactly as in
 * training. Missing inputs throw MISSING_INPUT (field = feature name, at = its instant) unless
 * policy.imputeMissingMax allows imputing them with the training mean.
 */
export function buildForecastInput(
  target: RegularSeries,
  exo: Record<string, RegularSeries>,
  opts: FeatureOptions,
  scaler: Scaler,
  originIndex: number,
  policy: ForecastInputPolicy = {},
): ForecastInput {
  const layout = planFeatures(target, exo, opts);
  const s = opts.series;
  const nF = layout.nFeatures;
  const H = layout.horizon;
  if (scaler.mean.length !== nF || scaler.featureNames.some((n, i) => n !== layout.names[i])) {
    throw new SeriesError({
      code: 'SCALER_MISMATCH',
      series: s,
      message: `the scaler has ${scaler.mean.length} features, the options give ${nF}`,
      hint: 'refit after changing lags, horizon, calendar or exogenous options',
      field: 'scaler',
    });
  }
  if (!Number.isInteger(originIndex)) badOption(s, 'originIndex', `originIndex=${originIndex} is not a whole number`, 'pass a grid index');
  const x = new Float64Array(nF);
  // Interpolated runs that reach past what is known at the origin count as missing.
  const limits: ReadLimits = {
    target: knownLimit(target, originIndex),
    exo: layout.exo.map((e) => knownLimit(e.series, originIndex + e.shift + (e.atTarget ? H : 0))),
  };
  const missing = rawFeatures(layout, target, originIndex, x, 0, limits);
  const imputed: string[] = [];
  if (missing > 0) {
    const allowed = policy.imputeMissingMax ?? 0;
    const first = x.findIndex((val) => Number.isNaN(val));
    if (missing > allowed) {
      const src = layout.sourceName[first];
      const srcSeries = src === s ? target : layout.exo.find((e) => e.name === src)!.series;
      const shift = src === s ? 0 : layout.exo.find((e) => e.name === src)!.shift;
      const idx = originIndex + shift + layout.sourceRel[first];
      throw new SeriesError({
        code: 'MISSING_INPUT',
        series: s,
        field: layout.names[first],
        at: isoAt(srcSeries.startMs + idx * srcSeries.stepMs),
        message: `${missing} of ${nF} inputs are missing at origin ${isoAt(target.startMs + (originIndex + 1) * target.stepMs)} (first: ${layout.names[first]} from ${src})`,
        hint: src === s ? 'the series has a gap longer than maxFillSteps within the lags; wait for data or raise maxFillSteps' : `supply ${src} (observed or forecast) up to the last target time`,
        details: { missing, allowed },
      });
    }
    for (let f = 0; f < nF; f++) {
      if (Number.isNaN(x[f])) {
        x[f] = scaler.mean[f];
        imputed.push(layout.names[f]);
      }
    }
  }
  applyScaler(scaler, x);
  const base = new Float64Array(H);
  if (!targetBase(layout, target, originIndex, base, 0, limits.target)) {
    throw new SeriesError({
      code: 'MISSING_INPUT',
      series: s,
      field: 'base',
      at: isoAt(target.startMs + originIndex * target.stepMs),
      message: `the ${layout.targetMode} target base is missing at origin ${isoAt(target.startMs + (originIndex + 1) * target.stepMs)}`,
      hint: layout.targetMode === 'level' ? 'the origin step has no value: forecast from the last step with a value' : 'a value one season before a target step is missing',
    });
  }
  const targetTimes: number[] = [];
  for (let h = 1; h <= H; h++) targetTimes.push(target.startMs + (originIndex + h) * target.stepMs);
  return { x, base, targetTimes, imputed };
}
