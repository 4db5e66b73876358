/**
 * Test fixtures for the engine and the backtest: explicit ForecastSettings (the config layer
 * resolves the same shape from YAML) and seeded synthetic series. Synthetic data is for
 * properties (leakage, coverage); accuracy claims use the open dataset and the demo data.
 */
import type { ForecastSettings } from '../../../src/forecast/types.ts';
import type { FeatureOptions } from '../../../src/series/types.ts';
import type { RegularSeries } from '../../../src/series/types.ts';
import { mulberry32 } from '../../../src/model/random.ts';

export const HOUR = 3_600_000;

export function hourlySettings(over: { series?: string; horizon?: number; windowSteps?: number; lags?: number[]; features?: Partial<FeatureOptions>; fit?: Partial<ForecastSettings['fit']>; quantiles?: number[] } = {}): ForecastSettings {
  const horizon = over.horizon ?? 24;
  const series = over.series ?? 'synthetic';
  return {
    series,
    stepMs: HOUR,
    windowSteps: over.windowSteps ?? 24 * 28,
    regularize: { aggregation: 'mean', duplicates: 'last', maxFillSteps: 3 },
    features: {
      series,
      timeZone: 'UTC',
      horizon,
      lags: over.lags ?? [1, 2, 3, 24],
      seasonSteps: 24,
      seasonalInputs: true,
      calendar: { hourOfDay: true, dayOfWeek: true, dayOfYear: false, holidays: null, extraDates: [] },
      exogenous: [],
      targetMode: 'level',
      groupWeights: { lags: 1, calendar: 1, exogenous: 1 },
      ...over.features,
    },
    fit: {
      nCentres: 16,
      widthMode: 'shared',
      ridge: 1e-3,
      linearTerms: true,
      restarts: 2,
      maxPasses: 50,
      widthIterations: 3,
      widthTol: 1e-3,
      validationFraction: 0.2,
      seed: 7,
      subsampleRows: 0,
      ...over.fit,
    },
    quantiles: over.quantiles ?? [0.1, 0.9],
  };
}

/** Seeded uniform [0, 1) source: the model's mulberry32, so fixtures are reproducible. */
export const rng = mulberry32;

/** Standard normal by Box-Muller. */
export function gaussian(r: () => number): () => number {
  return () => {
    const u = Math.max(r(), 1e-12);
    return Math.sqrt(-2 * Math.log(u)) * Math.cos(2 * Math.PI * r());
  };
}

/** Daily sine cycle + a weekday/weekend shift + i.i.d. Gaussian noise of sd `noiseSd`. */
export function syntheticHourly(nSteps: number, seed: number, noiseSd = 1, startMs = Date.UTC(2024, 0, 1)): RegularSeries {
  const g = gaussian(rng(seed));
  const values = new Float64Array(nSteps);
  for (let i = 0; i < nSteps; i++) {
    const hour = i % 24;
    const day = Math.floor(i / 24) % 7;
    values[i] = 50 + 10 * Math.sin((2 * Math.PI * hour) / 24) + (day >= 5 ? -6 : 0) + noiseSd * g();
  }
  return { startMs, stepMs: HOUR, values, stats: { readingsIn: nSteps, dropped: 0, outOfRange: 0, duplicates: 0, filled: 0, missingSteps: 0 } };
}
