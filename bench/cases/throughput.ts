/**
 * Throughput of one machine: N series (hourly, 8-week window, K = 32, ~44 features, H = 24) in a
 * temporary embedded store; one cold cycle, then warm-started refit cycles, each one hour later
 * with one new reading per series, on a worker pool with one thread per core. This is the path
 * `radcast once` takes (openRuntime + runAll), not a copy of it.
 *
 * Prints per cycle: wall time, series/s, the time split (read, prepare, fit, predict, write, score,
 * drift as summed work per series), pool overhead, RSS and the main-thread heap after a GC; then
 * the memory held per series between cycles (heap and state on disk) and whether memory grew.
 *
 *   npm run bench -- throughput                     N = 100 and 1000, 10 warm cycles each
 *   npm run bench -- throughput --series 1000 --cycles 10 --workers 2
 *   npm run bench -- throughput --series 100 --cycles 3 --cpu-split   stage split in CPU ms (one thread)
 *
 * Target (issue 9): 1000 series per warm cycle in under 30 s on a 2-core machine, no growth.
 */
import { mkdtempSync, readFileSync, rmSync, statSync, writeFileSync, existsSync } from 'node:fs';
import os from 'node:os';
import path from 'node:path';
import v8 from 'node:v8';
import vm from 'node:vm';
import pino from 'pino';
import { loadConfigFile } from '../../src/config/index.ts';
import { openRuntime } from '../../src/daemon/runtime.ts';
import { runAll, type RunSummary } from '../../src/daemon/runner.ts';
import { STAGES } from '../../src/daemon/timings.ts';
import { EmbeddedStore } from '../../src/store/index.ts';
import type { Reading } from '../../src/series/types.ts';
import { systemClock, type Clock } from '../../src/daemon/clock.ts';
import { runFitTask } from '../../src/daemon/fit-task.ts';
import type { Fitter } from '../../src/daemon/ports.ts';
import { decodeFittedForecaster } from '../../src/forecast/engine.ts';
import { median, stringFlag } from '../args.ts';
import { mulberry32 } from '../../src/model/random.ts';

const HOUR_MS = 3_600_000;
/** Readings generated before the first cycle: window 8 w + longest lag 1 w + margin, rounded up. */
const HISTORY_STEPS = 8 * 168 + 168 + 72;
const TEMP_SERIES = 'oskaveld-outdoor-temp';

v8.setFlagsFromString('--expose-gc');
const rawGc = vm.runInNewContext('gc') as () => void;
/** Full collections until the heap stops shrinking (one pass can leave weakly held garbage). */
function gc(): void {
  let before = Infinity;
  for (let i = 0; i < 4; i++) {
    rawGc();
    const now = process.memoryUsage().heapUsed;
    if (now >= before - 64 * 1024) break;
    before = now;
  }
}

/** CPU time (ms) of the main thread from /proc (Linux); null elsewhere. Fields 14/15: utime, stime in clock ticks. */
function mainThreadCpuMs(): number | null {
  try {
    const stat = readFileSync(`/proc/self/task/${process.pid}/stat`, 'utf8');
    const fields = stat.slice(stat.lastIndexOf(')') + 2).split(' ');
    // fields[0] is field 3 (state); utime is field 14, stime field 15.
    return ((Number(fields[11]) + Number(fields[12])) * 1000) / CLOCK_TICKS_PER_S;
  } catch {
    return null;
  }
}
/** USER_HZ: 100 on Linux for every mainstream architecture (common practice; sysconf(_SC_CLK_TCK)). */
const CLOCK_TICKS_PER_S = 100;

/** Outdoor temperature (°C) at hour index i: yearly and daily cycle plus weather noise. */
function temperatureAt(i: number, noise: number): number {
  return 4 - 7 * Math.cos((2 * Math.PI * (i + 700)) / 8766) + 4 * Math.sin((2 * Math.PI * (i - 9)) / 24) + noise;
}

/** Heat load (kW) of substation k at hour index i: base, temperature response, daily and weekly shape. */
function loadAt(k: number, i: number, tempC: number, noise: number): number {
  const base = 300 + (k % 17) * 40;
  const slope = 12 + (k % 5) * 3;
  const hour = i % 24;
  const daily = 1 + 0.18 * Math.exp(-((hour - 7) ** 2) / 6) + 0.1 * Math.exp(-((hour - 19) ** 2) / 8);
  const weekday = Math.floor(i / 24) % 7 < 5 ? 1 : 0.9;
  return Math.max(0, (base + slope * Math.max(0, 16 - tempC)) * daily * weekday + noise);
}

interface Fleet {
  names: string[];
  startMs: number;
  /** Appends one more hour of readings for every series (and the temperature). */
  appendHour(store: EmbeddedStore): void;
  hours: number;
}

function buildFleet(n: number, store: EmbeddedStore, startMs: number): Fleet {
  const names = Array.from({ length: n }, (_, k) => `oskaveld-sub-${String(k).padStart(4, '0')}`);
  const rand = mulberry32(20_260_301);
  const temps: number[] = [];
  const tempAt = (i: number) => {
    while (temps.length <= i) temps.push(temperatureAt(temps.length, (rand() - 0.5) * 2));
    return temps[i];
  };
  const write = (from: number, to: number) => {
    store.transaction(() => {
      const t: Reading[] = [];
      for (let i = from; i < to; i++) t.push({ t: startMs + i * HOUR_MS, v: tempAt(i) });
      store.writeReadings(TEMP_SERIES, t);
      names.forEach((name, k) => {
        const r: Reading[] = [];
        for (let i = from; i < to; i++) r.push({ t: startMs + i * HOUR_MS, v: loadAt(k, i, tempAt(i), (rand() - 0.5) * 30) });
        store.writeReadings(name, r);
      });
    });
  };
  write(0, HISTORY_STEPS);
  const fleet: Fleet = {
    names,
    startMs,
    hours: HISTORY_STEPS,
    appendHour(s) {
      void s;
      write(fleet.hours, fleet.hours + 1);
      fleet.hours++;
    },
  };
  return fleet;
}

function configText(names: string[], dir: string, concurrency: number): string {
  return [
    'store:',
    '  kind: embedded',
    `  embedded: { path: ${JSON.stringify(path.join(dir, 'radcast.db'))} }`,
    `state: { path: ${JSON.stringify(path.join(dir, 'radcast-state.db'))} }`,
    'http: { enabled: false }',
    'log: { level: warn }',
    `daemon: { concurrency: ${concurrency} }`,
    'defaults:',
    '  step: 1h',
    '  timeZone: Europe/Berlin',
    '  horizon: 24',
    '  window: 8w',
    '  centres: 32',
    '  lags: ["1-6", 24, 48, 72, 168]',
    '  calendar: { holidays: { country: DE } }',
    `  exogenous: [{ name: ${TEMP_SERIES}, lags: [1, 2, 3, 24] }]`,
    '  drift: { staleAfter: 6h }',
    'series:',
    ...names.map((n) => `  - name: ${n}`),
    '',
  ].join('\n');
}

const fmt = (v: number, d = 0) => v.toFixed(d);
const mib = (b: number) => (b / 2 ** 20).toFixed(0);

interface CycleRow {
  cycle: string;
  /** The run summary without its per-series results (keeping those would itself grow the heap). */
  summary: Omit<RunSummary, 'results'>;
  /** Series whose refit started from the previous model. */
  warmStarted: number;
  /** Process CPU time (all threads: main + fit workers) spent in the cycle, ms. */
  cpuMs: number;
  /** CPU time of the main thread (stores, regularize, scoring, message passing), ms; NaN when unknown. */
  mainCpuMs: number;
  rss: number;
  heapAfterGc: number;
}

/** Process CPU time in ms (all threads). In the CPU-split mode everything runs on the main thread. */
const cpuNowMs = () => {
  const u = process.cpuUsage();
  return (u.user + u.system) / 1000;
};

/** Inline fitter whose fit/predict times are CPU time (the CPU-split mode). */
function cpuTimedFitter(): Fitter {
  return {
    kind: 'inline',
    queued: 0,
    async fitAndForecast(req) {
      await new Promise((r) => setImmediate(r));
      return runFitTask(req, cpuNowMs);
    },
    async stop() {},
  };
}

async function benchFleet(n: number, cycles: number, workers: number, concurrency: number, cpuSplit: boolean): Promise<void> {
  const dir = mkdtempSync(path.join(os.tmpdir(), 'radcast-bench-'));
  try {
    gc();
    const heapBase = process.memoryUsage().heapUsed;
    const startMs = Date.UTC(2026, 0, 5, 0);
    const seed = new EmbeddedStore({ path: path.join(dir, 'radcast.db') });
    const t0 = performance.now();
    const fleet = buildFleet(n, seed, startMs);
    const loadMs = performance.now() - t0;
    const cfgFile = path.join(dir, 'radcast.yaml');
    writeFileSync(cfgFile, configText(fleet.names, dir, concurrency));
    const loaded = loadConfigFile(cfgFile);
    if (!loaded.ok) throw new Error(`bench config rejected: ${JSON.stringify(loaded.issues.slice(0, 3))}`);
    const series = loaded.value.series;
    let nowMs = startMs + fleet.hours * HOUR_MS + 60_000; // one minute after the newest hour closed
    // Real timers; "now" is pinned to the replayed hour. In the CPU-split mode stage durations are
    // CPU time of the one thread that does all the work, so they hold on a busy machine too.
    const clock: Clock = { ...systemClock, now: () => nowMs, ...(cpuSplit ? { monotonicMs: cpuNowMs } : {}) };
    const logger = pino({ level: 'warn' });
    const rt = await openRuntime(loaded.value, { logger, clock, workers, store: seed, ...(cpuSplit ? { fitter: cpuTimedFitter() } : {}) });
    gc();
    const heapOpen = process.memoryUsage().heapUsed;
    console.log(`\nload average before: ${os.loadavg().map((l) => l.toFixed(1)).join(' ')} (other processes compete for the cores when > 0.5)`);
    console.log(
      `N = ${n} series (+1 input-only temperature series), ${HISTORY_STEPS} h of readings loaded in ${fmt(loadMs)} ms; ` +
        `window ${series[0].settings.windowSteps} steps, ${series[0].samples} samples, K = 32, H = 24; ` +
        (cpuSplit ? 'CPU-split mode: everything on the main thread, stage times are CPU ms' : `${workers} fit workers, ${concurrency} series in flight`),
    );
    const rows: CycleRow[] = [];
    for (let c = 0; c <= cycles; c++) {
      if (c > 0) {
        seed.transaction(() => fleet.appendHour(seed));
        nowMs += HOUR_MS;
      }
      const cpu0 = process.cpuUsage();
      const main0 = mainThreadCpuMs();
      const { results, ...summary } = await runAll(rt.cycle, rt.owned, { concurrency, nowMs, clock });
      const cpu = process.cpuUsage(cpu0);
      const main1 = mainThreadCpuMs();
      if (summary.failed + summary.stale > 0) {
        console.log(`  cycle ${c}: ${summary.failed} failed, ${summary.stale} stale: ${JSON.stringify(summary.byCode)}`);
        const first = results.find((r) => !r.ok);
        if (first) console.log(`  first failure: ${first.series} ${first.error?.code} ${first.error?.message}`);
      }
      const warmStarted = results.filter((x) => x.warmStarted).length;
      results.length = 0; // keep only the aggregates: holding every forecast would grow the heap
      gc();
      if (process.env.RADCAST_BENCH_SNAPSHOT_AT?.split(',').includes(String(c))) {
        console.log(`  heap snapshot: ${v8.writeHeapSnapshot(path.join(os.tmpdir(), `radcast-bench-c${c}.heapsnapshot`))}`);
      }
      const mem = process.memoryUsage();
      rows.push({
        cycle: c === 0 ? 'cold' : `warm ${c}`,
        summary,
        warmStarted,
        cpuMs: (cpu.user + cpu.system) / 1000,
        mainCpuMs: main0 === null || main1 === null ? Number.NaN : main1 - main0,
        rss: mem.rss,
        heapAfterGc: mem.heapUsed,
      });
    }
    // The fitted forecasters are what a series keeps between cycles; they live in the state file.
    const storedRow = rt.stateStore.loadModelStored(series[0].name)?.stored;
    const stored = storedRow === undefined ? undefined : decodeFittedForecaster(storedRow, series[0].name);
    const nFeatures = stored?.scaler.featureNames.length;
    const modelJsonBytes = stored ? JSON.stringify(stored).length : 0;
    const modelStoredBytes = storedRow === undefined ? 0 : typeof storedRow === 'string' ? Buffer.byteLength(storedRow) : storedRow.length;
    let tableBytes: { name: string; bytes: number }[] = [];
    try {
      rt.stateStore.db.pragma('wal_checkpoint(TRUNCATE)');
      tableBytes = rt.stateStore.db.prepare('SELECT name, SUM(pgsize) AS bytes FROM dbstat GROUP BY name ORDER BY bytes DESC').all() as typeof tableBytes;
    } catch {
      // dbstat is a compile-time option of SQLite; without it only the file size is shown.
    }
    await rt.close();
    gc();

    console.log(
      ['cycle', 'wall s', 'series/s', 'CPU s', 'main CPU s', ...STAGES.map((s) => `${s} ms/series`), 'pool ms/series', 'ok', 'warm-started', 'RSS MiB', 'heap MiB'].join(' | '),
    );
    for (const r of rows) {
      const s = r.summary;
      const per = (ms: number) => fmt(ms / n, 1);
      console.log(
        [r.cycle, fmt(s.wallMs / 1000, 2), fmt((n * 1000) / s.wallMs, 1), fmt(r.cpuMs / 1000, 1), fmt(r.mainCpuMs / 1000, 1), ...STAGES.map((st) => per(s.timings[st])), per(s.poolOverheadMs), `${s.ok}/${n}`, String(r.warmStarted), mib(r.rss), mib(r.heapAfterGc)].join(' | '),
      );
    }
    const warm = rows.slice(1);
    const cores = Math.max(1, workers);
    if (warm.length) {
      const wallMedian = median(warm.map((r) => r.summary.wallMs));
      const heapFirst = warm[0].heapAfterGc;
      const heapLast = warm.at(-1)!.heapAfterGc;
      const rssFirst = warm[0].rss;
      const rssLast = warm.at(-1)!.rss;
      const statePath = path.join(dir, 'radcast-state.db');
      const stateBytes = existsSync(statePath) ? statSync(statePath).size + (existsSync(`${statePath}-wal`) ? statSync(`${statePath}-wal`).size : 0) : 0;
      const totals = STAGES.map((st) => warm.reduce((a, r) => a + r.summary.timings[st], 0));
      const all = totals.reduce((a, b) => a + b, 0);
      console.log(
        `warm median: ${fmt(wallMedian / 1000, 2)} s per cycle, ${fmt((n * 1000) / wallMedian, 1)} series/s, ` +
          `${fmt((n * 1000) / wallMedian / cores, 1)} series/s per core, ${fmt((wallMedian * cores) / n, 1)} core-ms per series`,
      );
      const cpuMedian = median(warm.map((r) => r.cpuMs));
      console.log(
        `warm median CPU: ${fmt(cpuMedian / 1000, 2)} s per cycle = ${fmt(cpuMedian / n, 1)} CPU-ms per series ` +
          `(main thread ${fmt(median(warm.map((r) => r.mainCpuMs)) / n, 1)} of them) -> ${fmt((n * 1000) / cpuMedian, 1)} series per CPU-second; ` +
          `on ${cores} idle core(s) 1000 series would take ~${fmt(((cpuMedian / n) * 1000) / cores / 1000, 1)} s`,
      );
      console.log(`work split (warm cycles): ${STAGES.map((st, i) => `${st} ${fmt((100 * totals[i]) / all, 1)}%`).join(', ')}`);
      console.log(
        `memory: peak RSS ${mib(process.resourceUsage().maxRSS * 1024)} MiB (whole process, workers included); ` +
          `main heap after GC ${mib(heapFirst)} -> ${mib(heapLast)} MiB over ${warm.length} warm cycles (${heapLast >= heapFirst ? '+' : ''}${fmt((heapLast - heapFirst) / 1024, 0)} KiB), ` +
          `RSS ${mib(rssFirst)} -> ${mib(rssLast)} MiB`,
      );
      console.log(
        `held per series between cycles: main heap ${fmt((heapLast - heapOpen) / n, 0)} B retained by cycles ` +
          `(+ ${fmt((heapOpen - heapBase) / n, 0)} B for the fleet's readings generator, resolved config and runtime); ` +
          `state on disk ${fmt(stateBytes / n, 0)} B (model, residuals, ledger, drift state)` +
          (nFeatures ? `; the model has ${nFeatures} features` : ''),
      );
      if (tableBytes.length) {
        console.log(
          `state file per series by table (B): ${tableBytes
            .filter((t) => t.bytes / n >= 100)
            .map((t) => `${t.name} ${fmt(t.bytes / n)}`)
            .join(', ')}; one stored forecaster: ${modelStoredBytes} B as stored (${modelJsonBytes} B as JSON text)`,
        );
      }
      console.log(`load average after: ${os.loadavg().map((l) => l.toFixed(1)).join(' ')}`);
      console.log(`target: 1000 series per warm cycle < 30 s on 2 cores -> ${n === 1000 ? (wallMedian < 30_000 ? 'met' : 'NOT met') : 'see N = 1000'}`);
    }
  } finally {
    rmSync(dir, { recursive: true, force: true });
  }
}

export async function run(argv: string[]): Promise<void> {
  const sizes = stringFlag(argv, '--series', '100,1000').split(',').map(Number);
  const cycles = Number(stringFlag(argv, '--cycles', '10'));
  const workers = Number(stringFlag(argv, '--workers', String(os.availableParallelism())));
  const concurrency = Number(stringFlag(argv, '--concurrency', String(Math.max(2, 2 * workers))));
  const cpuSplit = argv.includes('--cpu-split');
  for (const n of sizes) {
    // One thread does everything: per-core figures are per that one core.
    if (cpuSplit) await benchFleet(n, cycles, 0, 1, true);
    else await benchFleet(n, cycles, workers, concurrency, false);
  }
}
