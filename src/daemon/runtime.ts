/**
 * The parts one process needs to run cycles, built from a loaded config: the series store, the
 * local state store, the fitter (worker pool or inline), the drift wiring, the metrics and the
 * cycle itself. Shared by `radcast run` (Daemon), `radcast once` and the demo. Everything that
 * touches the outside is injectable (stores, clock, logger) so tests can swap it.
 */
import type { Logger } from 'pino';
import type { LoadedConfig } from '../config/load.ts';
import type { ResolvedSeries } from '../config/resolve.ts';
import { loadSecrets, type Secrets } from '../config/secrets.ts';
import { formatIssue } from '../config/errors.ts';
import { parseDurationMs } from '../config/duration.ts';
import { openSeriesStore, openStateStore } from '../store/index.ts';
import type { StateStore } from '../store/state.ts';
import type { SeriesStore } from '../store/types.ts';
import { systemClock, type Clock } from './clock.ts';
import { SeriesCycle } from './cycle.ts';
import { CycleDriftAssessor } from './drift-adapter.ts';
import { DaemonError } from './errors.ts';
import { DaemonMetrics, type StoreWriteStats } from './metrics.ts';
import { InlineFitter, PoolFitter } from './pool.ts';
import type { Fitter } from './ports.ts';
import { StateAdapter } from './state-adapter.ts';
import { ALL_SERIES, ownedSeries, shardLabel, type ShardSpec } from './shard.ts';
import { flushAndClose } from './close.ts';
import { WebhookNotifier } from './webhook.ts';

export interface RuntimeDeps {
  logger: Logger;
  clock?: Clock;
  /** Worker threads for fits; 0 = inline. Default: config daemon.concurrency. */
  workers?: number;
  /** Fitter to use instead of the pool / inline one (the throughput benchmark's CPU-time split). */
  fitter?: Fitter;
  /** Series store to use instead of the configured one (tests). */
  store?: SeriesStore;
  /** State store to use instead of config state.path (tests). */
  stateStore?: StateStore;
  metrics?: DaemonMetrics;
  shard?: ShardSpec;
  env?: Record<string, string | undefined>;
}

export interface Runtime {
  loaded: LoadedConfig;
  secrets: Secrets;
  store: SeriesStore;
  stateStore: StateStore;
  state: StateAdapter;
  fitter: Fitter;
  metrics: DaemonMetrics;
  cycle: SeriesCycle;
  clock: Clock;
  logger: Logger;
  shard: ShardSpec;
  /** The series this instance owns (its shard of the config). */
  owned: ResolvedSeries[];
  /** Delivers the drift notices kept in the state store's outbox (Daemon starts it, `once` flushes it); null when no series has a webhook. */
  notifier: WebhookNotifier | null;
  /** Flush and close everything (idempotent). */
  close(): Promise<void>;
}

/** The write-buffer counters of a store adapter that has them (InfluxDB), for /metrics. */
function storeWriteStats(store: SeriesStore): StoreWriteStats | null {
  const stats = (store as { stats?: () => Partial<StoreWriteStats> }).stats;
  if (typeof stats !== 'function') return null;
  const st = stats.call(store);
  if (typeof st.buffered !== 'number') return null;
  return { store: store.kind, buffered: st.buffered, spooled: st.spooled ?? 0, dropped: st.dropped ?? 0, droppedForecast: st.droppedForecast ?? 0, rejected: st.rejected ?? 0, spooledTotal: st.spooledTotal ?? 0, replayed: st.replayed ?? 0 };
}

export function msOf(duration: string, fallbackMs: number): number {
  const r = parseDurationMs(duration);
  return r.ok ? r.value : fallbackMs;
}

/** Open stores, pool and cycle for a loaded config. Throws a coded error when a secret or store is unusable. */
export async function openRuntime(loaded: LoadedConfig, deps: RuntimeDeps): Promise<Runtime> {
  const { logger } = deps;
  const clock = deps.clock ?? systemClock;
  const { secrets, issues } = loadSecrets(loaded.config, deps.env ? { env: deps.env } : {});
  if (issues.length) {
    for (const i of issues) logger.error({ code: i.code, path: i.path, series: i.series }, formatIssue(i));
    throw new DaemonError('SECRET_MISSING', `${issues.length} secret(s) could not be read`, { hint: issues[0].hint });
  }
  const metrics = deps.metrics ?? new DaemonMetrics();
  const store =
    deps.store ??
    (await openSeriesStore(loaded.config, {
      secrets,
      logger: logger.child({ component: 'store' }),
      now: () => clock.now(),
      durableWrites: true,
    }));
  let stateStore: StateStore;
  try {
    stateStore = deps.stateStore ?? openStateStore(loaded.config);
  } catch (err) {
    if (!deps.store) await store.close().catch(() => undefined);
    throw err;
  }
  const stepBySeries = new Map(loaded.series.map((s) => [s.name, s.settings.stepMs]));
  const state = new StateAdapter(stateStore, logger, { stepOf: (n) => stepBySeries.get(n) ?? 3_600_000 });
  const workers = deps.workers ?? loaded.config.daemon.concurrency;
  const fitter: Fitter = deps.fitter ?? (workers > 0 ? new PoolFitter({ threads: workers }) : new InlineFitter());
  const hooked = loaded.series.filter((s) => s.drift.enabled && s.drift.webhook && secrets.webhookUrl(s.name));
  const timeouts = new Map(hooked.map((s) => [s.name, s.drift.webhook!.timeoutMs]));
  const notifier = hooked.length
    ? new WebhookNotifier({
        outbox: stateStore,
        urlFor: (series) => secrets.webhookUrl(series),
        timeoutFor: (series) => timeouts.get(series),
        clock,
        logger: logger.child({ component: 'webhook' }),
      })
    : null;
  const drift = new CycleDriftAssessor({
    baselines: state,
    logger,
    onNotice: (notice, r) => {
      // Kept in the outbox until delivered (WebhookNotifier); only for series with a webhook.
      if (!notifier || !timeouts.has(r.name)) return;
      stateStore.enqueue(r.name, 'drift', notice, clock.now());
      notifier.kick();
    },
  });
  metrics.bindPoolQueue(() => fitter.queued);
  metrics.bindStoreStats(() => storeWriteStats(store));
  const cycle = new SeriesCycle({ store, state, fitter, logger, clock, metrics, drift });
  const shard = deps.shard ?? ALL_SERIES;
  const owned = ownedSeries(shard, loaded.series);
  metrics.seriesConfigured.set(owned.length);
  if (shard.count > 1) logger.info({ shard: shardLabel(shard), owned: owned.length, configured: loaded.series.length }, 'running one shard of the series');
  let closed: Promise<void> | null = null;
  const rt: Runtime = {
    loaded,
    secrets,
    store,
    stateStore,
    state,
    fitter,
    metrics,
    cycle,
    clock,
    logger,
    shard,
    owned,
    notifier,
    close: () =>
      (closed ??= (async () => {
        await notifier?.stop();
        await flushAndClose({ fitter, store, stateStore, logger });
      })()),
  };
  return rt;
}
