/**
 * Errors of the series layer are values: a code, the series, the offending instant or field,
 * and a hint that says how to fix it. They are thrown by the builders and caught per series
 * by callers, so one bad series never stops the others.
 */

export type SeriesErrorCode =
  | 'BAD_OPTIONS'
  | 'UNKNOWN_TIME_ZONE'
  | 'UNKNOWN_HOLIDAY_REGION'
  | 'BAD_EXTRA_DATE'
  | 'GRID_MISMATCH'
  | 'MISSING_EXOGENOUS'
  | 'TOO_LITTLE_HISTORY'
  | 'MISSING_INPUT'
  | 'SCALER_MISMATCH';

/** What every error scoped to one series carries (the code type differs per layer). */
export interface SeriesScopedInit<C extends string> {
  code: C;
  series: string;
  message: string;
  hint: string;
  /** ISO instant of the offending step, when there is one. */
  at?: string;
  /** Feature name or option key that is at fault, when there is one. */
  field?: string;
  /** Machine-readable figures (needed / available steps, ...). */
  details?: Record<string, number | string>;
}

export type SeriesErrorInit = SeriesScopedInit<SeriesErrorCode>;

/**
 * Base of the errors that belong to one series (series layer, forecast engine): the message reads
 * "CODE series=… at=… field=…: text (hint: …)", and toJSON() keeps every field.
 */
export class SeriesScopedError<C extends string> extends Error {
  readonly code: C;
  readonly series: string;
  readonly hint: string;
  readonly at?: string;
  readonly field?: string;
  readonly details?: Record<string, number | string>;

  constructor(name: string, init: SeriesScopedInit<C>) {
    const where = [`series=${init.series}`, init.at !== undefined ? `at=${init.at}` : '', init.field !== undefined ? `field=${init.field}` : '']
      .filter((s) => s !== '')
      .join(' ');
    super(`${init.code} ${where}: ${init.message} (hint: ${init.hint})`);
    this.name = name;
    this.code = init.code;
    this.series = init.series;
    this.hint = init.hint;
    if (init.at !== undefined) this.at = init.at;
    if (init.field !== undefined) this.field = init.field;
    if (init.details !== undefined) this.details = init.details;
  }

  /** Input problems do not go away by retrying the same data. */
  canRetry(): boolean {
    return false;
  }

  toJSON(): Record<string, unknown> {
    return { name: this.name, code: this.code, series: this.series, at: this.at, field: this.field, hint: this.hint, details: this.details, message: this.message };
  }
}

export class SeriesError extends SeriesScopedError<SeriesErrorCode> {
  constructor(init: SeriesErrorInit) {
    super('SeriesError', init);
  }
}

export function isoAt(ms: number): string {
  return Number.isFinite(ms) ? new Date(ms).toISOString() : String(ms);
}
