/**
 * Errors as the daemon sees them. Every layer throws (or returns) errors carrying a `code`; the
 * daemon never matches message text. `describeError` turns anything thrown into a plain record
 * for logs, metrics and summaries; `canRetry` asks the error itself whether a retry may help.
 */

/** An error raised by the daemon itself (scheduling, cycle checks, HTTP). */
export class DaemonError extends Error {
  readonly code: string;
  readonly series?: string;
  readonly hint?: string;
  readonly retryable: boolean;

  constructor(code: string, message: string, opts: { series?: string; hint?: string; retryable?: boolean; cause?: unknown } = {}) {
    super(message, opts.cause === undefined ? undefined : { cause: opts.cause });
    this.name = 'DaemonError';
    this.code = code;
    this.series = opts.series;
    this.hint = opts.hint;
    this.retryable = opts.retryable ?? false;
  }

  canRetry(): boolean {
    return this.retryable;
  }
}

/** What a failure looks like in logs, metrics and the `once` summary. */
export interface ErrorRecord {
  code: string;
  message: string;
  hint?: string;
  /** Key path or location (from the error, when it has one). */
  at?: string;
  retryable: boolean;
}

const CODE_RE = /^[A-Z][A-Z0-9_]{1,63}$/;

/** Normalise anything thrown. Errors without a radcast code become INTERNAL (node's ECONN... codes are kept). */
export function describeError(err: unknown): ErrorRecord {
  if (err && typeof err === 'object') {
    const e = err as Record<string, unknown> & { message?: unknown };
    const rawCode = typeof e.code === 'string' ? e.code : undefined;
    const code = rawCode && CODE_RE.test(rawCode) ? rawCode : rawCode ? `STORE_${rawCode.replace(/[^A-Z0-9_]/gi, '_').toUpperCase()}`.slice(0, 64) : 'INTERNAL';
    const rec: ErrorRecord = {
      code,
      message: typeof e.message === 'string' ? e.message : String(err),
      retryable: canRetry(err),
    };
    if (typeof e.hint === 'string') rec.hint = e.hint;
    const at = typeof e.at === 'string' ? e.at : typeof e.path === 'string' ? e.path : Array.isArray(e.path) ? e.path.join('.') : undefined;
    if (at) rec.at = at;
    return rec;
  }
  return { code: 'INTERNAL', message: String(err), retryable: false };
}

/** The error's own retry verdict (`canRetry()` or `retryable`); unknown errors are not retried. */
export function canRetry(err: unknown): boolean {
  if (!err || typeof err !== 'object') return false;
  const e = err as { canRetry?: unknown; retryable?: unknown };
  if (typeof e.canRetry === 'function') {
    try {
      return Boolean((e.canRetry as () => boolean).call(err));
    } catch {
      return false;
    }
  }
  return e.retryable === true;
}

/** The error's own suggested delay before a retry, if it has one. */
export function retryAfterMs(err: unknown): number | undefined {
  if (!err || typeof err !== 'object') return undefined;
  const e = err as { retryAfterMs?: unknown };
  if (typeof e.retryAfterMs === 'function') {
    const v = (e.retryAfterMs as () => unknown).call(err);
    return typeof v === 'number' && Number.isFinite(v) && v >= 0 ? v : undefined;
  }
  return undefined;
}
