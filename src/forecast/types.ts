/**
 * Contract between config (src/config), the forecast engine (src/forecast/engine.ts) and its
 * callers (daemon cycle, backtest, tune). The config layer resolves a series entry into a
 * ForecastSettings; the engine fits and forecasts from it. Pure data.
 */
import type { FeatureOptions, RegularizeOptions } from '../series/types.ts';
import type { FitOptions, WidthMode } from '../model/types.ts';

/** Fit options as configured: the three tunables may be 'auto' (chosen on a validation tail before the origin). */
export interface ConfiguredFit extends Omit<FitOptions, 'nCentres' | 'widthMode' | 'ridge' | 'warmStart'> {
  nCentres: number | 'auto';
  widthMode: WidthMode | 'auto';
  ridge: number | 'auto';
}

export interface ForecastSettings {
  series: string;
  stepMs: number;
  /** Training window length in steps (samples whose inputs and targets fall inside it). */
  windowSteps: number;
  regularize: Omit<RegularizeOptions, 'startMs' | 'endMs' | 'stepMs'>;
  features: FeatureOptions;
  fit: ConfiguredFit;
  /** Band quantiles in (0, 1), e.g. [0.1, 0.9]. */
  quantiles: number[];
}
