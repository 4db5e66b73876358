/**
 * Store failures as values: a code, the series (when one is concerned), a message that says what
 * happened and a hint that says what to do. Callers decide through `canRetry()` and
 * `retryAfterMs()`, never by reading the message. Messages never contain a token or password.
 */

export type StoreErrorCode =
  /** Network error, refused connection or timeout: the server did not answer. */
  | 'STORE_UNREACHABLE'
  /** 429 or 5xx: the server answered but cannot take the request now. */
  | 'STORE_BUSY'
  /** 401/403: the credentials were refused. */
  | 'STORE_AUTH'
  /** The database / bucket does not exist (yet). */
  | 'STORE_DATABASE_MISSING'
  /** The server refused the query (InfluxQL/Flux error, 400). */
  | 'QUERY_REJECTED'
  /** The answer could not be understood. */
  | 'STORE_PROTOCOL'
  /** The server refused written points (400, e.g. a field type conflict); they cannot succeed on retry. */
  | 'WRITE_REJECTED'
  /** A selector cannot be expressed for this API (empty name, reserved column name). */
  | 'SELECTOR_INVALID'
  /** A series name that cannot be written as a tag value. */
  | 'SERIES_NAME_INVALID'
  /** A point that cannot be written (time not an epoch-ms integer). */
  | 'POINT_INVALID'
  /** An adapter option that cannot work (e.g. a measurement name line protocol cannot carry). */
  | 'OPTION_INVALID'
  /** The adapter was closed. */
  | 'STORE_CLOSED'
  /** The local write spool (state file) could not be read or written: disk full, file locked. */
  | 'SPOOL_FAILED';

const RETRYABLE: ReadonlySet<StoreErrorCode> = new Set(['STORE_UNREACHABLE', 'STORE_BUSY', 'STORE_DATABASE_MISSING', 'SPOOL_FAILED']);

export interface StoreErrorOptions {
  series?: string;
  hint?: string;
  /** Where: the endpoint ("POST /write", "POST /api/v2/query") or the selector key. */
  at?: string;
  /** HTTP status when the server answered. */
  status?: number;
  /** Server-suggested wait (Retry-After), ms. */
  retryAfterMs?: number;
  cause?: unknown;
}

export class StoreError extends Error {
  readonly code: StoreErrorCode;
  readonly series?: string;
  readonly hint?: string;
  readonly at?: string;
  readonly status?: number;
  readonly #retryAfterMs?: number;

  constructor(code: StoreErrorCode, message: string, opts: StoreErrorOptions = {}) {
    super(message, opts.cause === undefined ? undefined : { cause: opts.cause });
    this.name = 'StoreError';
    this.code = code;
    if (opts.series !== undefined) this.series = opts.series;
    if (opts.hint !== undefined) this.hint = opts.hint;
    if (opts.at !== undefined) this.at = opts.at;
    if (opts.status !== undefined) this.status = opts.status;
    this.#retryAfterMs = opts.retryAfterMs;
  }

  /** True when the same request may succeed later without a config change. */
  canRetry(): boolean {
    return RETRYABLE.has(this.code);
  }

  /** The server's suggested wait, when it gave one (ms). */
  retryAfterMs(): number | undefined {
    return this.#retryAfterMs;
  }

  /** A plain record for logs: code, message, hint, series, where. */
  toJSON(): Record<string, unknown> {
    const out: Record<string, unknown> = { code: this.code, message: this.message, retryable: this.canRetry() };
    if (this.series !== undefined) out.series = this.series;
    if (this.hint !== undefined) out.hint = this.hint;
    if (this.at !== undefined) out.at = this.at;
    if (this.status !== undefined) out.status = this.status;
    return out;
  }
}

/** Server answer body shortened for an error message (servers can send pages of HTML). */
export function snippet(body: string, max = 300): string {
  const flat = body.replace(/\s+/g, ' ').trim();
  return flat.length > max ? flat.slice(0, max) + '…' : flat;
}

/** Parses a Retry-After header (seconds or an HTTP date) into ms. */
export function parseRetryAfter(value: string | null | undefined, nowMs: number): number | undefined {
  if (!value) return undefined;
  if (/^\d+$/.test(value.trim())) return Number(value.trim()) * 1000;
  const at = Date.parse(value);
  return Number.isFinite(at) ? Math.max(0, at - nowMs) : undefined;
}

/** Maps an HTTP status (with the server's text) to a StoreError. */
export function httpStoreError(status: number, body: string, at: string, opts: { series?: string; retryAfterMs?: number } = {}): StoreError {
  const text = snippet(body);
  if (status === 401 || status === 403) {
    return new StoreError('STORE_AUTH', `${at} refused the credentials (${status}): ${text}`, {
      ...opts,
      at,
      status,
      hint: 'check the user/password or token (store.influxdb tokenEnv/tokenFile, passwordEnv/passwordFile) and its permissions',
    });
  }
  if (/database not found|bucket .*not found|bucket not found|could not find bucket/i.test(body)) {
    return new StoreError('STORE_DATABASE_MISSING', `${at}: ${text}`, {
      ...opts,
      at,
      status,
      hint: 'create the database (InfluxQL: CREATE DATABASE name) or bucket, or fix store.influxdb.database / bucket',
    });
  }
  if (status === 429 || status >= 500) {
    return new StoreError('STORE_BUSY', `${at} answered ${status}: ${text}`, { ...opts, at, status, hint: 'the server is overloaded or restarting; radcast retries with backoff' });
  }
  return new StoreError('QUERY_REJECTED', `${at} answered ${status}: ${text}`, { ...opts, at, status, hint: 'the server refused the request; check the series selector and the server log' });
}

/** Maps a network-level failure (fetch TypeError, ECONNREFUSED, abort/timeout) to a StoreError. */
export function networkStoreError(err: unknown, at: string, opts: { series?: string; timeoutMs?: number } = {}): StoreError {
  const e = err as { name?: string; code?: string; message?: string; cause?: { code?: string; message?: string } };
  const timedOut = e?.name === 'TimeoutError' || e?.name === 'AbortError' || e?.code === 'ETIMEDOUT' || /timed? ?out/i.test(e?.message ?? '');
  const detail = e?.cause?.code ?? e?.code ?? e?.cause?.message ?? e?.message ?? String(err);
  const message = timedOut ? `${at} did not answer within ${opts.timeoutMs ?? '?'} ms` : `${at} unreachable (${detail})`;
  return new StoreError('STORE_UNREACHABLE', message, {
    series: opts.series,
    at,
    cause: err,
    hint: timedOut ? 'the server is slow or down; raise store.influxdb.timeout if it is just slow' : 'check store.influxdb.url and that the server runs',
  });
}
