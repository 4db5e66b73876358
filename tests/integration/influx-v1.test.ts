/**
 * v1 mode against a real InfluxDB 1.x (influxd 1.6 from Debian): readings in, forecasts, bands,
 * scores and health back through InfluxQL; rewrites overwrite; mean per window computed by the
 * server; chunked long reads; typed errors; credentials.
 */
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { inspect } from 'node:util';
import { startInflux1, type Influx1Server } from '../helpers/servers.ts';
import { captureLogger } from '../helpers/capture-logger.ts';
import { storeFailure } from '../helpers/store-errors.ts';
import { createInfluxStore, type InfluxStore, type InfluxV1Options } from '../../src/store/influx/index.ts';
import type { ForecastBatch } from '../../src/store/types.ts';

const H = 3_600_000;
const DB = 'oskaveld';
// Fixed instants: the default retention policy keeps data forever.
const T0 = Date.UTC(2026, 0, 12, 6);

let influx: Influx1Server;
const open: InfluxStore[] = [];

function store(over: Partial<InfluxV1Options> = {}): InfluxStore {
  const s = createInfluxStore({ api: 'v1', url: influx.url, database: DB, retryJitter: 0, minRetryDelayMs: 50, closeTimeoutMs: 2_000, ...over });
  open.push(s);
  return s;
}

async function rows(q: string): Promise<unknown[][]> {
  const res = await influx.query(q, DB);
  return res.results[0]?.series?.flatMap((s) => s.values) ?? [];
}

function batch(series: string, issuedAt: number, horizon: number, valueAt: (lead: number) => number): ForecastBatch {
  return {
    series,
    issuedAt,
    stepMs: H,
    points: Array.from({ length: horizon }, (_, i) => {
      const lead = i + 1;
      const value = valueAt(lead);
      return { t: issuedAt + lead * H, lead, value, bands: { '0.1': value - 20 - lead, '0.9': value + 20 + lead } };
    }),
  };
}

beforeAll(async () => {
  influx = await startInflux1();
  await influx.query(`CREATE DATABASE ${DB}`);
});

afterAll(async () => {
  for (const s of open) await s.close();
  await influx?.close();
});

describe('reading', () => {
  it('reads the raw readings of one tagged series in [from, to)', async () => {
    const lines: string[] = [];
    for (let k = 0; k < 48; k++) {
      lines.push(`heat,substation=oskaveld-north load_kw=${800 + k} ${T0 - 48 * H + k * H}`);
      lines.push(`heat,substation=brennick-yard load_kw=${300 + k} ${T0 - 48 * H + k * H}`);
    }
    await influx.writeLines(DB, lines);
    const s = store();
    const got = await s.readReadings({ name: 'oskaveld-north', measurement: 'heat', field: 'load_kw', tags: { substation: 'oskaveld-north' } }, T0 - 24 * H, T0);
    expect(got).toEqual(Array.from({ length: 24 }, (_, k) => ({ t: T0 - 24 * H + k * H, v: 824 + k })));
  });

  it('lets the server compute the mean per window (GROUP BY time), buckets labelled by their start', async () => {
    // 10-second readings over two hours, bucketed into 15 minutes.
    const start = T0 + 30 * 86_400_000;
    const values: number[] = [];
    const lines: string[] = [];
    for (let k = 0; k < 720; k++) {
      const v = 40 + 10 * Math.sin(k / 50) + (k % 7) * 0.25;
      values.push(v);
      lines.push(`outdoor,sensor=oskaveld-outdoor-temp celsius=${v} ${start + k * 10_000}`);
    }
    await influx.writeLines(DB, lines);
    const s = store();
    const got = await s.readReadings(
      { name: 'oskaveld-outdoor-temp', measurement: 'outdoor', field: 'celsius', tags: { sensor: 'oskaveld-outdoor-temp' }, aggregateMs: 900_000 },
      start,
      start + 2 * H,
    );
    expect(got.map((r) => r.t)).toEqual(Array.from({ length: 8 }, (_, b) => start + b * 900_000));
    for (let b = 0; b < 8; b++) {
      // Arithmetic mean of the 90 readings in bucket b.
      let sum = 0;
      for (let k = b * 90; k < (b + 1) * 90; k++) sum += values[k]!;
      expect(got[b]!.v).toBeCloseTo(sum / 90, 9);
    }
  });

  it('reads a long raw window completely (chunked answers)', async () => {
    const start = T0 + 60 * 86_400_000;
    const n = 25_000;
    const lines = Array.from({ length: n }, (_, k) => `fine,site=tarrow-hill v=${k} ${start + k * 10_000}`);
    for (let i = 0; i < n; i += 5_000) await influx.writeLines(DB, lines.slice(i, i + 5_000));
    const got = await store().readReadings({ name: 'tarrow-hill', measurement: 'fine', field: 'v' }, start, start + n * 10_000);
    expect(got.length).toBe(n);
    expect(got[0]).toEqual({ t: start, v: 0 });
    expect(got[n - 1]).toEqual({ t: start + (n - 1) * 10_000, v: n - 1 });
  });

  it('answers "no such series" with no readings, whatever part of the selector matches nothing', async () => {
    const s = store();
    const from = T0 - 48 * H;
    expect(await s.readReadings({ name: 'nope' }, from, T0)).toEqual([]);
    expect(await s.readReadings({ name: 'x', measurement: 'heat', field: 'no_field' }, from, T0)).toEqual([]);
    expect(await s.readReadings({ name: 'x', measurement: 'heat', field: 'load_kw', tags: { substation: 'no-such-place' } }, from, T0)).toEqual([]);
    expect(await s.readReadings({ name: 'x', measurement: 'heat', field: 'load_kw', tags: { no_tag: 'a' } }, from, T0)).toEqual([]);
  });

  it('gives non-numeric values as NaN, and refuses a mean of text with a hint (not retryable)', async () => {
    await influx.writeLines(DB, [`notes,site=tarrow-hill text="valve stuck" ${T0}`, `notes,site=tarrow-hill text="ok" ${T0 + H}`]);
    const s = store();
    const raw = await s.readReadings({ name: 'tarrow-hill', measurement: 'notes', field: 'text' }, T0, T0 + 2 * H);
    expect(raw.map((r) => [r.t, Number.isNaN(r.v)])).toEqual([
      [T0, true],
      [T0 + H, true],
    ]);
    const err = await storeFailure(s.readReadings({ name: 'tarrow-hill', measurement: 'notes', field: 'text', aggregateMs: H }, T0, T0 + 2 * H));
    expect([err.code, err.canRetry(), err.series]).toEqual(['QUERY_REJECTED', false, 'tarrow-hill']);
  });

  it('a missing database is a retryable STORE_DATABASE_MISSING with a hint', async () => {
    const err = await storeFailure(store({ database: 'not_there' }).readReadings({ name: 'oskaveld-north' }, T0 - H, T0));
    expect([err.code, err.canRetry()]).toEqual(['STORE_DATABASE_MISSING', true]);
    expect(err.hint).toMatch(/CREATE DATABASE/);
  });
});

describe('writing forecasts, bands, scores and health', () => {
  it('round trip through InfluxQL; the same forecast written twice more leaves no duplicates', async () => {
    const s = store();
    const b = batch('oskaveld-north', T0, 24, (lead) => 800 + lead);
    await s.writeForecast(b);
    await s.writeScores([{ series: 'oskaveld-north', t: T0, lead: 0, mae: 14.5, rmse: 19.25, mase: 0.82, bias: -2.5, coverage: 0.79, n: 168, season: 24 }]);
    await s.writeHealth([{ series: 'oskaveld-north', t: T0, state: 'watch', statistic: 4.5, recentMase: 1.1, baselineMase: 0.8, noveltyShare: 0.04, lastReadingAt: T0 }]);
    await s.flush();

    const hist = await rows(`SELECT "value", "q10", "q90", "issued_at" FROM "radcast_forecast" WHERE "series" = 'oskaveld-north' AND "lead" = '6'`);
    expect(hist).toEqual([[T0 + 6 * H, 806, 780, 832, T0]]);
    const latest = await rows(`SELECT "value", "q10", "q90", "lead" FROM "radcast_forecast_latest" WHERE "series" = 'oskaveld-north'`);
    expect(latest.length).toBe(24);
    expect(latest[23]).toEqual([T0 + 24 * H, 824, 780, 868, 24]);
    expect(await rows(`SELECT "mae", "rmse", "mase", "bias", "coverage", "n", "season" FROM "radcast_score" WHERE "series" = 'oskaveld-north' AND "lead" = '0'`)).toEqual([
      [T0, 14.5, 19.25, 0.82, -2.5, 0.79, 168, 24],
    ]);
    expect(await rows(`SELECT "state", "state_code", "statistic", "last_reading_at" FROM "radcast_health" WHERE "series" = 'oskaveld-north'`)).toEqual([
      [T0, 'watch', 1, 4.5, T0],
    ]);

    // Rewrite twice (as a re-run of the same cycle would), the second time with corrected values.
    await s.writeForecast(b);
    await s.writeForecast(batch('oskaveld-north', T0, 24, (lead) => 900 + lead));
    await s.flush();
    const count = async (m: string) => (await rows(`SELECT count("value") FROM "${m}" WHERE "series" = 'oskaveld-north'`))[0]?.[1];
    expect(await count('radcast_forecast')).toBe(24);
    expect(await count('radcast_forecast_latest')).toBe(24);
    expect((await rows(`SELECT "value" FROM "radcast_forecast" WHERE "series" = 'oskaveld-north' AND "lead" = '6'`))[0]).toEqual([T0 + 6 * H, 906]);
  });

  it('a newer issue replaces the latest forecast at shared target times and adds a lead to the history', async () => {
    const s = store();
    await s.writeForecast(batch('brennick-yard', T0, 24, () => 300));
    await s.writeForecast(batch('brennick-yard', T0 + H, 24, () => 310));
    await s.flush();
    const latest = await rows(`SELECT "value", "issued_at", "lead" FROM "radcast_forecast_latest" WHERE "series" = 'brennick-yard'`);
    // Target times T0+1h .. T0+25h; from T0+2h on the newer issue wins.
    expect(latest.length).toBe(25);
    expect(latest[0]).toEqual([T0 + H, 300, T0, 1]);
    expect(latest[1]).toEqual([T0 + 2 * H, 310, T0 + H, 1]);
    expect(latest[24]).toEqual([T0 + 25 * H, 310, T0 + H, 24]);
    // The forecast made 24 steps ahead, for every target time that has one.
    const ahead24 = await rows(`SELECT "value", "issued_at" FROM "radcast_forecast" WHERE "series" = 'brennick-yard' AND "lead" = '24'`);
    expect(ahead24).toEqual([
      [T0 + 24 * H, 300, T0],
      [T0 + 25 * H, 310, T0 + H],
    ]);
    expect((await rows(`SELECT count("value") FROM "radcast_forecast" WHERE "series" = 'brennick-yard'`))[0]?.[1]).toBe(48);
  });

  it('tags stay bounded: only series and lead', async () => {
    const res = await influx.query('SHOW TAG KEYS FROM "radcast_forecast", "radcast_forecast_latest", "radcast_score", "radcast_health"', DB);
    const keys = Object.fromEntries((res.results[0]?.series ?? []).map((s) => [s.name, s.values.map((v) => v[0]).sort()]));
    expect(keys).toEqual({
      radcast_forecast: ['lead', 'series'],
      radcast_forecast_latest: ['series'],
      radcast_score: ['lead', 'series'],
      radcast_health: ['series'],
    });
  });

  it('writes into the configured retention policy and reads from it', async () => {
    await influx.query(`CREATE RETENTION POLICY "two_weeks" ON "${DB}" DURATION 14d REPLICATION 1`);
    const now = Math.floor(Date.now() / H) * H;
    const s = store({ retentionPolicy: 'two_weeks' });
    await s.writeForecast(batch('tarrow-hill', now, 3, () => 120));
    await s.flush();
    expect(await rows(`SELECT "value" FROM "two_weeks"."radcast_forecast_latest" WHERE "series" = 'tarrow-hill'`)).toHaveLength(3);
    expect(await rows(`SELECT "value" FROM "autogen"."radcast_forecast_latest" WHERE "series" = 'tarrow-hill'`)).toHaveLength(0);
    await influx.writeLines(DB, [`heat,substation=tarrow-hill load_kw=55 ${now - H}`], 'two_weeks');
    expect(await s.readReadings({ name: 'tarrow-hill', measurement: 'heat', field: 'load_kw' }, now - 2 * H, now)).toEqual([{ t: now - H, v: 55 }]);
  });

  it('points the server refuses (field type conflict) are counted and logged; the rest of the batch arrives', async () => {
    // "n" already exists as a float in this shard (shards cover a week here), radcast writes it as an integer.
    const t = T0 + 200 * 86_400_000;
    await influx.writeLines(DB, [`radcast_score,lead=0,series=conflict n=1.5 ${t - H}`]);
    const { logger, records } = captureLogger();
    const s = store({ logger });
    await s.writeScores([{ series: 'conflict', t, lead: 0, mae: 1, rmse: 1, mase: 1, bias: 0, coverage: 1, n: 24, season: 24 }]);
    await s.writeHealth([{ series: 'conflict', t, state: 'ok', statistic: 0, recentMase: 1, baselineMase: 1, noveltyShare: 0, lastReadingAt: null }]);
    await s.flush();
    expect(s.stats()).toMatchObject({ rejected: 1, written: 1, buffered: 0, retries: 0 });
    expect(await rows(`SELECT "state" FROM "radcast_health" WHERE "series" = 'conflict'`)).toEqual([[t, 'ok']]);
    const err = records.find((r) => r.level === 'error');
    expect(err?.msg).toBe('store refused points');
    expect((err?.obj.err as { code: string }).code).toBe('WRITE_REJECTED');
  });

  it('refuses measurement names line protocol would turn into comments', () => {
    expect(() => store({ measurements: { forecast: '#fc' } })).toThrow(expect.objectContaining({ code: 'OPTION_INVALID' }));
  });
});

describe('credentials (auth-enabled influxd)', () => {
  const admin = { username: 'radcast', password: 'Oskaveld-s3cret-pw' };
  let secured: Influx1Server;

  beforeAll(async () => {
    secured = await startInflux1({ admin });
    await secured.query(`CREATE DATABASE ${DB}`);
  });
  afterAll(async () => {
    await secured?.close();
  });

  it('reads and writes with user/password; a wrong password is STORE_AUTH (not retryable), points stay buffered, /readyz false, secret never shown', async () => {
    const ok = createInfluxStore({ api: 'v1', url: secured.url, database: DB, user: admin.username, password: admin.password });
    open.push(ok);
    await ok.writeForecast(batch('oskaveld-north', T0, 2, () => 1));
    await ok.flush();
    expect((await secured.query(`SELECT count("value") FROM "radcast_forecast"`, DB)).results[0]?.series?.[0]?.values[0]?.[1]).toBe(2);
    expect(await ok.ping()).toBe(true);

    const wrong = 'not-the-password-' + admin.password.split('').reverse().join('');
    const { logger, records } = captureLogger();
    const bad = createInfluxStore({ api: 'v1', url: secured.url, database: DB, user: admin.username, password: wrong, logger, minRetryDelayMs: 20, retryJitter: 0, closeTimeoutMs: 100 });
    open.push(bad);
    const readErr = await storeFailure(bad.readReadings({ name: 'oskaveld-north' }, T0 - H, T0));
    expect([readErr.code, readErr.canRetry()]).toEqual(['STORE_AUTH', false]);
    await bad.writeForecast(batch('oskaveld-north', T0, 2, () => 1));
    const writeErr = await storeFailure(bad.flush());
    expect(writeErr.code).toBe('STORE_AUTH');
    expect(bad.stats()).toMatchObject({ buffered: 4, failing: true, lastError: { code: 'STORE_AUTH' } });
    expect(await bad.ping()).toBe(false);
    await bad.close();

    const shown = [JSON.stringify(records), readErr.message, readErr.hint, JSON.stringify(readErr), writeErr.message, inspect(bad, { depth: 5 }), inspect(ok, { depth: 5 })].join('\n');
    for (const secret of [admin.password, wrong, Buffer.from(`${admin.username}:${wrong}`).toString('base64')]) expect(shown).not.toContain(secret);
    expect(records.some((r) => r.level === 'warn' && r.msg === 'store write failed; points kept for retry')).toBe(true);
  });

  it('sends a token as "Authorization: Token …" (InfluxDB 2.x v1 compatibility); influxd 1.6 refuses it as STORE_AUTH', async () => {
    const s = createInfluxStore({ api: 'v1', url: secured.url, database: DB, token: 'tok-for-2x-compat' });
    open.push(s);
    const err = await storeFailure(s.readReadings({ name: 'x' }, T0 - H, T0));
    expect(err.code).toBe('STORE_AUTH');
    expect(err.message).not.toContain('tok-for-2x-compat');
  });
});
