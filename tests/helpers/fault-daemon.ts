/**
 * Building blocks for daemon-level fault tests: a config file written from an object, a Daemon on
 * a manual clock with HTTP on a free loopback port, a store wrapper with hooks around reads and
 * writes (to kill a server mid-cycle, hold writes, or count overlap), and the line protocol of
 * seeded readings.
 */
import { writeFileSync } from 'node:fs';
import { join } from 'node:path';
import { stringify } from 'yaml';
import type { Logger } from 'pino';
import { loadConfigFile, type LoadedConfig } from '../../src/config/load.ts';
import { Daemon, type DaemonOptions } from '../../src/daemon/daemon.ts';
import { ManualClock } from '../../src/daemon/clock.ts';
import { clockCronDriver } from '../../src/daemon/cron-driver.ts';
import type { ForecastBatch, HealthPoint, ScorePoint, SeriesStore, SourceSelector } from '../../src/store/types.ts';
import type { Reading } from '../../src/series/types.ts';

export const HOUR = 3_600_000;

export function writeConfig(dir: string, doc: unknown, name = 'radcast.yaml'): string {
  const file = join(dir, name);
  writeFileSync(file, stringify(doc));
  return file;
}

export function loadOrThrow(file: string): LoadedConfig {
  const r = loadConfigFile(file);
  if (!r.ok) throw new Error(r.issues.map((i) => `${i.path}: ${i.message}`).join('\n'));
  return r.value;
}

/** Invented hourly heat load (demo-style, seeded): daily cycle, weekend dip, noise. */
export function heatLoad(fromMs: number, toMs: number, seed = 1, level = 500): Reading[] {
  const out: Reading[] = [];
  let x = seed * 7919;
  for (let t = fromMs; t < toMs; t += HOUR) {
    x = (x * 1103515245 + 12345) % 2 ** 31;
    const hour = (t / HOUR) % 24;
    const day = Math.floor(t / (24 * HOUR)) % 7;
    out.push({ t, v: level + 120 * Math.sin((2 * Math.PI * (hour - 6)) / 24) - (day >= 5 ? 60 : 0) + (x / 2 ** 31 - 0.5) * 20 });
  }
  return out;
}

/** Line protocol of readings as `heat,substation=NAME load_kw=V T` (ms precision). */
export function heatLines(series: string, readings: Reading[]): string[] {
  return readings.map((r) => `heat,substation=${series} load_kw=${r.v} ${r.t}`);
}

export interface HookedStore extends SeriesStore {
  /** Runs after each successful read, before the readings go back to the cycle. */
  afterRead?: (sel: SourceSelector) => Promise<void> | void;
  /** Runs before each read reaches the inner store. */
  beforeRead?: (sel: SourceSelector) => Promise<void> | void;
  /** While set, writes wait for it before they reach the inner store. */
  writeGate: Promise<void> | null;
  /** Everything the cycles handed to the store (copies), in order. */
  forecasts: ForecastBatch[];
  health: HealthPoint[];
  scores: ScorePoint[];
  /** Reads by outcome. */
  readsOk: number;
  readsFailed: number;
  /** Reads in flight per series right now, and the largest number ever seen for one series. */
  maxReadsInFlightPerSeries: number;
}

/**
 * Wraps a store: reads through `readFrom` (default the inner store), writes / ping / flush /
 * close through `inner`. Records what was written so tests can compare with what arrived.
 */
export function hookStore(inner: SeriesStore, readFrom: Pick<SeriesStore, 'readReadings'> = inner): HookedStore {
  const inFlight = new Map<string, number>();
  const w: HookedStore = {
    kind: inner.kind,
    writeGate: null,
    forecasts: [],
    health: [],
    scores: [],
    readsOk: 0,
    readsFailed: 0,
    maxReadsInFlightPerSeries: 0,
    async readReadings(sel, fromMs, toMs) {
      const n = (inFlight.get(sel.name) ?? 0) + 1;
      inFlight.set(sel.name, n);
      w.maxReadsInFlightPerSeries = Math.max(w.maxReadsInFlightPerSeries, n);
      try {
        await w.beforeRead?.(sel);
        let out: Reading[];
        try {
          out = await readFrom.readReadings(sel, fromMs, toMs);
        } catch (err) {
          w.readsFailed++;
          throw err;
        }
        w.readsOk++;
        await w.afterRead?.(sel);
        return out;
      } finally {
        inFlight.set(sel.name, (inFlight.get(sel.name) ?? 1) - 1);
      }
    },
    async writeForecast(b) {
      while (w.writeGate) await w.writeGate;
      w.forecasts.push(structuredClone(b));
      return inner.writeForecast(b);
    },
    async writeScores(p) {
      while (w.writeGate) await w.writeGate;
      w.scores.push(...structuredClone(p));
      return inner.writeScores(p);
    },
    async writeHealth(p) {
      while (w.writeGate) await w.writeGate;
      w.health.push(...structuredClone(p));
      return inner.writeHealth(p);
    },
    ping: () => inner.ping(),
    flush: () => inner.flush(),
    close: () => inner.close(),
  };
  return w;
}

export interface ClockedDaemon {
  daemon: Daemon;
  clock: ManualClock;
  base: string;
  /**
   * Advance the clock by one hour (firing cron ticks) and wait until every cycle it started
   * finished. Start the clock a minute or two before a tick minute (e.g. hh:04 for "5 * * * *").
   */
  hour(): Promise<void>;
  get(path: string): Promise<{ status: number; text: string }>;
}

/** A Daemon on a manual clock (cron ticks fire on advance), inline fits, HTTP on a free port. */
export async function startClockedDaemon(opts: { loaded: LoadedConfig; logger: Logger; startMs: number } & Partial<DaemonOptions>): Promise<ClockedDaemon> {
  const clock = new ManualClock(opts.startMs);
  const { loaded, logger, startMs: _s, ...rest } = opts;
  const daemon = new Daemon({ loaded, logger, clock, cronDriver: clockCronDriver(clock), workers: 0, httpPort: 0, initialRun: false, watchConfig: false, ...rest });
  await daemon.start();
  const base = `http://127.0.0.1:${daemon.httpAddress!.port}`;
  return {
    daemon,
    clock,
    base,
    async hour() {
      // Fire the tick and let every cycle it queued finish while the clock is still in the tick's
      // hour (a cycle reads the clock when it starts), then move on to the same minute an hour on.
      await clock.advance(2 * 60_000);
      await daemon.scheduler.flush();
      await clock.advance(HOUR - 2 * 60_000);
      await daemon.scheduler.flush();
    },
    async get(path: string) {
      const res = await fetch(base + path);
      return { status: res.status, text: await res.text() };
    },
  };
}

/** Polls `fn` until it returns true or `timeoutMs` passes; returns the last answer. */
export async function until(fn: () => Promise<boolean> | boolean, timeoutMs = 10_000, everyMs = 100): Promise<boolean> {
  const deadline = Date.now() + timeoutMs;
  for (;;) {
    if (await fn()) return true;
    if (Date.now() > deadline) return false;
    await new Promise((r) => setTimeout(r, everyMs));
  }
}

/** The value of one Prometheus sample (`name{labels}`) in a /metrics text, or 0 when absent. */
export function metricValue(text: string, sample: string): number {
  for (const line of text.split('\n')) {
    if (line.startsWith(sample + ' ')) return Number(line.slice(sample.length + 1));
  }
  return 0;
}
