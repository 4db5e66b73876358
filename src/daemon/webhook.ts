/**
 * The webhook notifier: delivers drift notices (transitions, and alert reminders) that the cycle
 * put into the state store's outbox, as one JSON POST each, to the series' webhook URL.
 *
 *  - Durable: a notice is deleted from the outbox only after a 2xx answer, so a restart (a new
 *    notifier on the same state file) delivers whatever was left. Delivery is at least once; the
 *    body carries a stable `id` so a receiver can drop a repeat.
 *  - Ordered per series: a notice is tried only after the older ones of its series went out, so a receiver never
 *    sees "alert -> ok" before "watch -> alert". A receiver that is down holds back only its own series.
 *  - Retried with capped, jittered exponential backoff (src/daemon/backoff.ts) per notice, or
 *    after the receiver's Retry-After when it sends one (capped the same way).
 *  - Bounded: beyond maxPending notices the oldest are dropped, counted and logged.
 *  - The URL is a secret (it often carries a token): it is read through `urlFor` at send time and
 *    never logged, stored or put into an error message; failures are recorded as codes.
 */
import { Backoff } from './backoff.ts';
import { systemClock, type Clock, type TimerHandle } from './clock.ts';
import { DRIFT_STATE_CODE } from '../store/types.ts';
import type { DriftNotice } from '../drift/index.ts';
import type { OutboxEntry } from '../store/state.ts';

/** The part of the state store the notifier uses (StateStore implements it). */
export interface WebhookOutbox {
  dueNotifications<P = unknown>(nowMs: number, limit?: number): OutboxEntry<P>[];
  pendingNotifications<P = unknown>(): OutboxEntry<P>[];
  markDelivered(id: number): void;
  markFailed(id: number, error: string, nextAttemptAt: number): void;
  outboxSize(): number;
}

/** Structured logger (pino's call shape). */
export interface WebhookLogger {
  debug(obj: object, msg: string): void;
  info(obj: object, msg: string): void;
  warn(obj: object, msg: string): void;
  error(obj: object, msg: string): void;
}

export interface WebhookNotifierOptions {
  outbox: WebhookOutbox;
  /** The series' webhook URL (a secret), or undefined when the series has none. */
  urlFor: (series: string) => string | undefined;
  /** Per-series request timeout (ms); default `timeoutMs`. */
  timeoutFor?: (series: string) => number | undefined;
  /** Request timeout (ms). Default 10 000. */
  timeoutMs?: number;
  /** First retry delay (ms). Default 5 000. */
  retryBaseMs?: number;
  /** Longest retry delay (ms). Default 600 000 (10 min). */
  retryCapMs?: number;
  /** Jitter on retry delays (default true; tests switch it off). */
  jitter?: boolean;
  random?: () => number;
  /** How often the outbox is looked at for new notices when nothing is due sooner (ms). Default 5 000. */
  pollIntervalMs?: number;
  /** Bound of the outbox; beyond it the oldest notices are dropped (counted, logged). Default 10 000. */
  maxPending?: number;
  /** Outbox `kind` this notifier sends. Default 'drift'. */
  kind?: string;
  clock?: Clock;
  logger: WebhookLogger;
  fetch?: typeof fetch;
}

export const WEBHOOK_DEFAULTS = Object.freeze({
  timeoutMs: 10_000,
  retryBaseMs: 5_000,
  retryCapMs: 600_000,
  pollIntervalMs: 5_000,
  maxPending: 10_000,
  kind: 'drift',
});

export type WebhookErrorCode = 'WEBHOOK_HTTP' | 'WEBHOOK_TIMEOUT' | 'WEBHOOK_NETWORK' | 'WEBHOOK_REDIRECT' | 'WEBHOOK_NO_URL' | 'WEBHOOK_BAD_PAYLOAD';

/** A failed delivery. Its message never contains the URL. */
export class WebhookError extends Error {
  readonly code: WebhookErrorCode;
  readonly series: string;
  readonly status?: number;
  readonly hint: string;
  readonly #retryAfterMs?: number;

  constructor(code: WebhookErrorCode, series: string, message: string, hint: string, opts: { status?: number; retryAfterMs?: number } = {}) {
    super(`${code} series=${series}: ${message} (hint: ${hint})`);
    this.name = 'WebhookError';
    this.code = code;
    this.series = series;
    this.hint = hint;
    if (opts.status !== undefined) this.status = opts.status;
    if (opts.retryAfterMs !== undefined) this.#retryAfterMs = opts.retryAfterMs;
  }

  /** A bad payload never gets better; everything else may (receiver down, overloaded, misconfigured and fixed). */
  canRetry(): boolean {
    return this.code !== 'WEBHOOK_BAD_PAYLOAD';
  }

  retryAfterMs(): number | undefined {
    return this.#retryAfterMs;
  }

  /** What goes into the outbox and the logs. */
  get brief(): string {
    return this.status !== undefined ? `${this.code} ${this.status}` : this.code;
  }
}

/** The JSON body of one webhook request. */
export interface WebhookBody {
  /** Stable per notice (outbox row): repeats of one notice carry the same id. */
  id: string;
  source: 'radcast';
  kind: 'transition' | 'reminder';
  series: string;
  from: string;
  to: string;
  /** Integer code of `to` (ok 0, watch 1, alert 2, stale 3). */
  toCode: number;
  reason: string;
  /** Time of the assessment that saw it (ISO 8601 UTC) and as epoch ms. */
  at: string;
  atMs: number;
  figures: DriftNotice['figures'];
  /** Delivery attempt, 1 = first. */
  attempt: number;
}

function isNotice(p: unknown): p is DriftNotice {
  if (!p || typeof p !== 'object') return false;
  const n = p as Record<string, unknown>;
  return typeof n.series === 'string' && typeof n.from === 'string' && typeof n.to === 'string' && typeof n.at === 'number' && Number.isFinite(n.at) && typeof n.figures === 'object' && n.figures !== null && (n.kind === 'transition' || n.kind === 'reminder');
}

export function webhookBody(entry: OutboxEntry<unknown>): WebhookBody | null {
  const n = entry.payload;
  if (!isNotice(n)) return null;
  return {
    id: `radcast-${entry.createdAt.toString(36)}-${entry.id}`,
    source: 'radcast',
    kind: n.kind,
    series: n.series,
    from: n.from,
    to: n.to,
    toCode: DRIFT_STATE_CODE[n.to as keyof typeof DRIFT_STATE_CODE] ?? -1,
    reason: n.reason,
    at: new Date(n.at).toISOString(),
    atMs: n.at,
    figures: n.figures,
    attempt: entry.attempts + 1,
  };
}

/** Retry-After as ms (delta-seconds or an HTTP date), undefined when absent or unreadable. */
function parseRetryAfter(v: string | null, nowMs: number): number | undefined {
  if (!v) return undefined;
  const s = Number(v.trim());
  if (Number.isFinite(s) && s >= 0) return s * 1000;
  const d = Date.parse(v);
  return Number.isFinite(d) ? Math.max(0, d - nowMs) : undefined;
}

export interface DeliveryPass {
  delivered: number;
  failed: number;
  dropped: number;
}

type ResolvedOptions = Required<Omit<WebhookNotifierOptions, 'timeoutFor' | 'random'>> & Pick<WebhookNotifierOptions, 'timeoutFor' | 'random'>;

export class WebhookNotifier {
  readonly #o: ResolvedOptions;
  readonly #backoff: Backoff;
  #timer: TimerHandle | null = null;
  #running = false;
  #stopping = false;
  #pass: Promise<DeliveryPass> | null = null;
  #abort: AbortController | null = null;
  /** Counters since construction (for /metrics and tests). */
  readonly counts = { delivered: 0, failed: 0, dropped: 0 };

  constructor(opts: WebhookNotifierOptions) {
    this.#o = {
      ...WEBHOOK_DEFAULTS,
      jitter: true,
      clock: systemClock,
      fetch: globalThis.fetch,
      ...Object.fromEntries(Object.entries(opts).filter(([, v]) => v !== undefined)),
    } as ResolvedOptions;
    this.#backoff = new Backoff({ baseMs: this.#o.retryBaseMs, capMs: this.#o.retryCapMs, jitter: this.#o.jitter, ...(opts.random ? { random: opts.random } : {}) });
  }

  /** Begin delivering: one pass now, then whenever a notice is due (or every pollIntervalMs). */
  start(): void {
    if (this.#running) return;
    this.#running = true;
    this.#stopping = false;
    this.#schedule(0);
  }

  /** Stop scheduling and abort a request in flight (its notice stays in the outbox). */
  async stop(): Promise<void> {
    this.#running = false;
    this.#stopping = true;
    if (this.#timer) this.#o.clock.clearTimeout(this.#timer);
    this.#timer = null;
    this.#abort?.abort();
    if (this.#pass) await this.#pass.catch(() => undefined);
  }

  /** One delivery pass now over every due notice (what start() runs on its schedule). */
  async flush(): Promise<DeliveryPass> {
    while (this.#pass) await this.#pass.catch(() => undefined);
    const p = this.#deliverDue();
    this.#pass = p;
    try {
      return await p;
    } finally {
      this.#pass = null;
    }
  }

  /** Ask for a pass soon (after something was enqueued). */
  kick(): void {
    if (this.#running) this.#schedule(0);
  }

  #schedule(delayMs: number): void {
    if (!this.#running) return;
    if (this.#timer) this.#o.clock.clearTimeout(this.#timer);
    this.#timer = this.#o.clock.setTimeout(() => {
      this.#timer = null;
      void this.flush()
        .catch((err: unknown) => this.#o.logger.error({ code: 'WEBHOOK_PASS_FAILED', err: err instanceof Error ? err.message : String(err) }, 'webhook delivery pass failed'))
        .finally(() => this.#schedule(this.#nextDelay()));
    }, Math.max(0, delayMs));
  }


  /** Pending notices grouped by series (each group oldest first); drops beyond maxPending first. */
  #bySeries(): OutboxEntry<unknown>[][] {
    let pending = this.#o.outbox.pendingNotifications().filter((e) => e.kind === this.#o.kind);
    const over = pending.length - this.#o.maxPending;
    if (over > 0) {
      const drop = pending.slice(0, over);
      // Dropping removes the row; markDelivered is the outbox's only removal.
      for (const e of drop) this.#o.outbox.markDelivered(e.id);
      this.counts.dropped += drop.length;
      this.#o.logger.error(
        { code: 'WEBHOOK_OUTBOX_FULL', dropped: drop.length, maxPending: this.#o.maxPending, oldestSeries: drop[0].series, oldestCreatedAt: drop[0].createdAt },
        'webhook outbox over its bound: oldest notices dropped',
      );
      pending = pending.slice(over);
    }
    const groups = new Map<string, OutboxEntry<unknown>[]>();
    for (const e of pending) {
      const g = groups.get(e.series);
      if (g) g.push(e);
      else groups.set(e.series, [e]);
    }
    return [...groups.values()];
  }

  #nextDelay(): number {
    const now = this.#o.clock.now();
    let next = now + this.#o.pollIntervalMs;
    for (const g of this.#bySeries()) next = Math.min(next, g[0].nextAttemptAt);
    return Math.max(0, next - now);
  }

  async #deliverDue(): Promise<DeliveryPass> {
    const pass: DeliveryPass = { delivered: 0, failed: 0, dropped: 0 };
    const droppedBefore = this.counts.dropped;
    for (const group of this.#bySeries()) {
      // In order; the first notice not due or not delivered holds back the rest of its series.
      for (const e of group) {
        if (this.#stopping || e.nextAttemptAt > this.#o.clock.now()) break;
        const ok = await this.#deliver(e);
        if (ok) pass.delivered++;
        else {
          pass.failed++;
          break;
        }
      }
    }
    pass.dropped = this.counts.dropped - droppedBefore;
    return pass;
  }

  async #deliver(e: OutboxEntry<unknown>): Promise<boolean> {
    const { logger, clock } = this.#o;
    const body = webhookBody(e);
    const log = { series: e.series, notice: e.id, attempt: e.attempts + 1 };
    if (!body) {
      // Unreadable payload: it can never be sent; drop it loudly rather than block the series forever.
      this.#o.outbox.markDelivered(e.id);
      this.counts.dropped++;
      logger.error({ ...log, code: 'WEBHOOK_BAD_PAYLOAD' }, 'webhook notice in the outbox is not a drift notice; dropped');
      return false;
    }
    try {
      await this.#post(e.series, body);
      this.#o.outbox.markDelivered(e.id);
      this.counts.delivered++;
      logger.info({ ...log, kind: body.kind, from: body.from, to: body.to }, 'webhook notice delivered');
      return true;
    } catch (err) {
      const we = err instanceof WebhookError ? err : new WebhookError('WEBHOOK_NETWORK', e.series, 'request failed', 'check that the receiver is up and reachable');
      const backoffMs = this.#backoff.nextDelayMs(e.attempts);
      const after = we.retryAfterMs();
      const delayMs = after !== undefined ? Math.min(this.#o.retryCapMs, Math.max(after, backoffMs)) : backoffMs;
      this.#o.outbox.markFailed(e.id, we.brief, clock.now() + delayMs);
      this.counts.failed++;
      const level = we.code === 'WEBHOOK_HTTP' && we.status !== undefined && we.status >= 400 && we.status < 500 && we.status !== 408 && we.status !== 429 ? 'error' : 'warn';
      logger[level]({ ...log, code: we.code, status: we.status, retryInMs: Math.round(delayMs), hint: we.hint }, 'webhook delivery failed; will retry');
      return false;
    }
  }

  async #post(series: string, body: WebhookBody): Promise<void> {
    const url = this.#o.urlFor(series);
    if (!url) throw new WebhookError('WEBHOOK_NO_URL', series, 'no webhook URL for the series', 'set drift.webhook.urlEnv or urlFile for the series (the notice waits in the outbox)');
    const timeoutMs = this.#o.timeoutFor?.(series) ?? this.#o.timeoutMs;
    const abort = new AbortController();
    this.#abort = abort;
    const timer = this.#o.clock.setTimeout(() => abort.abort(new Error('timeout')), timeoutMs);
    let res: Response;
    try {
      res = await this.#o.fetch(url, {
        method: 'POST',
        headers: { 'content-type': 'application/json', 'user-agent': 'radcast-webhook' },
        body: JSON.stringify(body),
        redirect: 'manual',
        signal: abort.signal,
      });
    } catch {
      // The error of fetch may quote the URL: it is not passed on.
      if (abort.signal.aborted && this.#stopping) throw new WebhookError('WEBHOOK_NETWORK', series, 'request aborted by shutdown', 'the notice stays in the outbox and is sent after the restart');
      if (abort.signal.aborted) throw new WebhookError('WEBHOOK_TIMEOUT', series, `no answer within ${timeoutMs} ms`, 'raise drift.webhook.timeout or check the receiver');
      throw new WebhookError('WEBHOOK_NETWORK', series, 'request failed (connection refused, reset or name not resolved)', 'check that the receiver is up and reachable from this host');
    } finally {
      this.#o.clock.clearTimeout(timer);
      if (this.#abort === abort) this.#abort = null;
    }
    // Drain the body so the connection can be reused.
    await res.arrayBuffer().catch(() => undefined);
    if (res.status >= 200 && res.status < 300) return;
    if (res.status >= 300 && res.status < 400) throw new WebhookError('WEBHOOK_REDIRECT', series, `receiver answered ${res.status} (redirects are not followed)`, 'configure the final URL of the receiver', { status: res.status });
    const hint =
      res.status === 401 || res.status === 403
        ? 'the receiver rejected the credentials in the URL: check the webhook URL secret'
        : res.status >= 500 || res.status === 429 || res.status === 408
          ? 'the receiver is overloaded or failing; the notice is retried'
          : 'the receiver rejected the request: check the webhook URL and what the receiver expects';
    throw new WebhookError('WEBHOOK_HTTP', series, `receiver answered ${res.status}`, hint, { status: res.status, retryAfterMs: parseRetryAfter(res.headers.get('retry-after'), this.#o.clock.now()) });
  }
}
