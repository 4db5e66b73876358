/**
 * The durable write spool with a real InfluxDB 1.x server: points the server has not confirmed
 * survive a shutdown, a SIGKILL of the process and a daemon restart during an outage, and the
 * next start sends them. Required each time: every point arrives (values checked), the database
 * ends with exactly one point per key, and the spool is empty afterwards.
 *
 * "Exactly once" is checked on the wire too: a proxy in front of influxd records every line the
 * server accepted (InfluxDB overwrites a resent point silently, so the database alone cannot show
 * a point sent twice). Only the latest-forecast measurement is rewritten on purpose (a newer issue
 * overwrites the shared target times), so there the final values are checked instead.
 */
import { afterAll, describe, expect, it } from 'vitest';
import { spawn } from 'node:child_process';
import http from 'node:http';
import type { AddressInfo, Socket } from 'node:net';
import { mkdtempSync, rmSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { fileURLToPath } from 'node:url';
import { startInflux1, type Influx1Server } from '../helpers/servers.ts';
import { startFaultProxy, countPoints, type FaultProxy } from '../helpers/fault-proxy.ts';
import { captureLogger } from '../helpers/capture-logger.ts';
import { heatLines, heatLoad, loadOrThrow, metricValue, startClockedDaemon, until, writeConfig } from '../helpers/fault-daemon.ts';
import { FAST_SERIES, trapUnhandled } from '../helpers/fault-cycle.ts';
import { captureLogger as captureDaemonLogger } from '../unit/daemon/helpers.ts';
import { HOUR, LEADS, SPOOL_SERIES, distinctPoints, spoolValue, writeSpoolCycle } from '../helpers/spool-cycles.ts';
import { createInfluxStore, type InfluxStore } from '../../src/store/influx/index.ts';
import { SqliteSpool, spoolTarget } from '../../src/store/spool.ts';
import { openSeriesStore } from '../../src/store/index.ts';
import { loadSecrets } from '../../src/config/secrets.ts';
import { DaemonMetrics } from '../../src/daemon/metrics.ts';

const T0 = Math.floor(Date.now() / HOUR) * HOUR - 40 * HOUR;
const DB = 'oskaveld';
const fast = { retryJitter: 0, minRetryDelayMs: 40, maxRetryDelayMs: 200, flushIntervalMs: 20, batchSize: 40, closeTimeoutMs: 5_000, timeoutMs: 2_000 } as const;

const cleanups: Array<() => Promise<void> | void> = [];
afterAll(async () => {
  for (const c of cleanups.reverse()) await c();
});
const trap = trapUnhandled();
afterAll(() => trap.dispose());

function tempDir(): string {
  const dir = mkdtempSync(join(tmpdir(), 'radcast-spool-'));
  cleanups.push(() => rmSync(dir, { recursive: true, force: true }));
  return dir;
}

async function startServer(): Promise<{ influx: Influx1Server; proxy: FaultProxy }> {
  const influx = await startInflux1();
  cleanups.push(() => influx.close());
  await influx.query(`CREATE DATABASE ${DB}`);
  const proxy = await startFaultProxy(influx.url);
  cleanups.push(() => proxy.close());
  return { influx, proxy };
}

async function rows(influx: Influx1Server, q: string): Promise<unknown[][]> {
  return (await influx.query(q, DB)).results[0]?.series?.flatMap((s) => s.values) ?? [];
}

/**
 * Cycles 0..lastCycle are all in the database with their values: history per series, lead and
 * issue, one score and one health point per series and cycle, and in "latest" the newest issue
 * of each target time. The database holds nothing else (one point per key), unless `partialAfter`
 * says that a later cycle may have arrived in part (then only cycles 0..lastCycle are compared).
 */
async function expectCyclesInDb(influx: Influx1Server, lastCycle: number, partialAfter = false): Promise<void> {
  const upTo = T0 + lastCycle * HOUR;
  for (const series of SPOOL_SERIES) {
    const hist = await rows(
      influx,
      `SELECT "value", "issued_at" FROM "radcast_forecast" WHERE "series" = '${series}'${partialAfter ? ` AND "issued_at" <= ${upTo}` : ''} GROUP BY "lead"`,
    );
    const want: [number, number, number][] = [];
    for (let n = 0; n <= lastCycle; n++) for (let lead = 1; lead <= LEADS; lead++) want.push([T0 + (n + lead) * HOUR, spoolValue(series, n, lead), T0 + n * HOUR]);
    const key = (r: unknown[]) => `${r[0]}:${r[2]}`;
    expect(hist.map((r) => [r[0], r[1], r[2]]).sort((a, b) => key(a).localeCompare(key(b)))).toEqual(want.sort((a, b) => key(a).localeCompare(key(b))));

    const latest = await rows(influx, `SELECT "value" FROM "radcast_forecast_latest" WHERE "series" = '${series}'`);
    const wantLatest: [number, number][] = [];
    for (let k = 1; k <= lastCycle + LEADS; k++) {
      const n = Math.min(k - 1, lastCycle); // the newest issue that forecasts target T0 + k h
      wantLatest.push([T0 + k * HOUR, spoolValue(series, n, k - n)]);
    }
    if (!partialAfter) expect(latest).toEqual(wantLatest);

    const until = partialAfter ? ` AND time <= ${upTo}ms` : '';
    const scores = await rows(influx, `SELECT "mae" FROM "radcast_score" WHERE "series" = '${series}'${until}`);
    expect(scores).toEqual(Array.from({ length: lastCycle + 1 }, (_, n) => [T0 + n * HOUR, n]));
    const health = await rows(influx, `SELECT "statistic" FROM "radcast_health" WHERE "series" = '${series}'${until}`);
    expect(health).toEqual(Array.from({ length: lastCycle + 1 }, (_, n) => [T0 + n * HOUR, n]));
  }
}

/**
 * Each history, score and health point of cycles 0..lastCycle was accepted by the server exactly
 * once, and nothing else (with `partialAfter`: at most one more cycle's points, also once each).
 */
function expectOnceOnTheWire(proxy: FaultProxy, lastCycle: number, partialAfter = false): void {
  const lines = proxy.acceptedLines();
  const n = lastCycle + 1;
  for (const [measurement, perCycle] of [
    ['radcast_forecast', LEADS],
    ['radcast_score', 1],
    ['radcast_health', 1],
  ] as const) {
    const counts = countPoints(lines, measurement);
    expect([...counts].filter(([, c]) => c !== 1), `${measurement} points accepted more than once`).toEqual([]);
    const want = n * perCycle * SPOOL_SERIES.length;
    if (partialAfter) {
      expect(counts.size, `${measurement} points accepted`).toBeGreaterThanOrEqual(want);
      expect(counts.size, `${measurement} points accepted`).toBeLessThanOrEqual(want + perCycle * SPOOL_SERIES.length);
    } else {
      expect(counts.size, `${measurement} points accepted`).toBe(want);
    }
  }
}

describe('write spool (InfluxDB 1.x)', () => {
  it('closed while the server is down: the unconfirmed points wait in the spool; the next instance sends them, every point arrives once', async () => {
    const { influx, proxy } = await startServer();
    const dir = tempDir();
    const statePath = join(dir, 'state.db');
    const target = spoolTarget({ api: 'v1', url: proxy.url, database: DB });
    const { logger, records } = captureLogger();
    const a: InfluxStore = createInfluxStore({ api: 'v1', url: proxy.url, database: DB, logger, ...fast, spool: new SqliteSpool({ path: statePath, target }) });
    cleanups.push(() => a.close());
    for (let n = 0; n < 4; n++) await writeSpoolCycle(a, T0, n);
    await a.flush();
    expect(a.stats()).toMatchObject({ buffered: 0, spooled: 0, spooledTotal: 0 });

    await influx.stop();
    for (let n = 4; n < 7; n++) await writeSpoolCycle(a, T0, n);
    // The first failed send moves what waits into the spool; later writes go straight to it.
    await expect(a.flush()).rejects.toMatchObject({ code: 'STORE_UNREACHABLE' });
    for (let n = 7; n < 10; n++) await writeSpoolCycle(a, T0, n);
    // Cycles 4..6 waited in memory (a rewritten "latest" point replaced its older version there);
    // 7..9 were appended to the spool as written (the spool is a log: rewrites are new rows).
    const linesPerCycle = SPOOL_SERIES.length * (2 * LEADS + 2);
    const expected = distinctPoints(4, 6) + 3 * linesPerCycle;
    expect(a.stats()).toMatchObject({ buffered: expected, spooled: expected, dropped: 0, failing: true });

    const started = Date.now();
    await a.close();
    // With a spool there is nothing to wait for: close() does not spend closeTimeoutMs retrying.
    expect(Date.now() - started).toBeLessThan(fast.closeTimeoutMs);
    expect(a.stats()).toMatchObject({ spooled: expected, dropped: 0 });
    expect(records.find((r) => r.msg.includes('kept in the spool'))).toMatchObject({ level: 'warn', obj: { spooled: expected } });
    expect(records.filter((r) => r.msg.includes('are lost'))).toEqual([]);

    // What the file holds, read by a separate connection: every point not confirmed, oldest first.
    const look = new SqliteSpool({ path: statePath, target });
    const kept = look.oldest(10_000);
    look.close();
    expect(kept.length).toBe(expected);
    expect(new Set(kept.map((l) => l.key)).size).toBe(distinctPoints(4, 9));
    expect(kept.map((l) => l.seq)).toEqual([...kept.map((l) => l.seq)].sort((x, y) => x - y));
    expect(kept.filter((l) => l.kind === 'health').length).toBe(6 * SPOOL_SERIES.length);

    await influx.restart();
    const b: InfluxStore = createInfluxStore({ api: 'v1', url: proxy.url, database: DB, logger, ...fast, spool: new SqliteSpool({ path: statePath, target }) });
    cleanups.push(() => b.close());
    // Sent on open, without any write or flush.
    expect(await until(() => b.stats().buffered === 0, 10_000, 20)).toBe(true);
    expect(b.stats()).toMatchObject({ buffered: 0, spooled: 0, written: expected, replayed: expected, dropped: 0, failing: false });
    await b.close();

    await expectCyclesInDb(influx, 9);
    expectOnceOnTheWire(proxy, 9);
    const after = new SqliteSpool({ path: statePath, target });
    expect(after.count()).toBe(0);
    after.close();

    // The replayed points show in /metrics once the daemon binds the adapter's counters.
    const m = new DaemonMetrics({ defaultMetrics: false });
    m.bindStoreStats(() => ({ store: b.kind, ...b.stats() }));
    const text = await m.text();
    expect(metricValue(text, 'radcast_store_points_replayed_total{store="influxdb-v1"}')).toBe(expected);
    expect(metricValue(text, 'radcast_store_buffered_points{store="influxdb-v1",where="spool"}')).toBe(0);
    expect(text).toContain('radcast_store_points_dropped_total{store="influxdb-v1",kind="forecast"} 0');
  });

  it('a process SIGKILLed while the server is down: the points it had accepted arrive after the restart', async () => {
    const { influx, proxy } = await startServer();
    const dir = tempDir();
    const file = writeConfig(dir, {
      store: { kind: 'influxdb', influxdb: { url: proxy.url, api: 'v1', database: DB, batchSize: 40, flushInterval: '20ms', maxRetryDelay: '200ms', timeout: '2s', spoolMaxPoints: 100_000 } },
      state: { path: 'state.db' },
      series: [{ name: 'oskaveld-north' }],
    });
    const script = fileURLToPath(new URL('../helpers/spool-child.ts', import.meta.url));
    const child = spawn(process.execPath, ['--import', 'tsx', script, file, String(T0)], { stdio: ['pipe', 'pipe', 'pipe'] });
    const exited = new Promise<NodeJS.Signals | null>((resolve) => child.once('exit', (_code, signal) => resolve(signal)));
    cleanups.push(() => {
      if (child.exitCode === null && child.signalCode === null) child.kill('SIGKILL');
    });
    let stderr = '';
    child.stderr.on('data', (d) => (stderr += String(d)));
    let out = '';
    let lastWrote = -1;
    let lastStats: Record<string, unknown> = {};
    const seen = (pred: () => boolean, what: string) =>
      new Promise<void>((resolve, reject) => {
        const check = () => {
          if (pred()) {
            child.stdout.off('data', onData);
            resolve();
          }
        };
        const onData = (d: Buffer) => {
          out += String(d);
          for (const l of out.split('\n').slice(0, -1)) {
            const m = /^wrote (\d+) (.*)$/.exec(l);
            if (m) {
              lastWrote = Number(m[1]);
              lastStats = JSON.parse(m[2]) as Record<string, unknown>;
            }
          }
          check();
        };
        child.stdout.on('data', onData);
        void exited.then(() => reject(new Error(`child ended before ${what}; stderr:\n${stderr}`)));
        setTimeout(() => reject(new Error(`no ${what} within 30 s; stdout:\n${out}\nstderr:\n${stderr}`)), 30_000).unref();
      });

    await seen(() => out.includes('ready '), '"ready"');
    expect(countPoints(proxy.acceptedLines(), 'radcast_forecast').size).toBe(3 * LEADS * SPOOL_SERIES.length);
    await influx.stop();
    child.stdin.write('down\n');
    // Kill it in full flight: writing, with points already spooled and the server refusing.
    await seen(() => lastWrote >= 8 && lastStats.failing === true && (lastStats.spooled as number) > 0, 'spooled writes');
    child.kill('SIGKILL');
    expect(await exited).toBe('SIGKILL');
    const accepted = lastWrote; // every write of cycles 3..accepted had returned; a later one may have too
    expect(lastStats.dropped).toBe(0);

    await influx.restart();
    const loaded = loadOrThrow(file);
    const { logger, records } = captureLogger();
    const b = (await openSeriesStore(loaded.config, { secrets: loadSecrets(loaded.config).secrets, logger, durableWrites: true })) as InfluxStore;
    cleanups.push(() => b.close());
    expect(records.find((r) => r.msg.startsWith('points an earlier run could not write'))?.obj.spooled).toBeGreaterThanOrEqual(distinctPoints(3, accepted));
    expect(await until(() => b.stats().buffered === 0, 10_000, 20)).toBe(true);
    const st = b.stats();
    expect(st).toMatchObject({ spooled: 0, dropped: 0, failing: false });
    expect(st.replayed).toBe(st.written);
    await b.close();

    // Cycles 0..accepted all arrived, each point once. The kill may have come after the next
    // cycle's first writes returned (each write call is one spool transaction): those arrive too.
    const newest = (await rows(influx, `SELECT max("issued_at") FROM "radcast_forecast"`))[0]?.[1] as number;
    const partial = newest > T0 + accepted * HOUR;
    expect(newest).toBeLessThanOrEqual(T0 + (accepted + 1) * HOUR);
    await expectCyclesInDb(influx, accepted, partial);
    expectOnceOnTheWire(proxy, accepted, partial);
    const look = new SqliteSpool({ path: join(dir, 'state.db'), target: spoolTarget({ api: 'v1', url: proxy.url, database: DB }) });
    expect(look.count()).toBe(0);
    look.close();
  });

  it('daemon stopped while writes fail: the next daemon start sends the spooled forecasts, /metrics counts them', async () => {
    const { influx, proxy } = await startServer();
    const base = Math.floor(Date.now() / HOUR) * HOUR - 10 * HOUR;
    const series = ['oskaveld-north', 'tarrow-hill'];
    for (const [i, s] of series.entries()) await influx.writeLines(DB, heatLines(s, heatLoad(base - 400 * HOUR, base + 12 * HOUR, i + 1)));
    // Reads pass, writes fail while `writesDown`: the cycle computes forecasts the server refuses.
    const gate = await startWriteGate(proxy.url);
    cleanups.push(() => gate.close());
    const dir = tempDir();
    const file = writeConfig(dir, {
      store: { kind: 'influxdb', influxdb: { url: gate.url, api: 'v1', database: DB, timeout: '2s', flushInterval: '50ms', maxRetryDelay: '500ms' } },
      state: { path: join(dir, 'state.db') },
      http: { port: 0 },
      daemon: { concurrency: 1, watchConfig: false, shutdownTimeout: '10s' },
      defaults: { ...FAST_SERIES, timeZone: 'Europe/Berlin', refit: '5 * * * *', source: { measurement: 'heat', field: 'load_kw', aggregate: 'step' } },
      series: series.map((name) => ({ name, source: { tags: { substation: name } } })),
    });
    const loaded = loadOrThrow(file);
    const cap = captureDaemonLogger('info');
    const d1 = await startClockedDaemon({ loaded, logger: cap.logger, startMs: base + 4 * 60_000 });
    cleanups.push(() => d1.daemon.stop());
    await d1.hour();
    await d1.daemon.flush();
    const before = countPoints(proxy.acceptedLines(), 'radcast_forecast').size;
    expect(before).toBe(series.length * FAST_SERIES.horizon);

    gate.writesDown = true;
    await d1.hour();
    expect(await until(async () => metricValue((await d1.get('/metrics')).text, 'radcast_store_buffered_points{store="influxdb-v1",where="spool"}') > 0, 5_000, 20)).toBe(true);
    await d1.daemon.stop();
    const target = spoolTarget({ api: 'v1', url: gate.url, database: DB });
    const look = new SqliteSpool({ path: join(dir, 'state.db'), target });
    const kept = look.oldest(100_000);
    look.close();
    // The second cycle's forecasts (history and latest), scores and health wait in the file.
    const keptHistory = kept.filter((l) => l.line.startsWith('radcast_forecast,'));
    expect(keptHistory.length).toBe(series.length * FAST_SERIES.horizon);
    expect(kept.some((l) => l.kind === 'health')).toBe(true);

    gate.writesDown = false;
    const d2 = await startClockedDaemon({ loaded, logger: cap.logger, startMs: base + 2 * HOUR + 4 * 60_000 });
    cleanups.push(() => d2.daemon.stop());
    const spoolEmpty = async () => metricValue((await d2.get('/metrics')).text, 'radcast_store_buffered_points{store="influxdb-v1",where="spool"}') === 0;
    expect(await until(async () => (await spoolEmpty()) && metricValue((await d2.get('/metrics')).text, 'radcast_store_points_replayed_total{store="influxdb-v1"}') === kept.length, 10_000, 50)).toBe(true);
    await d2.daemon.stop();

    const counts = countPoints(proxy.acceptedLines(), 'radcast_forecast');
    expect([...counts].filter(([, c]) => c !== 1), 'forecast points accepted more than once').toEqual([]);
    expect(counts.size).toBe(2 * series.length * FAST_SERIES.horizon);
    const hist = await rows(influx, `SELECT count("value") FROM "radcast_forecast"`);
    expect(hist[0]?.[1]).toBe(2 * series.length * FAST_SERIES.horizon);
    for (const l of keptHistory) expect(proxy.acceptedLines()).toContain(l.line);
    const after = new SqliteSpool({ path: join(dir, 'state.db'), target });
    expect(after.count()).toBe(0);
    after.close();
  });
});

/** A pass-through HTTP proxy that drops write requests (connection reset, like a dead server) while `writesDown` is set. */
async function startWriteGate(target: string): Promise<{ url: string; writesDown: boolean; close(): Promise<void> }> {
  const tgt = new URL(target);
  const sockets = new Set<Socket>();
  const state = { writesDown: false };
  const server = http.createServer((req, res) => {
    const chunks: Buffer[] = [];
    req.on('data', (c: Buffer) => chunks.push(c));
    req.on('end', () => {
      if (state.writesDown && (req.url ?? '').startsWith('/write')) {
        req.socket.destroy();
        return;
      }
      const up = http.request({ host: tgt.hostname, port: tgt.port, method: req.method, path: req.url, headers: { ...req.headers, host: tgt.host } }, (upRes) => {
        res.writeHead(upRes.statusCode ?? 502, upRes.headers);
        upRes.pipe(res);
      });
      up.on('error', () => req.socket.destroy());
      up.end(Buffer.concat(chunks));
    });
  });
  server.on('connection', (s) => {
    sockets.add(s);
    s.on('close', () => sockets.delete(s));
  });
  await new Promise<void>((resolve) => server.listen(0, '127.0.0.1', resolve));
  const url = `http://127.0.0.1:${(server.address() as AddressInfo).port}`;
  return {
    url,
    get writesDown() {
      return state.writesDown;
    },
    set writesDown(v: boolean) {
      state.writesDown = v;
    },
    close: async () => {
      const closed = new Promise<void>((resolve) => server.close(() => resolve()));
      for (const s of sockets) s.destroy();
      await closed;
    },
  };
}
