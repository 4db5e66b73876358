/**
 * Prometheus metrics of the daemon (prom-client), on a registry of its own so tests and several
 * daemons in one process never share counters. Names are listed in /work/notes/daemon.md and the
 * contributor guide; every one carries the `radcast_` prefix and its unit in the name.
 */
import client from 'prom-client';
import { DRIFT_STATE_CODE, type DriftState } from '../store/types.ts';
import type { StageTimings } from './timings.ts';

/** Buckets for per-series durations (seconds): 1 ms .. 2 min. */
const SERIES_BUCKETS_S = [0.001, 0.0025, 0.005, 0.01, 0.025, 0.05, 0.1, 0.25, 0.5, 1, 2.5, 5, 10, 30, 60, 120];
/** Buckets for whole runs over all series (seconds). */
const RUN_BUCKETS_S = [0.1, 0.5, 1, 2, 5, 10, 20, 30, 60, 120, 300, 600];

/** Write-buffer counters of a store adapter that buffers (the InfluxDB adapter's stats()), read at scrape time. */
export interface StoreWriteStats {
  store: string;
  /** Points waiting in memory and in the spool. */
  buffered: number;
  /** Of buffered: in the spool. */
  spooled: number;
  dropped: number;
  droppedForecast: number;
  rejected: number;
  spooledTotal: number;
  replayed: number;
}

export class DaemonMetrics {
  readonly registry: client.Registry;
  readonly cycleDuration: client.Histogram<'outcome'>;
  readonly stageDuration: client.Histogram<'stage'>;
  readonly fitDuration: client.Histogram<string>;
  readonly runDuration: client.Histogram<string>;
  readonly cyclesTotal: client.Counter<'outcome'>;
  readonly failuresTotal: client.Counter<'series' | 'code'>;
  readonly lastSuccess: client.Gauge<'series'>;
  readonly lastAttempt: client.Gauge<'series'>;
  readonly skippedTotal: client.Counter<'reason'>;
  readonly writeRetriesTotal: client.Counter<'store' | 'kind'>;
  readonly writeFailuresTotal: client.Counter<'store' | 'kind'>;
  readonly driftState: client.Gauge<'series'>;
  readonly driftStatistic: client.Gauge<'series'>;
  readonly noveltyShare: client.Gauge<'series'>;
  readonly recentMase: client.Gauge<'series'>;
  readonly seriesConfigured: client.Gauge<string>;
  readonly storeUp: client.Gauge<'store'>;
  readonly reloadsTotal: client.Counter<'outcome'>;
  readonly nanRejectedTotal: client.Counter<'series'>;
  readonly poolQueue: client.Gauge<string>;
  readonly storeBuffered: client.Gauge<'store' | 'where'>;
  readonly storePointsDropped: client.Counter<'store' | 'kind'>;
  readonly storePointsRejected: client.Counter<'store'>;
  readonly storePointsSpooled: client.Counter<'store'>;
  readonly storePointsReplayed: client.Counter<'store'>;

  constructor(opts: { defaultMetrics?: boolean } = {}) {
    const registry = new client.Registry();
    this.registry = registry;
    const reg = { registers: [registry] };
    this.cycleDuration = new client.Histogram({
      name: 'radcast_cycle_duration_seconds',
      help: 'Wall time of one series cycle (read to health write), by outcome',
      labelNames: ['outcome'],
      buckets: SERIES_BUCKETS_S,
      ...reg,
    });
    this.stageDuration = new client.Histogram({
      name: 'radcast_cycle_stage_duration_seconds',
      help: 'Wall time of one stage of a series cycle (read, prepare, fit, predict, write, score, drift)',
      labelNames: ['stage'],
      buckets: SERIES_BUCKETS_S,
      ...reg,
    });
    this.fitDuration = new client.Histogram({
      name: 'radcast_fit_duration_seconds',
      help: 'Wall time of one model fit (inside the worker)',
      buckets: SERIES_BUCKETS_S,
      ...reg,
    });
    this.runDuration = new client.Histogram({
      name: 'radcast_run_duration_seconds',
      help: 'Wall time of a run over many series (radcast once, or a tick that made several series due)',
      buckets: RUN_BUCKETS_S,
      ...reg,
    });
    this.cyclesTotal = new client.Counter({ name: 'radcast_cycles_total', help: 'Series cycles finished, by outcome (ok, failed, aborted)', labelNames: ['outcome'], ...reg });
    this.failuresTotal = new client.Counter({
      name: 'radcast_series_failures_total',
      help: 'Failed series cycles by series and error code',
      labelNames: ['series', 'code'],
      ...reg,
    });
    this.lastSuccess = new client.Gauge({
      name: 'radcast_series_last_success_timestamp_seconds',
      help: 'Unix time of the last successful cycle of the series',
      labelNames: ['series'],
      ...reg,
    });
    this.lastAttempt = new client.Gauge({
      name: 'radcast_series_last_attempt_timestamp_seconds',
      help: 'Unix time of the last cycle of the series, successful or not',
      labelNames: ['series'],
      ...reg,
    });
    this.skippedTotal = new client.Counter({
      name: 'radcast_cycles_skipped_total',
      help: 'Cycle requests not started: busy = the series was still queued or running, stopping = shutdown in progress',
      labelNames: ['reason'],
      ...reg,
    });
    this.writeRetriesTotal = new client.Counter({
      name: 'radcast_store_write_retries_total',
      help: 'Store writes retried after a retryable error, by store adapter and what was written',
      labelNames: ['store', 'kind'],
      ...reg,
    });
    this.writeFailuresTotal = new client.Counter({
      name: 'radcast_store_write_failures_total',
      help: 'Store writes that failed after all retries, by store adapter and what was written',
      labelNames: ['store', 'kind'],
      ...reg,
    });
    this.driftState = new client.Gauge({
      name: 'radcast_drift_state',
      help: `Drift state per series as a code: ${Object.entries(DRIFT_STATE_CODE).map(([k, v]) => `${v}=${k}`).join(', ')}`,
      labelNames: ['series'],
      ...reg,
    });
    this.driftStatistic = new client.Gauge({ name: 'radcast_drift_statistic', help: 'Change-detector statistic per series', labelNames: ['series'], ...reg });
    this.noveltyShare = new client.Gauge({
      name: 'radcast_input_novelty_ratio',
      help: 'Share of recent model inputs far from every centre, per series (0..1)',
      labelNames: ['series'],
      ...reg,
    });
    this.recentMase = new client.Gauge({ name: 'radcast_recent_mase', help: 'MASE of recently matured forecasts per series', labelNames: ['series'], ...reg });
    this.seriesConfigured = new client.Gauge({ name: 'radcast_series_configured', help: 'Series in the running config', ...reg });
    this.storeUp = new client.Gauge({ name: 'radcast_store_up', help: '1 when the last store ping answered, else 0', labelNames: ['store'], ...reg });
    this.reloadsTotal = new client.Counter({ name: 'radcast_config_reloads_total', help: 'Config reloads by outcome (applied, rejected, unchanged)', labelNames: ['outcome'], ...reg });
    this.nanRejectedTotal = new client.Counter({
      name: 'radcast_forecasts_rejected_total',
      help: 'Forecasts not written because a value or band was not finite, per series',
      labelNames: ['series'],
      ...reg,
    });
    const metrics = this;
    this.poolQueue = new client.Gauge({
      name: 'radcast_fit_pool_queue',
      help: 'Fit tasks waiting for a worker thread',
      ...reg,
      collect() {
        this.set(metrics.#poolQueued());
      },
    });
    // Store write buffer: copied from the adapter's own counters at scrape time.
    const storeStats = () => metrics.#storeStats();
    this.storeBuffered = new client.Gauge({
      name: 'radcast_store_buffered_points',
      help: 'Points waiting to be confirmed by the store, in memory or in the durable spool (state file)',
      labelNames: ['store', 'where'],
      ...reg,
      collect() {
        const st = storeStats();
        if (!st) return;
        this.set({ store: st.store, where: 'memory' }, st.buffered - st.spooled);
        this.set({ store: st.store, where: 'spool' }, st.spooled);
      },
    });
    const counter = <L extends string>(name: string, help: string, labelNames: L[], values: (st: StoreWriteStats) => [Partial<Record<L, string>>, number][]) =>
      new client.Counter<L>({
        name,
        help,
        labelNames,
        ...reg,
        collect() {
          const st = storeStats();
          if (!st) return;
          this.reset();
          for (const [labels, v] of values(st)) this.inc({ store: st.store, ...labels } as Partial<Record<L, string | number>>, v);
        },
      });
    this.storePointsDropped = counter('radcast_store_points_dropped_total', 'Points the store adapter dropped at a buffer bound (oldest forecasts first), by kind', ['store', 'kind'], (st) => [
      [{ kind: 'forecast' }, st.droppedForecast],
      [{ kind: 'other' }, st.dropped - st.droppedForecast],
    ]);
    this.storePointsRejected = counter('radcast_store_points_rejected_total', 'Points the store refused as invalid (not retried)', ['store'], (st) => [[{}, st.rejected]]);
    this.storePointsSpooled = counter('radcast_store_points_spooled_total', 'Points written into the durable write spool (state file): while the store failed or a backlog waited, at the memory bound, at shutdown', ['store'], (st) => [[{}, st.spooledTotal]]);
    this.storePointsReplayed = counter('radcast_store_points_replayed_total', 'Points left in the spool by an earlier run that the store has confirmed since this start', ['store'], (st) => [[{}, st.replayed]]);
    if (opts.defaultMetrics !== false) client.collectDefaultMetrics({ register: registry, prefix: 'radcast_' });
  }

  #poolQueued: () => number = () => 0;
  #storeStats: () => StoreWriteStats | null = () => null;

  /** Where the radcast_store_*_points metrics read the store adapter's write counters at scrape time (null: the store has none). */
  bindStoreStats(fn: () => StoreWriteStats | null): void {
    this.#storeStats = fn;
  }

  /** Where radcast_fit_pool_queue reads the queue length at scrape time. */
  bindPoolQueue(fn: () => number): void {
    this.#poolQueued = fn;
  }

  /** Record a finished series cycle. */
  recordCycle(r: { series: string; ok: boolean; aborted?: boolean; errorCode?: string; finishedAtMs: number; timings: StageTimings; totalMs: number; fitWorkerMs?: number }): void {
    const outcome = r.aborted ? 'aborted' : r.ok ? 'ok' : 'failed';
    this.cyclesTotal.inc({ outcome });
    this.cycleDuration.observe({ outcome }, r.totalMs / 1000);
    for (const [stage, ms] of Object.entries(r.timings)) {
      if (ms > 0) this.stageDuration.observe({ stage }, ms / 1000);
    }
    if (r.fitWorkerMs !== undefined) this.fitDuration.observe(r.fitWorkerMs / 1000);
    this.lastAttempt.set({ series: r.series }, r.finishedAtMs / 1000);
    if (r.ok) this.lastSuccess.set({ series: r.series }, r.finishedAtMs / 1000);
    else if (!r.aborted) this.failuresTotal.inc({ series: r.series, code: r.errorCode ?? 'INTERNAL' });
  }

  recordDrift(series: string, state: DriftState, statistic: number, novelty: number, recentMase: number): void {
    this.driftState.set({ series }, DRIFT_STATE_CODE[state]);
    if (Number.isFinite(statistic)) this.driftStatistic.set({ series }, statistic);
    if (Number.isFinite(novelty)) this.noveltyShare.set({ series }, novelty);
    if (Number.isFinite(recentMase)) this.recentMase.set({ series }, recentMase);
  }

  /** Drop the per-series label values of series no longer configured (bounded cardinality after reloads). */
  forgetSeries(series: string): void {
    for (const g of [this.lastSuccess, this.lastAttempt, this.driftState, this.driftStatistic, this.noveltyShare, this.recentMase]) g.remove({ series });
    this.nanRejectedTotal.remove({ series });
  }

  async text(): Promise<string> {
    return this.registry.metrics();
  }

  get contentType(): string {
    return this.registry.contentType;
  }
}
