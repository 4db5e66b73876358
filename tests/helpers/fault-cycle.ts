/**
 * Shared pieces of the reliability suite (tests/reliability): the list of documented error codes a
 * series cycle may end with, a checker for written forecasts, an unhandled-rejection trap, and a
 * small, fast series configuration so many cycles fit in a test budget.
 */
import type { ForecastBatch, HealthPoint } from '../../src/store/types.ts';
import { DRIFT_STATE_CODE } from '../../src/store/types.ts';

/**
 * Codes a cycle may report, as the layers document them: src/daemon/cycle.ts (INPUT_STALE,
 * NON_FINITE_FORECAST, SHUTDOWN_ABORTED), src/forecast/errors.ts (ForecastErrorCode),
 * src/series/errors.ts (SeriesErrorCode), src/model/errors.ts (ModelErrorCode) and the store
 * adapters (src/store/influx/errors.ts, src/store/embedded.ts). INTERNAL / UNEXPECTED mean "an
 * error without a code" — a crash that was caught — and are deliberately NOT in this list.
 */
export const DOCUMENTED_CYCLE_CODES = new Set([
  // daemon
  'INPUT_STALE',
  'NON_FINITE_FORECAST',
  'SHUTDOWN_ABORTED',
  // forecast engine
  'BAD_SETTINGS',
  'ORIGIN_OUT_OF_RANGE',
  'TOO_LITTLE_HISTORY',
  'NO_ORIGINS',
  'MISSING_INPUT',
  'BAD_FITTED',
  'WORKER_FAILED',
  // series layer
  'BAD_OPTIONS',
  'GRID_MISMATCH',
  'MISSING_EXOGENOUS',
  'SCALER_MISMATCH',
  // numeric core
  'BAD_SHAPE',
  'DIMENSION_MISMATCH',
  'NON_FINITE',
  'TOO_FEW_SAMPLES',
  'BAD_OPTION',
  'SINGULAR_SYSTEM',
  'BAD_MODEL',
  'OUT_OF_RANGE',
]);

/** Store codes a cycle may end with when the store is down, slow or refuses (src/store/influx/errors.ts). */
export const STORE_CODE = /^STORE_[A-Z_]+$|^QUERY_REJECTED$|^WRITE_REJECTED$|^SELECTOR_INVALID$|^POINT_INVALID$/;

/** Every problem with a batch that reached a store (empty = fine). */
export function batchProblems(b: ForecastBatch, horizon: number): string[] {
  const out: string[] = [];
  if (b.points.length !== horizon) out.push(`${b.points.length} points, expected ${horizon}`);
  if (!Number.isFinite(b.issuedAt)) out.push(`issuedAt ${b.issuedAt}`);
  let prevT = b.issuedAt;
  b.points.forEach((p, i) => {
    if (p.lead !== i + 1) out.push(`lead ${p.lead} at position ${i}`);
    if (!Number.isFinite(p.value)) out.push(`value ${p.value} at lead ${p.lead}`);
    if (!(p.t > prevT)) out.push(`target time ${p.t} not after ${prevT}`);
    prevT = p.t;
    for (const [q, v] of Object.entries(p.bands)) if (!Number.isFinite(v)) out.push(`band ${q} = ${v} at lead ${p.lead}`);
    const qs = Object.keys(p.bands).sort((a, b2) => Number(a) - Number(b2));
    for (let k = 1; k < qs.length; k++) if (p.bands[qs[k]] < p.bands[qs[k - 1]]) out.push(`band ${qs[k]} below ${qs[k - 1]} at lead ${p.lead}`);
  });
  return out;
}

export function healthProblems(h: HealthPoint): string[] {
  const out: string[] = [];
  if (!(h.state in DRIFT_STATE_CODE)) out.push(`state ${String(h.state)}`);
  if (!Number.isFinite(h.t)) out.push(`t ${h.t}`);
  return out;
}

/**
 * Collects unhandled promise rejections and uncaught exceptions while installed; tests assert the
 * list is empty ("fail on any").
 */
export function trapUnhandled(): { errors: unknown[]; dispose(): void } {
  const errors: unknown[] = [];
  const onRej = (reason: unknown) => errors.push(reason);
  const onExc = (err: unknown) => errors.push(err);
  process.on('unhandledRejection', onRej);
  process.on('uncaughtException', onExc);
  return {
    errors,
    dispose() {
      process.off('unhandledRejection', onRej);
      process.off('uncaughtException', onExc);
    },
  };
}

/**
 * Series options that keep one fit in the tens of milliseconds: a one-week window, one day of
 * lags, few centres, one k-means restart. Hourly, horizon 12 h.
 */
export const FAST_SERIES = {
  step: '1h',
  window: '1w',
  horizon: 12,
  lags: ['1-24'],
  centres: 6,
  seasonalInputs: true,
  quantiles: [0.1, 0.9],
  fit: { restarts: 1, widthIterations: 1, maxPasses: 30 },
} as const;
