/**
 * The InfluxDB adapter behind SeriesStore, in two API modes:
 *  - v2: writes through the client's WriteApi (/api/v2/write, gzip), reads Flux through its
 *    QueryApi (/api/v2/query); org, bucket, token.
 *  - v1: the InfluxDB 1.x HTTP API (also offered by 1.8+ and 2.x for compatibility): the same
 *    WriteApi pointed at /write?db=&rp=&precision=ms, reads with InfluxQL from /query (epoch=ms,
 *    chunked); user/password or token.
 *
 * Writes go through the Outbox (bounded buffer, backoff retries, drop policy, counters, and the
 * optional durable spool that keeps unconfirmed points across a shutdown or crash); the
 * client's own retry buffer is switched off because it drops points silently once its retry time
 * runs out and cannot prefer forecasts when it must shed load. Reads either return readings or
 * throw a StoreError whose canRetry() tells the daemon whether to try again next cycle.
 *
 * The token / password are held in #private fields and request headers only: they are never
 * logged, never put in a URL and never part of an error message.
 */
import { HttpError, InfluxDB, type QueryApi, type WriteApi } from '@influxdata/influxdb-client';
import type { Reading } from '../../series/types.ts';
import type { ForecastBatch, HealthPoint, ScorePoint, SeriesStore, SourceSelector } from '../types.ts';
import { Backoff } from './backoff.ts';
import { StoreError, httpStoreError, networkStoreError, parseRetryAfter, snippet } from './errors.ts';
import { buildFluxQuery, parseFluxTime } from './flux.ts';
import { buildReadQuery, parseQueryAnswer, readingValue } from './influxql.ts';
import { silentLogger, type Logger } from './log.ts';
import { INFLUX_DEFAULTS, type InfluxStoreOptions, type MeasurementNames } from './options.ts';
import { Outbox, type LineSink, type OutboxStats } from './outbox.ts';
import { forecastLines, healthLines, scoreLines } from './schema.ts';
import { checkWindow, resolveSelector } from './selector.ts';

/** Rows per chunk of a chunked InfluxQL answer (keeps memory flat for long reads). */
const V1_CHUNK_ROWS = 10_000;

export interface InfluxStoreStats extends OutboxStats {
  /** Reads that failed (the series was skipped that cycle). */
  readFailures: number;
}

export class InfluxStore implements SeriesStore {
  readonly kind: 'influxdb-v1' | 'influxdb-v2';
  readonly #opts: InfluxStoreOptions;
  readonly #url: string;
  readonly #timeoutMs: number;
  readonly #m: MeasurementNames;
  readonly #logger: Logger;
  /** Authorization header of v1 requests (and the v1 WriteApi); empty without credentials. */
  readonly #v1Headers: Record<string, string>;
  readonly #writeApi: WriteApi;
  readonly #queryApi: QueryApi | null;
  readonly #outbox: Outbox;
  #readFailures = 0;
  #closed = false;
  /** The credentials in every form a request carries them, longest first (scrubbed from errors). */
  readonly #secretForms: string[];

  constructor(opts: InfluxStoreOptions) {
    this.#opts = opts;
    this.kind = opts.api === 'v1' ? 'influxdb-v1' : 'influxdb-v2';
    this.#url = opts.url.replace(/\/+$/, '');
    this.#timeoutMs = opts.timeoutMs ?? INFLUX_DEFAULTS.timeoutMs;
    this.#m = { ...INFLUX_DEFAULTS.measurements, ...(opts.measurements ?? {}) };
    for (const [role, name] of Object.entries(this.#m)) checkMeasurementName(role, name);
    this.#logger = opts.logger ?? silentLogger;
    this.#secretForms = credentialForms(opts);
    const batchSize = opts.batchSize ?? INFLUX_DEFAULTS.batchSize;

    if (opts.api === 'v1') {
      this.#v1Headers = {};
      if (opts.user !== undefined && opts.password !== undefined) {
        this.#v1Headers.authorization = 'Basic ' + Buffer.from(`${opts.user}:${opts.password}`, 'utf8').toString('base64');
      } else if (opts.token !== undefined) {
        this.#v1Headers.authorization = `Token ${opts.token}`;
      }
    } else {
      this.#v1Headers = {};
    }

    const client = new InfluxDB({
      url: this.#url,
      token: opts.api === 'v2' ? opts.token : undefined,
      timeout: this.#timeoutMs,
      headers: opts.api === 'v1' ? { ...this.#v1Headers } : undefined,
    });
    this.#writeApi = client.getWriteApi(opts.api === 'v2' ? opts.org : '-', opts.api === 'v2' ? opts.bucket : '-', 'ms', {
      // The Outbox batches and retries; the WriteApi sends exactly the lines it is given, once.
      batchSize: batchSize + 1,
      maxBatchBytes: Number.MAX_SAFE_INTEGER,
      flushInterval: 0,
      maxRetries: 0,
      maxBufferLines: batchSize + 1,
      gzipThreshold: opts.gzipThresholdBytes ?? INFLUX_DEFAULTS.gzipThresholdBytes,
      // Returning a promise takes over the client's failure handling (and its console logging).
      writeFailed: (error: Error) => Promise.reject(error),
    });
    if (opts.api === 'v1') {
      const q = new URLSearchParams({ db: opts.database, precision: 'ms' });
      if (opts.retentionPolicy) q.set('rp', opts.retentionPolicy);
      this.#writeApi.path = `/write?${q}`;
    }
    this.#queryApi = opts.api === 'v2' ? client.getQueryApi({ org: opts.org, gzip: false }) : null;

    const writePath = opts.api === 'v1' ? 'POST /write' : 'POST /api/v2/write';
    const sink: LineSink = {
      send: async (lines) => {
        this.#writeApi.writeRecords(lines);
        try {
          await this.#writeApi.flush();
        } catch (err) {
          throw this.#redact(clientError(err, writePath, this.#timeoutMs, true));
        }
      },
    };
    this.#outbox = new Outbox({
      sink,
      capacity: opts.writeBufferPoints ?? INFLUX_DEFAULTS.writeBufferPoints,
      ...(opts.spool ? { spool: opts.spool, spoolCapacity: opts.spoolMaxPoints ?? INFLUX_DEFAULTS.spoolMaxPoints } : {}),
      batchSize,
      flushIntervalMs: opts.flushIntervalMs ?? INFLUX_DEFAULTS.flushIntervalMs,
      backoff: new Backoff({
        initialMs: opts.minRetryDelayMs ?? INFLUX_DEFAULTS.minRetryDelayMs,
        maxMs: Math.max(opts.maxRetryDelayMs ?? INFLUX_DEFAULTS.maxRetryDelayMs, opts.minRetryDelayMs ?? INFLUX_DEFAULTS.minRetryDelayMs),
        jitter: opts.retryJitter ?? INFLUX_DEFAULTS.retryJitter,
        random: opts.random,
      }),
      maxRetryDelayMs: opts.maxRetryDelayMs ?? INFLUX_DEFAULTS.maxRetryDelayMs,
      closeTimeoutMs: opts.closeTimeoutMs ?? INFLUX_DEFAULTS.closeTimeoutMs,
      dropLogIntervalMs: opts.dropLogIntervalMs ?? INFLUX_DEFAULTS.dropLogIntervalMs,
      logger: this.#logger,
      store: this.kind,
      now: opts.now ?? Date.now,
      setTimer: opts.setTimer ?? ((fn, ms) => setTimeout(fn, ms)),
      clearTimer: opts.clearTimer ?? ((h) => clearTimeout(h as ReturnType<typeof setTimeout>)),
    });
  }

  /** Measurement names in use (after defaults). */
  get measurements(): Readonly<MeasurementNames> {
    return this.#m;
  }

  async readReadings(sel: SourceSelector, fromMs: number, toMs: number): Promise<Reading[]> {
    if (this.#closed) throw new StoreError('STORE_CLOSED', `${this.kind} store is closed`, { series: sel.name });
    const rs = resolveSelector(sel, this.#opts.api);
    const w = checkWindow(rs.series, fromMs, toMs);
    if (w.toMs <= w.fromMs) return [];
    try {
      const out = this.#opts.api === 'v1' ? await this.#readV1(rs, w.fromMs, w.toMs) : await this.#readV2(rs, w.fromMs, w.toMs);
      // Contract: fromMs <= t < toMs. A mean window labelled by its start may begin before fromMs.
      return out.filter((r) => r.t >= w.fromMs && r.t < w.toMs);
    } catch (err) {
      this.#readFailures++;
      throw this.#redact(err);
    }
  }

  /**
   * A server or gateway may echo the request (with its Authorization header) in an error answer,
   * and the message quotes the answer: take the credentials out before the error leaves the adapter.
   */
  #redact<T>(err: T): T {
    if (!(err instanceof Error) || this.#secretForms.length === 0) return err;
    const scrub = (t: string) => this.#secretForms.reduce((acc, f) => acc.split(f).join('[redacted]'), t);
    err.message = scrub(err.message);
    if (err.stack) err.stack = scrub(err.stack);
    return err;
  }

  async #readV1(rs: ReturnType<typeof resolveSelector>, fromMs: number, toMs: number): Promise<Reading[]> {
    const opts = this.#opts as Extract<InfluxStoreOptions, { api: 'v1' }>;
    const q = buildReadQuery(rs, fromMs, toMs, opts.retentionPolicy);
    const at = 'POST /query';
    const body = new URLSearchParams({ db: opts.database, q, epoch: 'ms', chunked: 'true', chunk_size: String(V1_CHUNK_ROWS) });
    let res: Response;
    let text: string;
    try {
      res = await fetch(`${this.#url}/query`, {
        method: 'POST',
        body,
        headers: { ...this.#v1Headers, accept: 'application/json' },
        signal: AbortSignal.timeout(this.#timeoutMs),
      });
      text = await res.text();
    } catch (err) {
      throw networkStoreError(err, at, { series: rs.series, timeoutMs: this.#timeoutMs });
    }
    if (!res.ok) {
      // A 400 with a JSON {"error": …} is a statement the server refused.
      if (res.status === 400 && text.trim().startsWith('{')) return parseQueryAnswer(text, rs.series, at);
      throw httpStoreError(res.status, text, at, { series: rs.series, retryAfterMs: parseRetryAfter(res.headers.get('retry-after'), Date.now()) });
    }
    return parseQueryAnswer(text, rs.series, at);
  }

  async #readV2(rs: ReturnType<typeof resolveSelector>, fromMs: number, toMs: number): Promise<Reading[]> {
    const opts = this.#opts as Extract<InfluxStoreOptions, { api: 'v2' }>;
    const query = buildFluxQuery(opts.bucket, rs, fromMs, toMs);
    const at = 'POST /api/v2/query';
    const out: Reading[] = [];
    try {
      for await (const { values, tableMeta } of this.#queryApi!.iterateRows(query)) {
        const errCol = tableMeta.columns.find((c) => c.label === 'error');
        if (errCol && !tableMeta.columns.some((c) => c.label === '_value')) {
          // An error table inside a 200 answer: the query failed while running.
          const msg = String(values[errCol.index] ?? '');
          throw new StoreError('QUERY_REJECTED', `${at}: ${snippet(msg)}`, { series: rs.series, at, hint: 'check the series source (measurement, field, tags)' });
        }
        const t = tableMeta.get(values, '_time');
        const v = tableMeta.get(values, '_value');
        const tMs = typeof t === 'string' ? parseFluxTime(t) : NaN;
        if (!Number.isFinite(tMs)) throw new StoreError('STORE_PROTOCOL', `${at}: _time ${JSON.stringify(t)} is not RFC 3339`, { series: rs.series, at });
        out.push({ t: tMs, v: readingValue(v) });
      }
    } catch (err) {
      if (err instanceof StoreError) throw err;
      throw clientError(err, at, this.#timeoutMs, false, rs.series);
    }
    return out;
  }

  async writeForecast(batch: ForecastBatch): Promise<void> {
    this.#outbox.add(forecastLines(batch, this.#m));
  }

  async writeScores(points: ScorePoint[]): Promise<void> {
    this.#outbox.add(scoreLines(points, this.#m));
  }

  async writeHealth(points: HealthPoint[]): Promise<void> {
    this.#outbox.add(healthLines(points, this.#m));
  }

  /**
   * Ready when the server answers /ping and writes are not being refused for a reason that needs
   * an operator (credentials, missing database). A plain outage shows as "no answer".
   */
  async ping(): Promise<boolean> {
    if (this.#closed) return false;
    try {
      const res = await fetch(`${this.#url}/ping`, { signal: AbortSignal.timeout(Math.min(this.#timeoutMs, 5_000)) });
      await res.arrayBuffer();
      if (res.status !== 204 && res.status !== 200) return false;
    } catch {
      return false;
    }
    const code = this.#outbox.stats().lastError?.code;
    return code !== 'STORE_AUTH' && code !== 'STORE_DATABASE_MISSING';
  }

  /** Sends all buffered points now; rejects with the StoreError when the server does not take them (they stay buffered). */
  flush(): Promise<void> {
    return this.#outbox.flush();
  }

  /**
   * Stops accepting writes, sends what is buffered within closeTimeoutMs (with a spool: what the
   * server does not confirm stays spooled for the next start), then releases the client and the spool.
   */
  async close(): Promise<void> {
    if (this.#closed) return;
    this.#closed = true;
    try {
      await this.#outbox.close();
    } finally {
      this.#writeApi.dispose();
      this.#opts.spool?.close();
    }
  }

  /** Counters for /metrics and /readyz. */
  stats(): InfluxStoreStats {
    return { ...this.#outbox.stats(), readFailures: this.#readFailures };
  }
}

/**
 * Measurement names radcast writes. A line starting with "#" is a comment in line protocol (the
 * server would silently ignore every point), and control characters cannot be carried.
 */
function checkMeasurementName(role: string, name: string): void {
  // eslint-disable-next-line no-control-regex
  if (name === '' || name.startsWith('#') || /[\u0000-\u001f\u007f]/.test(name) || name.endsWith('\\')) {
    throw new StoreError('OPTION_INVALID', `measurement name ${JSON.stringify(name)} (${role}) cannot be written in line protocol`, {
      at: `store.influxdb.measurements.${role}`,
      hint: 'use a name that does not start with "#", has no control characters and does not end in a backslash',
    });
  }
}

/** Token and password as sent: raw, URL-encoded, base64, and the Basic credentials of user:password. */
function credentialForms(opts: InfluxStoreOptions): string[] {
  const out = new Set<string>();
  const password = opts.api === 'v1' ? opts.password : undefined;
  for (const v of [opts.token, password]) {
    if (v === undefined || v.length < 4) continue;
    out.add(v);
    out.add(encodeURIComponent(v));
    out.add(Buffer.from(v, 'utf8').toString('base64'));
  }
  if (opts.api === 'v1' && opts.user !== undefined && password !== undefined) out.add(Buffer.from(`${opts.user}:${password}`, 'utf8').toString('base64'));
  return [...out].sort((a, b) => b.length - a.length);
}

/** Maps an error thrown by the client library (HttpError, timeout, socket error) to a StoreError. */
function clientError(err: unknown, at: string, timeoutMs: number, write: boolean, series?: string): StoreError {
  if (err instanceof StoreError) return err;
  if (err instanceof HttpError) {
    const body = err.body ?? err.message;
    const retryHeader = err.headers?.['retry-after'];
    const retryAfterMs = parseRetryAfter(Array.isArray(retryHeader) ? retryHeader[0] : retryHeader, Date.now());
    if (write && (err.statusCode === 400 || err.statusCode === 413 || err.statusCode === 422)) {
      const dropped = /dropped=(\d+)/.exec(body);
      const e = new StoreError('WRITE_REJECTED', `${at} refused points (${err.statusCode}): ${snippet(body)}`, {
        at,
        status: err.statusCode,
        hint:
          err.statusCode === 413
            ? 'lower store.influxdb.batchSize'
            : 'a field changed type (e.g. integer vs float) or a name is invalid; see the server message',
      });
      return Object.assign(e, { refusedPoints: dropped ? Number(dropped[1]) : undefined });
    }
    return httpStoreError(err.statusCode, body, at, { series, retryAfterMs });
  }
  return networkStoreError(err, at, { series, timeoutMs });
}
