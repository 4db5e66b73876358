/**
 * A slow store: every answer of influxd is delayed by a proxy (1.5 s). Real clock and real
 * node-cron with a schedule every second, so ticks keep coming while a cycle waits on the store.
 * Required: cycles stretch (their measured duration includes the wait) but a series never runs
 * twice at once — the ticks that fall inside a running cycle are skipped and counted; the request
 * timeout comes from the config (store.influxdb.timeout) and a timeout is reported with its code,
 * the timeout used and a hint, in the log and in /metrics.
 */
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { mkdtempSync, rmSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { startInflux1, type Influx1Server } from '../helpers/servers.ts';
import { startFaultProxy, type FaultProxy } from '../helpers/fault-proxy.ts';
import { heatLines, heatLoad, hookStore, HOUR, loadOrThrow, metricValue, writeConfig } from '../helpers/fault-daemon.ts';
import { FAST_SERIES, trapUnhandled } from '../helpers/fault-cycle.ts';
import { captureLogger } from '../unit/daemon/helpers.ts';
import { openSeriesStore } from '../../src/store/index.ts';
import { Daemon } from '../../src/daemon/daemon.ts';

const SERIES = ['oskaveld-north', 'brennick-yard'];
const DELAY_MS = 1500;
let influx: Influx1Server;
let proxy: FaultProxy;
let dir: string;
const trap = trapUnhandled();

beforeAll(async () => {
  dir = mkdtempSync(join(tmpdir(), 'radcast-slow-'));
  influx = await startInflux1();
  await influx.query('CREATE DATABASE oskaveld');
  const now = Math.floor(Date.now() / HOUR) * HOUR;
  for (const [i, s] of SERIES.entries()) await influx.writeLines('oskaveld', heatLines(s, heatLoad(now - 400 * HOUR, now + HOUR, i + 1)));
  proxy = await startFaultProxy(influx.url);
  proxy.delayMs = DELAY_MS;
});
afterAll(async () => {
  await proxy?.close();
  await influx?.close();
  rmSync(dir, { recursive: true, force: true });
  trap.dispose();
});

async function runDaemon(timeout: string, runForMs: number) {
  const file = writeConfig(
    dir,
    {
      store: { kind: 'influxdb', influxdb: { url: proxy.url, api: 'v1', database: 'oskaveld', timeout, flushInterval: '100ms', maxRetryDelay: '1s' } },
      state: { path: join(dir, `state-${timeout}.db`) },
      http: { port: 0 },
      daemon: { concurrency: 1, watchConfig: false, shutdownTimeout: '20s' },
      defaults: { ...FAST_SERIES, timeZone: 'Europe/Berlin', refit: '* * * * * *', drift: { staleAfter: '3h' }, source: { measurement: 'heat', field: 'load_kw', aggregate: 'step' } },
      series: SERIES.map((name) => ({ name, source: { tags: { substation: name } } })),
    },
    `slow-${timeout}.yaml`,
  );
  const loaded = loadOrThrow(file);
  const cap = captureLogger('info');
  const store = hookStore(await openSeriesStore(loaded.config, {}));
  // Every start and end of a cycle, per series, from the log of the store wrapper's reads.
  const spans = new Map<string, Array<[number, number]>>();
  const inner = store.readReadings.bind(store);
  store.readReadings = async (sel, a, b) => {
    const t0 = Date.now();
    try {
      return await inner(sel, a, b);
    } finally {
      (spans.get(sel.name) ?? spans.set(sel.name, []).get(sel.name)!).push([t0, Date.now()]);
    }
  };
  const daemon = new Daemon({ loaded, logger: cap.logger, workers: 0, httpPort: 0, initialRun: false, watchConfig: false, store });
  await daemon.start();
  const base = `http://127.0.0.1:${daemon.httpAddress!.port}`;
  await new Promise((r) => setTimeout(r, runForMs));
  expect((await fetch(`${base}/metrics`)).status).toBe(200);
  await daemon.stop();
  // Counted after the stop, so cycles that finished during the shutdown are in.
  const metrics = await daemon.runtime.metrics.text();
  return { cap, store, spans, metrics };
}

describe('slow store (every answer 1.5 s late)', () => {
  it('with timeout 5s: cycles stretch past the 1 s schedule, but a series never runs twice at once; skipped ticks are counted', async () => {
    const { store, spans, metrics, cap } = await runDaemon('5s', 5500);
    expect(store.maxReadsInFlightPerSeries).toBe(1);
    for (const s of SERIES) {
      const list = spans.get(s) ?? [];
      expect(list.length, s).toBeGreaterThanOrEqual(2);
      // Reads of one series follow each other; each waited the delay.
      for (let k = 1; k < list.length; k++) expect(list[k][0]).toBeGreaterThanOrEqual(list[k - 1][1]);
      for (const [a, b] of list) expect(b - a).toBeGreaterThanOrEqual(DELAY_MS - 50);
    }
    const ok = metricValue(metrics, 'radcast_cycles_total{outcome="ok"}');
    expect(ok).toBeGreaterThanOrEqual(2 * SERIES.length - 1);
    // About five ticks per series came while a cycle of that series was running.
    expect(metricValue(metrics, 'radcast_cycles_skipped_total{reason="busy"}')).toBeGreaterThanOrEqual(SERIES.length * 2);
    // The measured cycle time includes the wait on the store.
    const sum = metricValue(metrics, 'radcast_cycle_duration_seconds_sum{outcome="ok"}');
    const count = metricValue(metrics, 'radcast_cycle_duration_seconds_count{outcome="ok"}');
    expect(sum / count).toBeGreaterThanOrEqual((DELAY_MS - 50) / 1000);
    expect(metricValue(metrics, 'radcast_cycle_stage_duration_seconds_sum{stage="read"}')).toBeGreaterThanOrEqual((count * (DELAY_MS - 50)) / 1000);
    expect(cap.lines.filter((l) => l.msg === 'series cycle failed; retried next cycle')).toEqual([]);
    expect(store.forecasts.length).toBe(ok);
    expect(trap.errors).toEqual([]);
  }, 40_000);

  it('with timeout 1s: each read gives up after the configured second, reported as STORE_UNREACHABLE with the timeout and a hint', async () => {
    const { store, metrics, cap, spans } = await runDaemon('1s', 3000);
    expect(store.forecasts).toEqual([]);
    expect(store.readsFailed).toBeGreaterThanOrEqual(SERIES.length);
    for (const s of SERIES) for (const [a, b] of spans.get(s) ?? []) expect(b - a).toBeLessThan(DELAY_MS);
    const failed = cap.lines.filter((l) => l.msg === 'series cycle failed; retried next cycle');
    expect(failed.length, JSON.stringify(cap.lines.filter((l) => l.level >= 40))).toBe(store.readsFailed);
    for (const l of failed) {
      expect(l).toMatchObject({ code: 'STORE_UNREACHABLE', stage: 'read' });
      expect(String(l.err)).toMatch(/did not answer within 1000 ms/);
      expect(String(l.hint)).toMatch(/store\.influxdb\.timeout/);
    }
    const counted = SERIES.reduce((n, s) => n + metricValue(metrics, `radcast_series_failures_total{series="${s}",code="STORE_UNREACHABLE"}`), 0);
    expect(counted).toBe(store.readsFailed);
    expect(trap.errors).toEqual([]);
  }, 40_000);
});
