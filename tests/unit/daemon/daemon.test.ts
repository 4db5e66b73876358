/**
 * The long-running daemon with real embedded + state stores in a temp folder, inline fits, a fake
 * clock driving the real cron expressions, and HTTP on a free loopback port.
 */
import { afterEach, beforeEach, describe, expect, it, vi } from 'vitest';
import { mkdtempSync, rmSync, writeFileSync } from 'node:fs';
import { EventEmitter } from 'node:events';
import os from 'node:os';
import path from 'node:path';
import { stringify } from 'yaml';
import { loadConfigFile, type LoadedConfig } from '../../../src/config/load.ts';
import { EmbeddedStore } from '../../../src/store/embedded.ts';
import { Daemon } from '../../../src/daemon/daemon.ts';
import { ManualClock, settle } from '../../../src/daemon/clock.ts';
import { clockCronDriver } from '../../../src/daemon/cron-driver.ts';
import { installSignalHandlers } from '../../../src/daemon/signals.ts';
import type { SeriesStore } from '../../../src/store/types.ts';
import { captureLogger } from './helpers.ts';
import { HOUR, syntheticLoad } from './fakes.ts';

const END = Date.UTC(2026, 10, 30, 0, 0, 0);
const NOW = END + 3 * 60_000; // 00:03 UTC; schedules at minute 5

let dir = '';
beforeEach(() => {
  dir = mkdtempSync(path.join(os.tmpdir(), 'radcast-daemon-'));
});
afterEach(() => {
  rmSync(dir, { recursive: true, force: true });
});

function configDoc(series: string[], extra: Record<string, unknown> = {}) {
  return {
    store: { kind: 'embedded', embedded: { path: 'store.db' } },
    state: { path: 'state.db' },
    http: { port: 0 },
    daemon: { concurrency: 1, shutdownTimeout: '10s', watchConfig: false },
    defaults: { window: '3w', centres: 8, lags: ['1-24', 168], refit: '5 * * * *', fit: { restarts: 1, widthIterations: 1 } },
    series: series.map((name) => ({ name })),
    ...extra,
  };
}

function writeConfig(doc: unknown): string {
  const file = path.join(dir, 'radcast.yaml');
  writeFileSync(file, stringify(doc));
  return file;
}

function load(file: string): LoadedConfig {
  const r = loadConfigFile(file);
  if (!r.ok) throw new Error(r.issues.map((i) => i.message).join('\n'));
  return r.value;
}

function seed(names: string[], toMs = END) {
  const store = new EmbeddedStore({ path: path.join(dir, 'store.db') });
  names.forEach((n, i) => store.writeReadings(n, syntheticLoad({ fromMs: toMs - 40 * 24 * HOUR, toMs, seed: i + 1 })));
  return store;
}

/** Wraps a store to count flush/close and optionally hold reads. */
function instrumented(inner: SeriesStore) {
  const calls: string[] = [];
  let gate: Promise<void> | null = null;
  const w: SeriesStore & { calls: string[]; hold(): () => void } = {
    kind: inner.kind,
    calls,
    hold() {
      let release!: () => void;
      gate = new Promise<void>((r) => (release = r));
      return () => {
        gate = null;
        release();
      };
    },
    async readReadings(sel, a, b) {
      if (gate) await gate;
      return inner.readReadings(sel, a, b);
    },
    writeForecast: (b) => (calls.push('writeForecast'), inner.writeForecast(b)),
    writeScores: (p) => inner.writeScores(p),
    writeHealth: (p) => inner.writeHealth(p),
    ping: () => inner.ping(),
    flush: async () => {
      calls.push('flush');
      await inner.flush();
    },
    close: async () => {
      calls.push('close');
      await inner.close();
    },
  };
  return w;
}

async function startDaemon(file: string, opts: { store?: SeriesStore; initialRun?: boolean } = {}) {
  const clock = new ManualClock(NOW);
  const cap = captureLogger();
  const daemon = new Daemon({
    loaded: load(file),
    logger: cap.logger,
    clock,
    cronDriver: clockCronDriver(clock),
    workers: 0,
    httpPort: 0,
    initialRun: opts.initialRun ?? true,
    ...(opts.store ? { store: opts.store } : {}),
  });
  await daemon.start();
  const base = `http://127.0.0.1:${daemon.httpAddress!.port}`;
  return { daemon, clock, cap, base };
}

describe('daemon', () => {
  it('starts, forecasts every series on the first run, serves readiness, metrics, page and chart data', async () => {
    seed(['oskaveld-north', 'tarrow-hill']).close();
    const file = writeConfig(configDoc(['oskaveld-north', 'tarrow-hill']));
    const { daemon, base, cap } = await startDaemon(file);
    await daemon.flush();
    const st = daemon.statuses();
    expect(st.map((s) => [s.series, s.lastError?.code ?? null, s.latestForecast?.points.length])).toEqual([
      ['oskaveld-north', null, 24],
      ['tarrow-hill', null, 24],
    ]);
    expect(st.every((s) => s.driftState === 'ok')).toBe(true);
    const ready = await fetch(`${base}/readyz`);
    expect(ready.status).toBe(200);
    expect((await ready.json()).checks.store).toEqual({ ok: true, detail: 'embedded' });
    const metrics = await (await fetch(`${base}/metrics`)).text();
    expect(metrics).toMatch(/radcast_series_last_success_timestamp_seconds\{series="oskaveld-north"\} \d+/);
    expect(metrics).toContain('radcast_drift_state{series="tarrow-hill"} 0');
    expect(metrics).toContain('radcast_series_configured 2');
    const chart = await (await fetch(`${base}/api/series/oskaveld-north`)).json();
    expect(chart.forecast.points).toHaveLength(24);
    expect(chart.forecast.lowerKey).toBe('0.1');
    expect(chart.actuals).toHaveLength(72);
    expect(chart.actuals.at(-1)[0]).toBe(END - HOUR);
    const html = await (await fetch(`${base}/`)).text();
    expect(html).toContain('oskaveld-north');
    expect(cap.problems()).toEqual([]);
    await daemon.stop();
    expect((await fetch(`${base}/healthz`).catch(() => null))).toBeNull(); // HTTP is closed
  });

  it('runs a series on its cron tick (fake clock) and never twice at once', async () => {
    seed(['brennick-yard']).close();
    const file = writeConfig(configDoc(['brennick-yard']));
    const inner = new EmbeddedStore({ path: path.join(dir, 'store.db') });
    const store = instrumented(inner);
    const { daemon, clock, base } = await startDaemon(file, { store, initialRun: false });
    expect(daemon.scheduler.inFlight).toEqual([]);
    const release = store.hold();
    await clock.advance(2 * 60_000); // 00:05 tick
    expect(daemon.scheduler.running).toEqual(['brennick-yard']);
    expect(daemon.scheduler.trigger('brennick-yard')).toBe(false);
    release();
    await daemon.flush();
    expect(store.calls.filter((c) => c === 'writeForecast')).toHaveLength(1);
    const metrics = await (await fetch(`${base}/metrics`)).text();
    expect(metrics).toContain('radcast_cycles_skipped_total{reason="busy"} 1');
    await daemon.stop();
  });

  it('shutdown lets the running cycle finish, then flushes and closes the stores', async () => {
    seed(['oskaveld-north']).close();
    const file = writeConfig(configDoc(['oskaveld-north']));
    const store = instrumented(new EmbeddedStore({ path: path.join(dir, 'store.db') }));
    const { daemon, cap } = await startDaemon(file, { store, initialRun: false });
    const release = store.hold();
    daemon.scheduler.trigger('oskaveld-north');
    await settle();
    const stopping = daemon.stop();
    await settle();
    expect(store.calls).toEqual([]); // still waiting for the running cycle
    release();
    await stopping;
    expect(store.calls).toEqual(['writeForecast', 'flush', 'close']);
    const stoppedLine = cap.lines.find((l) => l.msg === 'radcast daemon stopped');
    expect(stoppedLine).toMatchObject({ finished: 1, abandoned: 0 });
    // The state store is closed too: the forecast is there when the file is opened again.
    const check = new EmbeddedStore({ path: path.join(dir, 'store.db') });
    expect((await check.readLatestForecast('oskaveld-north'))?.points).toHaveLength(24);
    check.close();
  });

  it('reload: an invalid file is rejected with its issues logged and the old config keeps running; a valid one is applied', async () => {
    seed(['oskaveld-north', 'tarrow-hill']).close();
    const file = writeConfig(configDoc(['oskaveld-north']));
    const { daemon, cap, base } = await startDaemon(file, { initialRun: false });
    // Broken: unknown key and a window too short for the lags.
    writeFileSync(file, stringify({ ...configDoc(['oskaveld-north', 'tarrow-hill']), defaults: { window: '2d', lags: [168], colour: 'blue' } }));
    const bad = await daemon.reload('sighup');
    expect(bad.applied).toBe(false);
    expect(bad.issues.map((i) => i.code)).toEqual(expect.arrayContaining(['CONFIG_UNKNOWN_KEY']));
    const rejected = cap.lines.filter((l) => typeof l.msg === 'string' && l.msg.startsWith('config reload rejected:'));
    expect(rejected.length).toBe(bad.issues.length);
    expect(rejected.some((l) => l.code === 'CONFIG_UNKNOWN_KEY' && String(l.path).includes('colour'))).toBe(true);
    expect(daemon.statuses().map((s) => s.series)).toEqual(['oskaveld-north']);
    expect(daemon.config.series[0].settings.windowSteps).toBe(21 * 24);
    expect((await fetch(`${base}/readyz`)).status).toBe(200);
    expect((await (await fetch(`${base}/readyz`)).json()).checks.config.detail).toMatch(/last reload rejected/);
    // Truncated YAML is rejected the same way.
    writeFileSync(file, 'series:\n  - name: [unclosed\n');
    expect((await daemon.reload('sighup')).applied).toBe(false);
    // Valid: a second series.
    writeConfig(configDoc(['oskaveld-north', 'tarrow-hill']));
    const good = await daemon.reload('sighup');
    expect(good).toMatchObject({ applied: true, added: ['tarrow-hill'], removed: [] });
    expect(daemon.statuses().map((s) => s.series)).toEqual(['oskaveld-north', 'tarrow-hill']);
    await daemon.flush(); // the added series ran at once
    expect(daemon.statuses()[1].latestForecast?.points).toHaveLength(24);
    const metrics = await (await fetch(`${base}/metrics`)).text();
    expect(metrics).toContain('radcast_config_reloads_total{outcome="rejected"} 2');
    expect(metrics).toContain('radcast_config_reloads_total{outcome="applied"} 1');
    await daemon.stop();
  });

  it('reloads when the config file changes on disk (watcher)', async () => {
    seed(['oskaveld-north', 'tarrow-hill']).close();
    const file = writeConfig(configDoc(['oskaveld-north'], { daemon: { concurrency: 1, shutdownTimeout: '10s', watchConfig: true } }));
    const { daemon, clock, cap } = await startDaemon(file, { initialRun: false });
    writeConfig(configDoc(['oskaveld-north', 'tarrow-hill'], { daemon: { concurrency: 1, shutdownTimeout: '10s', watchConfig: true } }));
    // The file event arrives in real time; the debounce runs on the fake clock.
    await vi.waitFor(() => expect(clock.pendingTimers).toBeGreaterThan(1), { timeout: 5000, interval: 20 });
    await clock.advance(1000);
    await vi.waitFor(() => expect(cap.lines.some((l) => l.msg === 'config reloaded' && l.reason === 'file-change')).toBe(true), { timeout: 5000, interval: 20 });
    expect(daemon.statuses().map((s) => s.series)).toEqual(['oskaveld-north', 'tarrow-hill']);
    await daemon.stop();
  });

  it('a restart shows the last outcome from the state store before the first new cycle', async () => {
    seed(['oskaveld-north']).close();
    const file = writeConfig(configDoc(['oskaveld-north']));
    const first = await startDaemon(file);
    await first.daemon.flush();
    await first.daemon.stop();
    const second = await startDaemon(file, { initialRun: false });
    const st = second.daemon.statuses()[0];
    expect(st.lastSuccessAt).toBe(NOW);
    expect(st.driftState).toBe('ok');
    const chart = await second.daemon.chartData('oskaveld-north');
    expect(chart?.forecast?.points).toHaveLength(24);
    await second.daemon.stop();
  });
});

describe('signal handlers', () => {
  it('SIGTERM stops once and reports; a second signal forces exit 1; SIGHUP reloads', async () => {
    const proc = new EventEmitter();
    const { logger, lines } = captureLogger();
    let stops = 0;
    let reloads = 0;
    let release!: () => void;
    const target = { stop: () => { stops++; return new Promise<void>((r) => (release = r)); }, reload: async () => { reloads++; } };
    const exits: number[] = [];
    let stopped = 0;
    const remove = installSignalHandlers(target, { logger, onStopped: () => stopped++, exit: (c) => exits.push(c), proc: proc as unknown as NodeJS.Process });
    proc.emit('SIGHUP', 'SIGHUP');
    expect(reloads).toBe(1);
    proc.emit('SIGTERM', 'SIGTERM');
    proc.emit('SIGINT', 'SIGINT');
    expect(stops).toBe(1);
    expect(exits).toEqual([1]);
    release();
    await settle();
    expect(stopped).toBe(1);
    expect(lines.map((l) => l.msg)).toEqual(['reload signal received', 'stop signal received', 'second stop signal during shutdown: exiting now']);
    remove();
    expect(proc.listenerCount('SIGTERM')).toBe(0);
  });
});
