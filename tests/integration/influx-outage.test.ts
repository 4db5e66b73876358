/**
 * Store outages with real servers: the server is killed (InfluxDB 1.x) or stopped
 * (VictoriaMetrics) while cycles keep writing, then started again on the same port and data
 * folder. Every point must arrive exactly once: InfluxDB would hide a resent point (it
 * overwrites), VictoriaMetrics keeps every sample it gets, so a duplicate would show there.
 */
import { afterAll, describe, expect, it } from 'vitest';
import { startInflux1, startVictoria, pollVictoria, type Influx1Server, type TestServer } from '../helpers/servers.ts';
import { captureLogger } from '../helpers/capture-logger.ts';
import { createInfluxStore, StoreError, type InfluxStore, type InfluxStoreOptions } from '../../src/store/influx/index.ts';
import type { ForecastBatch } from '../../src/store/types.ts';

const H = 3_600_000;
const T0 = Math.floor(Date.now() / H) * H - 20 * H;
const servers: TestServer[] = [];
const stores: InfluxStore[] = [];

afterAll(async () => {
  for (const s of stores) await s.close();
  for (const s of servers) await s.close();
});

const fast = { retryJitter: 0, minRetryDelayMs: 40, maxRetryDelayMs: 200, flushIntervalMs: 20, batchSize: 40, closeTimeoutMs: 5_000, timeoutMs: 2_000 } as const;

function batch(series: string, cycle: number): ForecastBatch {
  const issuedAt = T0 + cycle * H;
  return {
    series,
    issuedAt,
    stepMs: H,
    points: Array.from({ length: 6 }, (_, i) => ({ t: issuedAt + (i + 1) * H, lead: i + 1, value: cycle * 100 + i, bands: { '0.1': cycle * 100 + i - 5, '0.9': cycle * 100 + i + 5 } })),
  };
}

/** One "cycle" as the daemon runs it: read (may fail, then the series is skipped), write forecast, score and health. */
async function cycle(s: InfluxStore, n: number, skipped: string[]): Promise<void> {
  for (const series of ['oskaveld-north', 'brennick-yard']) {
    try {
      await s.readReadings({ name: series, measurement: 'heat', field: 'load_kw', tags: { substation: series } }, T0 - 48 * H, T0);
    } catch (err) {
      expect(err).toBeInstanceOf(StoreError);
      expect((err as StoreError).canRetry()).toBe(true);
      skipped.push(series);
    }
    await s.writeForecast(batch(series, n));
    await s.writeScores([{ series, t: T0 + n * H, lead: 0, mae: n, rmse: n + 1, mase: n / 10, bias: 0, coverage: 0.8, n: 24, season: 24 }]);
    await s.writeHealth([{ series, t: T0 + n * H, state: 'ok', statistic: n, recentMase: 1, baselineMase: 1, noveltyShare: 0, lastReadingAt: null }]);
  }
}

const sleep = (ms: number) => new Promise((r) => setTimeout(r, ms));

describe('outage of InfluxDB 1.x (v1 mode)', () => {
  let influx: Influx1Server;

  it('kill -9 during cycles, restart: every point arrives, nothing lost, the cycles kept running', async () => {
    influx = await startInflux1();
    servers.push(influx);
    await influx.query('CREATE DATABASE oskaveld');
    const { logger, records } = captureLogger();
    const s = createInfluxStore({ api: 'v1', url: influx.url, database: 'oskaveld', logger, ...fast });
    stores.push(s);
    const skipped: string[] = [];
    const cycles = 30;
    for (let n = 0; n < cycles; n++) {
      if (n === 8) await influx.kill();
      if (n === 20) await influx.restart();
      await cycle(s, n, skipped);
      await sleep(15);
    }
    await s.flush();

    // Reads failed only while the server was down (cycles 8..19, two series each).
    expect(skipped.length).toBe(24);
    const stats = s.stats();
    expect(stats).toMatchObject({ buffered: 0, dropped: 0, rejected: 0, failing: false });
    expect(stats.retries).toBeGreaterThan(0);
    // Each cycle: 2 series x (6 history + 6 latest + 1 score + 1 health) lines. While the server is
    // down a newer issue replaces waiting "latest" points of the same target time in the buffer,
    // so fewer lines than that are sent; never more.
    expect(stats.written).toBeLessThanOrEqual(cycles * 2 * 14);
    expect(stats.written).toBeGreaterThanOrEqual(cycles * 2 * 8);

    const count = async (q: string) => (await influx.query(q, 'oskaveld')).results[0]?.series?.[0]?.values[0]?.[1];
    expect(await count(`SELECT count("value") FROM "radcast_forecast"`)).toBe(cycles * 2 * 6);
    expect(await count(`SELECT count("mae") FROM "radcast_score"`)).toBe(cycles * 2);
    expect(await count(`SELECT count("state_code") FROM "radcast_health"`)).toBe(cycles * 2);
    // Spot check the values of a cycle written while the server was down.
    const res = await influx.query(`SELECT "value", "q90" FROM "radcast_forecast" WHERE "series" = 'brennick-yard' AND "issued_at" = ${T0 + 12 * H}`, 'oskaveld');
    expect(res.results[0]?.series?.[0]?.values).toEqual(Array.from({ length: 6 }, (_, i) => [T0 + 12 * H + (i + 1) * H, 1200 + i, 1205 + i]));

    expect(records.some((r) => r.level === 'warn' && r.msg === 'store write failed; points kept for retry')).toBe(true);
    expect(records.some((r) => r.level === 'info' && r.msg === 'store writes recovered')).toBe(true);
    expect(await s.ping()).toBe(true);
  });

  it('a bounded buffer during a long outage keeps the newest forecasts and all scores and health, and counts what it dropped', async () => {
    const server = await startInflux1();
    servers.push(server);
    await server.query('CREATE DATABASE oskaveld');
    const { logger, records } = captureLogger();
    // No send is attempted while the points are added (long flush interval, batch larger than
    // the bound), so what is dropped does not depend on timing.
    const s = createInfluxStore({ api: 'v1', url: server.url, database: 'oskaveld', logger, ...fast, writeBufferPoints: 100, batchSize: 500, flushIntervalMs: 60_000 });
    stores.push(s);
    await server.stop();
    // 20 substations x (12 forecast + 1 score + 1 health) = 280 distinct points into a bound of 100.
    for (let n = 0; n < 20; n++) {
      const series = `substation-${String(n).padStart(2, '0')}`;
      await s.writeForecast(batch(series, n));
      await s.writeScores([{ series, t: T0 + n * H, lead: 0, mae: n, rmse: n, mase: n, bias: 0, coverage: 1, n: 1, season: 24 }]);
      await s.writeHealth([{ series, t: T0 + n * H, state: 'watch', statistic: n, recentMase: 1, baselineMase: 1, noveltyShare: 0, lastReadingAt: null }]);
    }
    expect(s.stats()).toMatchObject({ buffered: 100, dropped: 180, droppedForecast: 180 });
    const warn = records.find((r) => r.msg === 'write buffer full: oldest points dropped');
    expect(warn?.level).toBe('warn');
    await server.restart();
    await s.flush();
    const rows = async (q: string) => (await server.query(q, 'oskaveld')).results[0]?.series?.[0]?.values ?? [];
    // Every score and health point survives; of 240 forecast lines the 60 newest (last 5 issues) do.
    expect((await rows(`SELECT count("mae") FROM "radcast_score"`))[0]?.[1]).toBe(20);
    expect((await rows(`SELECT count("state_code") FROM "radcast_health"`))[0]?.[1]).toBe(20);
    const hist = (await rows(`SELECT "issued_at" FROM "radcast_forecast"`)).map((r) => r[1] as number);
    const latest = (await rows(`SELECT "issued_at" FROM "radcast_forecast_latest"`)).map((r) => r[1] as number);
    expect(hist.length).toBe(30);
    expect(latest.length).toBe(30);
    expect(new Set([...hist, ...latest])).toEqual(new Set([15, 16, 17, 18, 19].map((n) => T0 + n * H)));
  });
});

describe('outage of VictoriaMetrics (v2 write path)', () => {
  it('stop during cycles, restart: each sample arrives exactly once', async () => {
    const vm = await startVictoria();
    servers.push(vm);
    const s = createInfluxStore({ api: 'v2', url: vm.url, org: 'oskaveld-energy', bucket: 'heat', token: 't', ...fast } as InfluxStoreOptions);
    stores.push(s);
    const cycles = 16;
    for (let n = 0; n < cycles; n++) {
      if (n === 5) await vm.stop();
      if (n === 11) await vm.restart();
      // VictoriaMetrics has no Flux: only the writes of a cycle.
      for (const series of ['oskaveld-north', 'brennick-yard']) await s.writeForecast(batch(series, n));
      await sleep(15);
    }
    await s.flush();
    expect(s.stats()).toMatchObject({ buffered: 0, dropped: 0 });
    expect(s.stats().retries).toBeGreaterThan(0);
    const got = await pollVictoria(vm.url, '{__name__="radcast_forecast_value"}', (l) => l.reduce((k, x) => k + x.values.length, 0) >= cycles * 2 * 6);
    // One series per (series, lead); each has one sample per cycle, no duplicates.
    expect(got.length).toBe(2 * 6);
    for (const x of got) {
      const lead = Number(x.metric.lead);
      expect(x.timestamps).toEqual(Array.from({ length: cycles }, (_, n) => T0 + n * H + lead * H));
      expect(x.values).toEqual(Array.from({ length: cycles }, (_, n) => n * 100 + lead - 1));
    }
  });
});
