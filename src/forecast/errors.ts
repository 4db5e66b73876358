/**
 * Errors of the forecast engine and the backtest are values: a code, the series, the origin
 * (ISO instant) or option at fault, and a hint. Callers catch them per series / per origin.
 */

import { SeriesScopedError, type SeriesScopedInit } from '../series/errors.ts';

export type ForecastErrorCode =
  | 'BAD_SETTINGS'
  | 'ORIGIN_OUT_OF_RANGE'
  | 'TOO_LITTLE_HISTORY'
  | 'NO_ORIGINS'
  | 'MISSING_INPUT'
  | 'BAD_FITTED'
  | 'WORKER_FAILED';

export type ForecastErrorInit = SeriesScopedInit<ForecastErrorCode>;

export class ForecastError extends SeriesScopedError<ForecastErrorCode> {
  constructor(init: ForecastErrorInit) {
    super('ForecastError', init);
  }

  /** Worker crashes may pass on a retry; input problems do not. */
  override canRetry(): boolean {
    return this.code === 'WORKER_FAILED';
  }
}

/** Code, message and hint of any thrown value (errors of every layer carry code and hint). */
export function errorInfo(err: unknown): { code: string; message: string; hint: string } {
  if (err && typeof err === 'object') {
    const e = err as { code?: unknown; message?: unknown; hint?: unknown };
    return {
      code: typeof e.code === 'string' ? e.code : 'UNEXPECTED',
      message: typeof e.message === 'string' ? e.message : String(err),
      hint: typeof e.hint === 'string' ? e.hint : 'see the message; this may be a bug worth reporting',
    };
  }
  return { code: 'UNEXPECTED', message: String(err), hint: 'see the message; this may be a bug worth reporting' };
}

export function isoAt(ms: number): string {
  return Number.isFinite(ms) ? new Date(ms).toISOString() : String(ms);
}
