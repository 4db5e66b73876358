/**
 * The store factory: builds the configured SeriesStore (embedded SQLite or InfluxDB) and the
 * local StateStore from a loaded config. Callers depend on SeriesStore only.
 */
import type { Config } from '../config/schema.ts';
import { parseDurationMs } from '../config/duration.ts';
import type { Secrets } from '../config/secrets.ts';
import type { SeriesStore } from './types.ts';
import { EmbeddedStore } from './embedded.ts';
import { StateStore } from './state.ts';
import type { InfluxStoreOptions } from './influx/options.ts';
import type { Logger as StoreLogger } from './influx/log.ts';
import { StoreError } from './influx/errors.ts';
import { SqliteSpool, spoolTarget } from './spool.ts';

export { EmbeddedStore, type EmbeddedStoreOptions, type HistoryPoint, type ReadingsExtent } from './embedded.ts';
export { StateStore, ALL_SERIES, type LedgerEntry, type OutboxEntry, type ResidualRow, type CycleRecord } from './state.ts';
export { StoreError } from './influx/errors.ts';
export { SqliteSpool, spoolTarget, type SqliteSpoolOptions } from './spool.ts';

export interface StoreDeps {
  /** Loaded secrets (token / password for InfluxDB). */
  secrets?: Secrets;
  logger?: StoreLogger;
  now?: () => number;
  /**
   * Keep unconfirmed InfluxDB writes in the spool table of the state file (config state.path), so
   * an outage, a shutdown or a crash loses none and the next start sends them. For the processes
   * that write (daemon, once); read-only commands leave it off and never touch a backlog.
   */
  durableWrites?: boolean;
}

const ms = (d: string): number => {
  const r = parseDurationMs(d);
  return r.ok ? r.value : NaN;
};

/** InfluxDB adapter options from the config (durations in ms) and the loaded secrets. */
export function influxOptions(config: Config, deps: StoreDeps = {}): InfluxStoreOptions {
  const ix = config.store.influxdb;
  if (!ix) throw new StoreError('SELECTOR_INVALID', 'store.kind is influxdb but store.influxdb is missing', { at: 'store.influxdb', hint: 'add the store.influxdb section' });
  const common = {
    url: ix.url,
    timeoutMs: ms(ix.timeout),
    writeBufferPoints: ix.writeBufferPoints,
    spoolMaxPoints: ix.spoolMaxPoints,
    batchSize: ix.batchSize,
    flushIntervalMs: ms(ix.flushInterval),
    maxRetryDelayMs: ms(ix.maxRetryDelay),
    measurements: { ...ix.measurements },
    ...(deps.logger ? { logger: deps.logger } : {}),
    ...(deps.now ? { now: deps.now } : {}),
  };
  const token = deps.secrets?.influxToken();
  if (ix.api === 'v2') {
    if (!token) throw new StoreError('STORE_AUTH', 'no InfluxDB token loaded', { at: 'store.influxdb.tokenEnv', hint: 'set tokenEnv or tokenFile and load the secrets before opening the store' });
    return { ...common, api: 'v2', org: ix.org ?? '', bucket: ix.bucket ?? '', token };
  }
  const password = deps.secrets?.influxPassword();
  return {
    ...common,
    api: 'v1',
    database: ix.database ?? '',
    ...(ix.retentionPolicy ? { retentionPolicy: ix.retentionPolicy } : {}),
    ...(ix.user ? { user: ix.user } : {}),
    ...(password ? { password } : {}),
    ...(token ? { token } : {}),
  };
}

/** Opens the configured series store. */
export async function openSeriesStore(config: Config, deps: StoreDeps = {}): Promise<SeriesStore> {
  if (config.store.kind === 'embedded') return new EmbeddedStore({ path: config.store.embedded.path });
  // Loaded on demand so the embedded path never pulls in the HTTP client.
  const { createInfluxStore } = await import('./influx/index.ts');
  const opts = influxOptions(config, deps);
  if (!deps.durableWrites) return createInfluxStore(opts);
  const spool = openSpool(config.state.path, opts, deps);
  try {
    return createInfluxStore({ ...opts, spool });
  } catch (err) {
    spool.close();
    throw err;
  }
}

/** The write spool in the state file, scoped to this store target; warns about points spooled for another target. */
function openSpool(path: string, opts: InfluxStoreOptions, deps: StoreDeps): SqliteSpool {
  const target = spoolTarget(opts.api === 'v1' ? { api: 'v1', url: opts.url, database: opts.database, retentionPolicy: opts.retentionPolicy } : { api: 'v2', url: opts.url, org: opts.org, bucket: opts.bucket });
  const spool = new SqliteSpool({ path, target, ...(deps.now ? { now: deps.now } : {}) });
  try {
    for (const t of spool.targets()) {
      if (t.target === target) continue;
      deps.logger?.warn(
        { spoolTarget: t.target, points: t.points, oldestSpooledAt: new Date(t.oldestSpooledAt).toISOString(), path, code: 'SPOOL_OTHER_TARGET' },
        'the write spool holds points for another store (the store config changed); they are kept, not sent: point store.influxdb back at that store to send them',
      );
    }
  } catch (err) {
    spool.close();
    throw err;
  }
  return spool;
}

/** Opens the local state store (state.path). */
export function openStateStore(config: Config): StateStore {
  return new StateStore({ path: config.state.path });
}
