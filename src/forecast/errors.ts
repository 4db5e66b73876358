/**
 * Errors of the forecast engine and the backtest are values: a code, the series, the origin
 * (ISO instant) or option at fault, and a hint. Callers catch them per series / per origin.
 */

export type ForecastErrorCode =
  | 'BAD_SETTINGS'
  | 'ORIGIN_OUT_OF_RANGE'
  | 'TOO_LITTLE_HISTORY'
  | 'NO_ORIGINS'
  | 'MISSING_INPUT'
  | 'BAD_FITTED'
  | 'WORKER_FAILED';

export interface ForecastErrorInit {
  code: ForecastErrorCode;
  series: string;
  message: string;
  hint: string;
  at?: string;
  field?: string;
  details?: Record<string, number | string>;
}

export class ForecastError extends Error {
  readonly code: ForecastErrorCode;
  readonly series: string;
  readonly hint: string;
  readonly at?: string;
  readonly field?: string;
  readonly details?: Record<string, number | string>;

  constructor(init: ForecastErrorInit) {
    const where = [`series=${init.series}`, init.at !== undefined ? `at=${init.at}` : '', init.field !== undefined ? `field=${init.field}` : '']
      .filter((s) => s !== '')
      .join(' ');
    super(`${init.code} ${where}: ${init.message} (hint: ${init.hint})`);
    this.name = 'ForecastError';
    this.code = init.code;
    this.series = init.series;
    this.hint = init.hint;
    if (init.at !== undefined) this.at = init.at;
    if (init.field !== undefined) this.field = init.field;
    if (init.details !== undefined) this.details = init.details;
  }

  /** Worker crashes may pass on a retry; input problems do not. */
  canRetry(): boolean {
    return this.code === 'WORKER_FAILED';
  }

  toJSON(): Record<string, unknown> {
    return { name: this.name, code: this.code, series: this.series, at: this.at, field: this.field, hint: this.hint, details: this.details, message: this.message };
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
