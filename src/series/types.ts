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
  /** Series name for error messages (optional). */
  series?: string;
}

export interface RegularizeStats {
  /** Readings passed in. */
  readingsIn: number;
  /** Readings dropped because t or v was not a finite number. */
  dropped: number;
  /** Valid readings outside [startMs, endMs), ignored. */
  outOfRange: number;
  /** Readings merged into another one with the same timestamp. */
  duplicates: number;
  /** Steps filled by linear interpolation. */
  filled: number;
  /** Steps still missing (NaN) after filling. */
  missingSteps: number;
}

/** A series on a fixed grid: values[i] is the bucket starting at startMs + i * stepMs; NaN = missing. */
export interface RegularSeries {
  startMs: number;
  stepMs: number;
  values: Float64Array;
  /** 1 where values[i] was interpolated rather than observed (absent = all observed). */
  filled?: Uint8Array;
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
  /** Training mean of each raw feature. */
  mean: number[];
  /** Training standard deviation divided by the feature's group weight: x = (raw - mean) / scale. Constant features get scale 1. */
  scale: number[];
  /** Features that were constant on the training window (or whose group weight is 0): they always map to 0, so they add nothing to distances. */
  constant: boolean[];
  /** Feature names in order, checked when the scaler is applied to a new vector. */
  featureNames: string[];
}

export type FeatureGroup = 'lags' | 'calendar' | 'exogenous';

/** Counts of one buildSamples call. */
export interface SampleStats {
  /** Origins whose inputs and targets fall inside the window. */
  candidates: number;
  /** Candidates skipped because an input, target or base value was missing. */
  skippedMissing: number;
  /** Candidates skipped because the origin step itself was interpolated (its fill used a later value). */
  skippedFilledOrigin: number;
  /** Samples in the set. */
  usableSamples: number;
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
  /** Group of each feature (same order as featureNames). */
  featureGroups: FeatureGroup[];
  scaler: Scaler;
  stats: SampleStats;
}
