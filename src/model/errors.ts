/**
 * Errors of the numeric core are values: a code, what is wrong and where (argument, row, column,
 * option), and a hint. Callers catch them per series, so one bad series never stops the others.
 */

export type ModelErrorCode =
  | 'BAD_SHAPE'
  | 'DIMENSION_MISMATCH'
  | 'NON_FINITE'
  | 'OUT_OF_RANGE'
  | 'TOO_FEW_SAMPLES'
  | 'BAD_OPTION'
  | 'SINGULAR_SYSTEM'
  | 'BAD_MODEL';

export interface ModelErrorDetail {
  /** Argument or option at fault: "x", "y", "opts.nCentres", "model.gammas"... */
  where: string;
  row?: number;
  col?: number;
  value?: number | string;
  /** Expected size or range, when there is one. */
  expected?: number | string;
  [key: string]: unknown;
}

export class ModelError extends Error {
  readonly code: ModelErrorCode;
  readonly hint: string;
  readonly detail: ModelErrorDetail;

  constructor(code: ModelErrorCode, message: string, detail: ModelErrorDetail, hint: string) {
    const at = [
      detail.where,
      detail.row !== undefined ? `row=${detail.row}` : '',
      detail.col !== undefined ? `col=${detail.col}` : '',
    ]
      .filter((s) => s !== '')
      .join(' ');
    super(`${code} ${at}: ${message} (hint: ${hint})`);
    this.name = 'ModelError';
    this.code = code;
    this.hint = hint;
    this.detail = detail;
  }

  /** Input problems do not go away by retrying the same data. */
  canRetry(): boolean {
    return false;
  }

  toJSON(): Record<string, unknown> {
    return { name: this.name, code: this.code, detail: this.detail, hint: this.hint, message: this.message };
  }
}
