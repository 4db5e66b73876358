/**
 * Load and soak against the real InfluxDB 1.x server: many series, several hourly cycles on an
 * accelerated (manual) clock driving the real scheduler, the real daemon with its fit worker pool
 * and the real InfluxDB adapter. After every cycle (with a forced garbage collection) the heap,
 * the resident size and the open file descriptors (/proc/self/fd) are sampled. Required: every
 * series forecast in every cycle, nothing dropped or left in the write buffer, every forecast
 * point in the database, no heap growth and no descriptor growth from cycle to cycle, and no
 * unhandled rejection or uncaught exception at all.
 *
 * Sizes: the normal suite runs a reduced load (200 series, 3 cycles). `npm run soak` runs the
 * full one (RADCAST_SOAK_SERIES=1000, RADCAST_SOAK_CYCLES=8) and prints a table of the cycles.
 * Measured figures are kept in /work/notes/reliability.md.
 */
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { mkdtempSync, readdirSync, rmSync, writeFileSync, mkdirSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join, resolve } from 'node:path';
import v8 from 'node:v8';
import { runInNewContext } from 'node:vm';
import { startInflux1, type Influx1Server } from '../helpers/servers.ts';
import { heatLines, heatLoad, HOUR, loadOrThrow, metricValue, startClockedDaemon, writeConfig, type ClockedDaemon } from '../helpers/fault-daemon.ts';
import { FAST_SERIES, trapUnhandled } from '../helpers/fault-cycle.ts';
import { captureLogger } from '../unit/daemon/helpers.ts';
import type { InfluxStore } from '../../src/store/influx/index.ts';

const N_SERIES = Number(process.env.RADCAST_SOAK_SERIES ?? 200);
const N_CYCLES = Number(process.env.RADCAST_SOAK_CYCLES ?? 3);
const FULL = process.env.RADCAST_SOAK_SERIES !== undefined;
const SERIES = Array.from({ length: N_SERIES }, (_, i) => `oskaveld-sub-${String(i + 1).padStart(4, '0')}`);
const BASE = Date.UTC(2026, 0, 12, 0, 0);

v8.setFlagsFromString('--expose-gc');
const gc = runInNewContext('gc') as () => void;
const fds = () => readdirSync('/proc/self/fd').length;

let influx: Influx1Server;
let dir: string;
let d: ClockedDaemon;
const trap = trapUnhandled();
const cap = captureLogger('warn');

interface Sample {
  cycle: number;
  wallMs: number;
  heapMb: number;
  rssMb: number;
  fds: number;
  ok: number;
}
const samples: Sample[] = [];

beforeAll(async () => {
  dir = mkdtempSync(join(tmpdir(), 'radcast-soak-'));
  influx = await startInflux1();
  await influx.query('CREATE DATABASE oskaveld');
  let lines: string[] = [];
  for (const [i, s] of SERIES.entries()) {
    lines.push(...heatLines(s, heatLoad(BASE - 220 * HOUR, BASE + (N_CYCLES + 2) * HOUR, i + 1, 300 + (i % 50) * 10)));
    if (lines.length >= 20_000) {
      await influx.writeLines('oskaveld', lines);
      lines = [];
    }
  }
  if (lines.length) await influx.writeLines('oskaveld', lines);
  const file = writeConfig(dir, {
    store: { kind: 'influxdb', influxdb: { url: influx.url, api: 'v1', database: 'oskaveld', timeout: '30s', flushInterval: '200ms', batchSize: 5000 } },
    state: { path: join(dir, 'state.db') },
    http: { port: 0 },
    log: { level: 'warn' },
    daemon: { concurrency: 2, watchConfig: false, shutdownTimeout: '60s' },
    defaults: { ...FAST_SERIES, timeZone: 'Europe/Berlin', refit: '5 * * * *', drift: { staleAfter: '6h' }, source: { measurement: 'heat', field: 'load_kw', aggregate: 'step' } },
    series: SERIES.map((name) => ({ name, source: { tags: { substation: name } } })),
  });
  d = await startClockedDaemon({ loaded: loadOrThrow(file), logger: cap.logger, startMs: BASE + 4 * 60_000, workers: 2 });
}, 300_000);

afterAll(async () => {
  await d?.daemon.stop();
  await influx?.close();
  trap.dispose();
  if (dir) rmSync(dir, { recursive: true, force: true });
});

describe(`load: ${N_SERIES} series x ${N_CYCLES} cycles against influxd`, () => {
  it(
    'every series forecast in every cycle; no heap or descriptor growth; nothing dropped; no unhandled rejection',
    async () => {
      for (let c = 1; c <= N_CYCLES; c++) {
        const t0 = performance.now();
        await d.hour();
        await d.daemon.flush();
        const wallMs = performance.now() - t0;
        gc();
        gc();
        const m = await d.daemon.runtime.metrics.text();
        samples.push({ cycle: c, wallMs, heapMb: process.memoryUsage().heapUsed / 2 ** 20, rssMb: process.memoryUsage().rss / 2 ** 20, fds: fds(), ok: metricValue(m, 'radcast_cycles_total{outcome="ok"}') });
      }
      const table = samples.map((s) => `${s.cycle}\t${(s.wallMs / 1000).toFixed(1)} s\t${(s.wallMs / N_SERIES).toFixed(1)} ms/series\theap ${s.heapMb.toFixed(1)} MB\trss ${s.rssMb.toFixed(0)} MB\tfds ${s.fds}`).join('\n');
      if (FULL) process.stdout.write(`\nsoak: ${N_SERIES} series, ${N_CYCLES} cycles\ncycle\twall\tper series\theap\trss\tfds\n${table}\n`);
      const out = resolve(import.meta.dirname, '../../var/soak');
      mkdirSync(out, { recursive: true });
      writeFileSync(join(out, `soak-${N_SERIES}x${N_CYCLES}.json`), JSON.stringify({ series: N_SERIES, cycles: N_CYCLES, samples }, null, 2));

      // Every series forecast in every cycle.
      samples.forEach((s, i) => expect(s.ok, `cycle ${i + 1}\n${table}`).toBe(N_SERIES * (i + 1)));
      expect(d.daemon.statuses().filter((s) => s.lastError !== null)).toEqual([]);
      // Nothing dropped, nothing waiting; every forecast point in the database.
      const stats = (d.daemon.runtime.store as InfluxStore).stats();
      expect(stats).toMatchObject({ buffered: 0, dropped: 0, rejected: 0, readFailures: 0 });
      const count = (await influx.query('SELECT count("value") FROM "radcast_forecast"', 'oskaveld')).results[0].series![0].values[0][1];
      expect(count).toBe(N_SERIES * N_CYCLES * FAST_SERIES.horizon);
      // No growth after the first cycle (which opens the workers, caches and per-series state).
      const steady = samples.slice(1);
      const heapGrowth = steady.at(-1)!.heapMb - steady[0].heapMb;
      expect(heapGrowth, `heap growth after cycle 2\n${table}`).toBeLessThan(FULL ? 2 * (steady.length - 1) + 8 : 12);
      if (steady.length >= 4) {
        // Least-squares slope of the heap over the steady cycles (MB per cycle).
        const xs = steady.map((_, i) => i);
        const mx = xs.reduce((a, b) => a + b, 0) / xs.length;
        const my = steady.reduce((a, s) => a + s.heapMb, 0) / steady.length;
        const slope = xs.reduce((a, x, i) => a + (x - mx) * (steady[i].heapMb - my), 0) / xs.reduce((a, x) => a + (x - mx) ** 2, 0);
        expect(slope, `heap slope\n${table}`).toBeLessThan(1.5);
      }
      for (const s of steady) expect(s.fds, `descriptors\n${table}`).toBeLessThanOrEqual(samples[0].fds + 4);
      expect(cap.lines.filter((l) => l.level >= 50)).toEqual([]);
      expect(trap.errors).toEqual([]);
    },
    FULL ? 3_600_000 : 180_000,
  );
});
