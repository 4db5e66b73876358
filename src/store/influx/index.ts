/** InfluxDB adapter (v1 and v2 API) behind SeriesStore. See store.ts for the design and schema.ts for the output layout. */
import { InfluxStore } from './store.ts';
import type { InfluxStoreOptions } from './options.ts';

export { InfluxStore, type InfluxStoreStats } from './store.ts';
export { INFLUX_DEFAULTS, type InfluxStoreOptions, type InfluxV1Options, type InfluxV2Options, type MeasurementNames } from './options.ts';
export { StoreError, type StoreErrorCode } from './errors.ts';
export { Backoff, type BackoffOptions } from './backoff.ts';
export type { OutboxStats } from './outbox.ts';
export type { PointSpool, SpooledLine } from './spool.ts';
export type { Logger as StoreLogger } from './log.ts';
export { quantileField } from './schema.ts';

export function createInfluxStore(opts: InfluxStoreOptions): InfluxStore {
  return new InfluxStore(opts);
}
