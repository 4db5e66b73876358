/**
 * `radcast run`: the long-running process.
 *
 *   start()   open stores and the fit pool, restore each series' status from the state store,
 *             listen on HTTP, arm the per-series schedules, watch the config file, and run a
 *             first cycle for series whose forecast is missing or older than one step
 *   reload()  (SIGHUP, config file change) load and validate the file; an invalid file is
 *             rejected with every issue logged and the running config stays; a valid one replaces
 *             the series, schedules and concurrency (store, state and HTTP address need a restart)
 *   stop()    stop scheduling, let running cycles finish within daemon.shutdownTimeout, close
 *             the pool, flush and close the stores, close HTTP
 *   flush()   wait for queued and running cycles, then flush the store
 */
import type { Logger } from 'pino';
import { loadConfigFile, type LoadedConfig, type LoadResult } from '../config/load.ts';
import { formatIssue, type ConfigIssue } from '../config/errors.ts';
import type { ResolvedSeries } from '../config/resolve.ts';
import { regularize } from '../series/index.ts';
import { quantileKey } from '../evaluate/metrics.ts';
import type { DriftState } from '../store/types.ts';
import { parseDriftMemory } from '../drift/index.ts';
import { systemClock, type Clock } from './clock.ts';
import { ConfigWatcher } from './config-watch.ts';
import type { CronDriver } from './cron-driver.ts';
import { describeError } from './errors.ts';
import { HttpServer, type ReadyCheck } from './http.ts';
import type { ChartData } from './page.ts';
import { msOf, openRuntime, type Runtime, type RuntimeDeps } from './runtime.ts';
import { Scheduler, type RunRequest } from './scheduler.ts';
import { filterOwned } from './shard.ts';
import { blankStatus, type SeriesStatus } from './status.ts';
import type { SeriesCycleResult } from './cycle.ts';
import { dependencyWaves } from './runner.ts';

export interface DaemonOptions extends Omit<RuntimeDeps, 'logger' | 'clock'> {
  loaded: LoadedConfig;
  logger: Logger;
  clock?: Clock;
  /** Where schedule ticks come from (default node-cron). */
  cronDriver?: CronDriver;
  /** Reload source (default: loadConfigFile on loaded.file). */
  loadConfig?: (file: string) => LoadResult;
  /** Run a first cycle at start for series without a fresh forecast (default true). */
  initialRun?: boolean;
  /** Watch the config file (default: config daemon.watchConfig, when loaded from a file). */
  watchConfig?: boolean;
  /** HTTP port override (tests use 0). */
  httpPort?: number;
}

export interface ReloadOutcome {
  applied: boolean;
  issues: ConfigIssue[];
  /** Series added / removed / changed by an applied reload. */
  added: string[];
  removed: string[];
  changed: string[];
}

/** Chart window of the page: this many horizons of actuals before the latest forecast. */
const CHART_HORIZONS = 3;

export class Daemon {
  readonly #o: DaemonOptions;
  readonly #clock: Clock;
  readonly #logger: Logger;
  #loaded: LoadedConfig;
  #rt: Runtime | null = null;
  #scheduler: Scheduler | null = null;
  #http: HttpServer | null = null;
  #watcher: ConfigWatcher | null = null;
  #bySeries = new Map<string, ResolvedSeries>();
  /** Series in dependency order (inputs used at target time first). */
  #ordered: ResolvedSeries[] = [];
  /** series -> configured inputs of an earlier wave it uses at target time. */
  #inputsOf = new Map<string, string[]>();
  #status = new Map<string, SeriesStatus>();
  #state: 'new' | 'running' | 'stopping' | 'stopped' = 'new';
  #stopped: Promise<void> | null = null;
  #reloading: Promise<ReloadOutcome> | null = null;
  #lastReload: { at: number; applied: boolean; issues: number } | null = null;

  constructor(opts: DaemonOptions) {
    this.#o = opts;
    this.#clock = opts.clock ?? systemClock;
    this.#logger = opts.logger;
    this.#loaded = opts.loaded;
  }

  get runtime(): Runtime {
    if (!this.#rt) throw new Error('daemon not started');
    return this.#rt;
  }

  get httpAddress(): { host: string; port: number } | null {
    const a = this.#http?.address;
    return a ? { host: a.address, port: a.port } : null;
  }

  get config(): LoadedConfig {
    return this.#loaded;
  }

  get scheduler(): Scheduler {
    if (!this.#scheduler) throw new Error('daemon not started');
    return this.#scheduler;
  }

  statuses(): SeriesStatus[] {
    return [...this.#status.values()];
  }

  async start(): Promise<void> {
    if (this.#state !== 'new') return;
    const cfg = this.#loaded.config;
    const rt = await openRuntime(this.#loaded, { ...this.#o, clock: this.#clock, logger: this.#logger });
    this.#rt = rt;
    this.#setSeries(rt.owned);
    this.#restoreStatus();
    const sched = new Scheduler({
      runSeries: (series, req) => this.#runSeries(series, req),
      // Twice the fit threads, so one series can read or write while another fits.
      concurrency: Math.max(1, cfg.daemon.concurrency * 2),
      logger: this.#logger,
      clock: this.#clock,
      ...(this.#o.cronDriver ? { driver: this.#o.cronDriver } : {}),
      onSkip: (_s, reason) => rt.metrics.skippedTotal.inc({ reason }),
      waitFor: (series) => this.#inputsOf.get(series) ?? [],
    });
    sched.setSchedules(this.#scheduleList());
    this.#scheduler = sched;
    if (cfg.http.enabled) {
      this.#http = new HttpServer({
        host: cfg.http.address,
        port: this.#o.httpPort ?? cfg.http.port,
        metrics: rt.metrics,
        logger: this.#logger,
        title: 'radcast',
        now: () => this.#clock.now(),
        source: {
          statuses: () => this.statuses(),
          readiness: () => this.readiness(),
          chartData: (name) => this.chartData(name),
        },
      });
      try {
        await this.#http.start();
      } catch (err) {
        await rt.close();
        throw err;
      }
    }
    sched.start();
    rt.notifier?.start();
    const file = this.#loaded.file;
    if (file && (this.#o.watchConfig ?? cfg.daemon.watchConfig)) {
      this.#watcher = new ConfigWatcher({ file, logger: this.#logger, clock: this.#clock, onChange: () => void this.reload('file-change') });
      this.#watcher.start();
    }
    this.#state = 'running';
    this.#logger.info(
      { series: rt.owned.length, store: rt.store.kind, workers: rt.fitter.kind === 'pool' ? cfg.daemon.concurrency : 0, http: this.httpAddress, config: file },
      'radcast daemon started',
    );
    if (this.#o.initialRun ?? true) {
      const now = this.#clock.now();
      for (const s of this.#ordered) {
        const st = this.#status.get(s.name);
        const fresh = st?.lastSuccessAt !== null && st?.lastSuccessAt !== undefined && now - st.lastSuccessAt < s.settings.stepMs;
        if (!fresh) sched.trigger(s.name, 'manual');
      }
    }
  }

  /** /readyz: the store answers, the state store answers, the running config is valid, not stopping. */
  async readiness(): Promise<Record<string, ReadyCheck>> {
    const out: Record<string, ReadyCheck> = {};
    const rt = this.#rt;
    if (!rt || this.#state !== 'running') {
      out.process = { ok: false, detail: this.#state === 'new' ? 'starting' : 'shutting down' };
      return out;
    }
    let up = false;
    try {
      up = await Promise.race([rt.store.ping(), new Promise<boolean>((resolve) => setTimeout(() => resolve(false), 2000).unref())]);
    } catch {
      up = false;
    }
    rt.metrics.storeUp.set({ store: rt.store.kind }, up ? 1 : 0);
    out.store = up ? { ok: true, detail: rt.store.kind } : { ok: false, detail: `${rt.store.kind} store does not answer` };
    try {
      rt.stateStore.outboxSize();
      out.state = { ok: true };
    } catch (err) {
      out.state = { ok: false, detail: describeError(err).code };
    }
    out.config = { ok: true, detail: this.#lastReload && !this.#lastReload.applied ? `running the previous config; last reload rejected (${this.#lastReload.issues} issue(s))` : `${this.#bySeries.size} series` };
    return out;
  }

  /** Chart data of one series for the page: recent actuals on the series' grid, the latest forecast and its outermost band. */
  async chartData(name: string): Promise<ChartData | null> {
    const r = this.#bySeries.get(name);
    const rt = this.#rt;
    if (!r || !rt) return null;
    const step = r.settings.stepMs;
    const H = r.settings.features.horizon;
    const latest = await rt.state.latestIssued(name);
    const endMs = latest ? latest.issuedAt + step : Math.floor(this.#clock.now() / step) * step;
    const startMs = endMs - CHART_HORIZONS * H * step;
    const readings = await rt.store.readReadings(r.source, startMs, endMs);
    const reg = regularize(readings, { ...r.settings.regularize, maxFillSteps: 0, stepMs: step, startMs, endMs, series: name });
    const actuals: Array<[number, number | null]> = [];
    for (let i = 0; i < reg.values.length; i++) actuals.push([reg.startMs + i * step, Number.isFinite(reg.values[i]) ? reg.values[i] : null]);
    let forecast: ChartData['forecast'] = null;
    if (latest) {
      const qs = [...r.settings.quantiles].sort((a, b) => a - b);
      const lowerKey = qs.length >= 2 ? quantileKey(qs[0]) : null;
      const upperKey = qs.length >= 2 ? quantileKey(qs[qs.length - 1]) : null;
      forecast = {
        issuedAt: latest.issuedAt,
        lowerKey,
        upperKey,
        points: latest.points.map((p) => ({
          t: p.t,
          lead: p.lead,
          value: p.value,
          lower: lowerKey && Number.isFinite(p.bands[lowerKey]) ? p.bands[lowerKey] : null,
          upper: upperKey && Number.isFinite(p.bands[upperKey]) ? p.bands[upperKey] : null,
        })),
      };
    }
    return { series: name, timeZone: r.settings.features.timeZone, stepMs: step, actuals, forecast, driftState: this.#status.get(name)?.driftState ?? null };
  }

  /**
   * Load the config file again and apply it when valid. Concurrent calls share one reload.
   * An invalid file leaves everything as it was; its issues are logged and returned.
   */
  reload(reason: 'sighup' | 'file-change' | 'manual' = 'manual'): Promise<ReloadOutcome> {
    this.#reloading ??= this.#reload(reason).finally(() => {
      this.#reloading = null;
    });
    return this.#reloading;
  }

  async #reload(reason: string): Promise<ReloadOutcome> {
    const none: ReloadOutcome = { applied: false, issues: [], added: [], removed: [], changed: [] };
    const rt = this.#rt;
    const file = this.#loaded.file;
    if (!rt || this.#state !== 'running' || !file) return none;
    const res = (this.#o.loadConfig ?? ((f: string) => loadConfigFile(f)))(file);
    if (!res.ok) {
      for (const i of res.issues) this.#logger.error({ code: i.code, path: i.path, series: i.series, line: i.line, hint: i.hint }, `config reload rejected: ${formatIssue(i)}`);
      this.#logger.warn({ file, issues: res.issues.length, reason }, 'config reload rejected; the running config stays in effect');
      rt.metrics.reloadsTotal.inc({ outcome: 'rejected' });
      this.#lastReload = { at: this.#clock.now(), applied: false, issues: res.issues.length };
      return { ...none, issues: res.issues };
    }
    const next = res.value;
    const old = this.#loaded.config;
    for (const [key, a, b] of [
      ['store', old.store, next.config.store],
      ['state', old.state, next.config.state],
      ['http', old.http, next.config.http],
    ] as const) {
      if (JSON.stringify(a) !== JSON.stringify(b)) this.#logger.warn({ section: key }, `config section "${key}" changed; it takes effect after a restart`);
    }
    const owned = filterOwned(rt.shard, next.series, (s) => s.name);
    const before = this.#bySeries;
    const added = owned.filter((s) => !before.has(s.name)).map((s) => s.name);
    const removed = [...before.keys()].filter((n) => !owned.some((s) => s.name === n));
    const changed = owned.filter((s) => before.has(s.name) && JSON.stringify(before.get(s.name)) !== JSON.stringify(s)).map((s) => s.name);
    try {
      this.#scheduler!.setSchedules(dependencyWaves(owned).flat().map((s) => ({ series: s.name, cron: s.schedule.cron, timeZone: s.schedule.timeZone })));
    } catch (err) {
      const e = describeError(err);
      this.#logger.error({ code: e.code, err: e.message }, 'config reload rejected: schedules invalid; the running config stays in effect');
      rt.metrics.reloadsTotal.inc({ outcome: 'rejected' });
      this.#lastReload = { at: this.#clock.now(), applied: false, issues: 1 };
      return none;
    }
    this.#loaded = { ...next, config: { ...next.config, store: old.store, state: old.state, http: old.http } };
    rt.loaded = this.#loaded;
    rt.owned = owned;
    this.#scheduler!.setConcurrency(Math.max(1, next.config.daemon.concurrency * 2));
    this.#logger.level = next.config.log.level;
    this.#setSeries(owned);
    for (const n of removed) rt.metrics.forgetSeries(n);
    rt.metrics.seriesConfigured.set(owned.length);
    rt.metrics.reloadsTotal.inc({ outcome: added.length + removed.length + changed.length > 0 ? 'applied' : 'unchanged' });
    this.#lastReload = { at: this.#clock.now(), applied: true, issues: 0 };
    this.#watcher?.markApplied();
    this.#logger.info({ file, reason, added, removed, changed, series: owned.length }, 'config reloaded');
    for (const n of added) this.#scheduler!.trigger(n, 'manual');
    return { applied: true, issues: [], added, removed, changed };
  }

  /** Wait for queued and running cycles, then flush the store's buffered writes. */
  async flush(): Promise<void> {
    await this.#scheduler?.flush();
    await this.#rt?.store.flush();
  }

  /** Graceful stop (idempotent). */
  stop(): Promise<void> {
    this.#stopped ??= this.#stop();
    return this.#stopped;
  }

  async #stop(): Promise<void> {
    if (this.#state === 'new') {
      this.#state = 'stopped';
      return;
    }
    this.#state = 'stopping';
    const timeoutMs = msOf(this.#loaded.config.daemon.shutdownTimeout, 30_000);
    this.#logger.info({ timeoutMs, running: this.#scheduler?.running ?? [] }, 'shutting down: schedules stopped, waiting for running cycles');
    this.#watcher?.stop();
    const res = await this.#scheduler?.stop(timeoutMs);
    if (res?.abandoned.length) this.#logger.warn({ abandoned: res.abandoned, timeoutMs }, 'shutdown bound reached; these cycles were abandoned before writing');
    await this.#rt?.close();
    await this.#http?.stop();
    this.#state = 'stopped';
    this.#logger.info({ finished: res?.finished ?? 0, abandoned: res?.abandoned.length ?? 0 }, 'radcast daemon stopped');
  }

  #setSeries(list: ResolvedSeries[]): void {
    const next = new Map(list.map((s) => [s.name, s]));
    for (const name of this.#status.keys()) if (!next.has(name)) this.#status.delete(name);
    for (const s of list) {
      const st = this.#status.get(s.name);
      const base = { series: s.name, timeZone: s.settings.features.timeZone, stepMs: s.settings.stepMs, schedule: s.schedule.cron, driftEnabled: s.drift.enabled };
      if (!st) this.#status.set(s.name, blankStatus(base));
      else Object.assign(st, base);
    }
    this.#bySeries = next;
    // Inputs first: same-instant ticks fire in schedule order, and waitFor holds a dependent
    // until its input's cycle of that tick is done.
    const waves = dependencyWaves(list);
    this.#ordered = waves.flat();
    const waveOf = new Map<string, number>();
    waves.forEach((w, i) => w.forEach((s) => waveOf.set(s.name, i)));
    this.#inputsOf = new Map(
      list.map((s) => [s.name, s.exogenous.filter((e) => e.atTarget && e.configured && (waveOf.get(e.name) ?? Infinity) < (waveOf.get(s.name) ?? 0)).map((e) => e.name)]),
    );
  }

  #scheduleList() {
    return this.#ordered.map((s) => ({ series: s.name, cron: s.schedule.cron, timeZone: s.schedule.timeZone }));
  }

  /** Last attempt / success / error and drift state from the state store, so a restart shows them at once. */
  #restoreStatus(): void {
    const rt = this.#rt!;
    for (const [name, st] of this.#status) {
      try {
        const c = rt.stateStore.cycle(name);
        if (c) {
          st.lastAttemptAt = c.lastAttemptAt;
          st.lastSuccessAt = c.lastSuccessAt;
          if (c.lastErrorCode) st.lastError = { code: c.lastErrorCode, message: 'from the previous run', retryable: false };
        }
        const mem = parseDriftMemory(rt.stateStore.loadDriftState(name)?.state ?? null);
        if (mem) st.driftState = mem.state;
        if (c?.lastSuccessAt) rt.metrics.lastSuccess.set({ series: name }, c.lastSuccessAt / 1000);
        if (mem) rt.metrics.driftState.set({ series: name }, { ok: 0, watch: 1, alert: 2, stale: 3 }[mem.state]);
      } catch (err) {
        const e = describeError(err);
        this.#logger.warn({ series: name, code: e.code, err: e.message }, 'could not restore series status from the state store');
      }
    }
  }

  async #runSeries(name: string, req: RunRequest): Promise<void> {
    const rt = this.#rt;
    const r = this.#bySeries.get(name);
    if (!rt || !r) return; // removed by a reload while queued
    const res = await rt.cycle.run(r, { signal: req.signal });
    this.#record(r, res);
  }

  #record(r: ResolvedSeries, res: SeriesCycleResult): void {
    const rt = this.#rt!;
    const st = this.#status.get(r.name);
    const now = this.#clock.now();
    try {
      if (res.ok) rt.stateStore.recordSuccess(r.name, now);
      else if (res.outcome !== 'aborted') rt.stateStore.recordFailure(r.name, now, res.error?.code ?? 'INTERNAL');
    } catch (err) {
      this.#logger.warn({ series: r.name, code: describeError(err).code }, 'could not record the cycle outcome in the state store');
    }
    if (!st) return;
    st.lastAttemptAt = now;
    if (res.ok) {
      st.lastSuccessAt = now;
      st.lastError = null;
      st.consecutiveFailures = 0;
    } else if (res.outcome !== 'aborted') {
      st.lastError = res.error ?? { code: 'INTERNAL', message: 'unknown failure', retryable: false };
      st.consecutiveFailures++;
    }
    if (res.forecast) st.latestForecast = res.forecast;
    st.lastReadingAt = res.lastReadingAt;
    if (res.drift) {
      st.driftState = res.drift.state as DriftState;
      st.driftStatistic = res.drift.statistic;
      st.recentMase = Number.isFinite(res.drift.recentMase) ? res.drift.recentMase : null;
      st.baselineMase = Number.isFinite(res.drift.baselineMase) ? res.drift.baselineMase : null;
      st.noveltyShare = res.drift.noveltyShare;
    }
  }
}
