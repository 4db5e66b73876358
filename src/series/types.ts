/**
 * Contracts of the series layer (src/series): raw readings -> regular grid -> features/targets.
 * Pure functions; times are epoch milliseconds (UTC instants).
 */
import type { Dense } from '../model/types.ts';

/** One raw reading as it comes out of a store. v may be anything the store returned. */
export interface Reading {
  t: number;
  v: number;
}

export type Aggregation = 'mean' | 'sum' | 'last' | 'max' | 'min';
export type DuplicatePolicy = 'last' | 'mean';

export interface RegularizeOptions {
  stepMs: number;
  /** First bucket start (inclusive), aligned to stepMs. */
  startMs: number;
  /** End (exclusive). */
  endMs: number;
  aggregation: Aggregation;
  duplicates: DuplicatePolicy;
  /** Gaps of at most this many missing steps are filled by linear interpolation. */
  maxFillSteps: number;
}

export interface RegularizeStats {
  readingsIn: number;
  dropped: number;
  filled: number;
  missingSteps: number;
}

/** A series on a fixed grid: values[i] is the bucket starting at startMs + i * stepMs; NaN = missing. */
export interface RegularSeries {
  startMs: number;
  stepMs: number;
  values: Float64Array;
  stats: RegularizeStats;
}

/** How the model target is expressed. 'absolute' = raw value; 'level' = minus the last observed value; 'seasonal' = minus the value one season earlier. */
export type TargetMode = 'absolute' | 'level' | 'seasonal';

export interface CalendarOptions {
  hourOfDay: boolean;
  dayOfWeek: boolean;
  dayOfYear: boolean;
  /** date-holidays country code (e.g. "DE"), optional state/region; null = no public holidays. */
  holidays: { country: string; state?: string; region?: string } | null;
  /** Extra local dates (YYYY-MM-DD) flagged like holidays: shutdowns, local events. */
  extraDates: string[];
}

export interface ExogenousSpec {
  /** Name of the other series. */
  name: string;
  /** Lags (in steps) of the exogenous series used as inputs. */
  lags: number[];
  /** Use the value at each target time (requires a forecast of it to be available at forecast time). */
  atTarget: boolean;
}

export interface FeatureOptions {
  /** Series name, used in error messages. */
  series: string;
  timeZone: string;
  horizon: number;
  /** Lags in steps (1 = the last observed value at the origin). */
  lags: number[];
  /** Season length in steps (e.g. 24 for hourly data with a daily cycle). */
  seasonSteps: number;
  /** Add the value one season before each target step as an input. */
  seasonalInputs: boolean;
  calendar: CalendarOptions;
  exogenous: ExogenousSpec[];
  targetMode: TargetMode;
  /** Distance weights per feature group, applied after standardising. */
  groupWeights: { lags: number; calendar: number; exogenous: number };
}

/** Per-feature standardisation fitted on the training window only. */
export interface Scaler {
  mean: number[];
  /** Scale already multiplied by 1/groupWeight; constant features get scale 1. */
  scale: number[];
}

export interface SampleSet {
  /** nSamples x nFeatures, standardised and group-weighted. */
  x: Dense;
  /** nSamples x horizon, in target space (see targetMode). */
  y: Dense;
  /** nSamples x horizon: add to a prediction in target space to get the value. */
  base: Dense;
  /** Index o into the regular series of each sample's origin: values[0..o] are known, targets are values[o+1 .. o+horizon]. */
  originIndex: Int32Array;
  featureNames: string[];
  scaler: Scaler;
}
