/** Public surface of the series layer: raw readings -> regular grid -> features and targets. */
export * from './types.ts';
export { SeriesError, type SeriesErrorCode, type SeriesErrorInit } from './errors.ts';
export { regularize, lastValueIndex, indexAt } from './regularize.ts';
export {
  buildSamples,
  buildForecastInput,
  planFeatures,
  rawFeatures,
  targetBase,
  fitScaler,
  applyScaler,
  type FeatureLayout,
  type SampleSelection,
  type ForecastInput,
  type ForecastInputPolicy,
} from './features.ts';
export { CalendarEncoder, type LocalFields } from './calendar.ts';
export { ZoneClock, zoneClock, daysFromCivil, civilFromDays, DAY_MS, HOUR_MS } from './zone.ts';
export { publicHolidayDays, parseLocalDate, type HolidayRegion } from './holidays.ts';
