/** Input validation shared by k-means, fit and predict: shapes, finiteness, option ranges. */
import type { Dense } from './types.ts';
import { ModelError } from './errors.ts';

/**
 * Largest magnitude accepted: squared distances of larger values overflow to Infinity. Features
 * are expected standardised (order 1); 1e150 only guards against garbage.
 */
export const MAX_ABS_INPUT = 1e150;

/** Checks that `m` is a well-formed Dense matrix with finite entries of sane magnitude. */
export function checkDense(m: Dense, where: string): void {
  if (m === null || typeof m !== 'object' || !(m.data instanceof Float64Array)) {
    throw new ModelError('BAD_SHAPE', 'expected a Dense matrix with a Float64Array data field', { where }, 'build inputs with Float64Array and explicit rows/cols');
  }
  const { rows, cols, data } = m;
  if (!Number.isInteger(rows) || !Number.isInteger(cols) || rows < 0 || cols < 1) {
    throw new ModelError('BAD_SHAPE', `rows=${rows} cols=${cols} are not valid dimensions`, { where, value: `${rows}x${cols}` }, 'rows must be a non-negative integer and cols a positive integer');
  }
  if (data.length !== rows * cols) {
    throw new ModelError('BAD_SHAPE', `data has ${data.length} values but ${rows}x${cols} needs ${rows * cols}`, { where, value: data.length, expected: rows * cols }, 'data must be row-major with exactly rows*cols values');
  }
  for (let i = 0; i < data.length; i++) {
    const v = data[i];
    if (!(Math.abs(v) <= MAX_ABS_INPUT)) {
      const row = Math.floor(i / cols);
      const col = i - row * cols;
      if (!Number.isFinite(v)) {
        throw new ModelError('NON_FINITE', `value ${v} is not finite`, { where, row, col, value: String(v) }, 'fill or drop missing steps before fitting or predicting');
      }
      throw new ModelError('OUT_OF_RANGE', `value ${v} is beyond ±${MAX_ABS_INPUT} (its square overflows)`, { where, row, col, value: String(v) }, 'standardise features and targets before fitting');
    }
  }
}

export function checkInt(v: unknown, where: string, min: number, max = Number.MAX_SAFE_INTEGER): number {
  if (typeof v !== 'number' || !Number.isInteger(v) || v < min || v > max) {
    throw new ModelError('BAD_OPTION', `${String(v)} is not an integer in [${min}, ${max}]`, { where, value: String(v), expected: `[${min}, ${max}]` }, `set ${where} to an integer in range`);
  }
  return v;
}

export function checkNumber(v: unknown, where: string, min: number, max: number, minOpen = false): number {
  if (typeof v !== 'number' || !Number.isFinite(v) || v < min || v > max || (minOpen && v === min)) {
    const range = `${minOpen ? '(' : '['}${min}, ${max}]`;
    throw new ModelError('BAD_OPTION', `${String(v)} is not a number in ${range}`, { where, value: String(v), expected: range }, `set ${where} to a number in range`);
  }
  return v;
}
