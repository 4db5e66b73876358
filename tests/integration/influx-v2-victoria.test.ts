/**
 * v2 write path end to end: the client's WriteApi (through the adapter) writes to VictoriaMetrics'
 * /api/v2/write; /api/v1/export shows what arrived. VictoriaMetrics names each sample
 * `<measurement>_<field>` and keeps the tags as labels; string fields are not stored (it holds
 * numbers only), which is why health carries state_code beside the state string.
 * VictoriaMetrics only accepts samples from its retention (1 month) up to 2 days ahead, so the
 * times here are relative to now.
 *
 * A second part records the raw HTTP requests of both modes on a local server: paths, query
 * parameters, auth headers, gzip and the mapping of error answers.
 */
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { createServer, type IncomingMessage, type Server } from 'node:http';
import { gunzipSync } from 'node:zlib';
import { pollVictoria, startVictoria, type ExportedSeries, type TestServer } from '../helpers/servers.ts';
import { storeFailure } from '../helpers/store-errors.ts';
import { createInfluxStore, type InfluxStore, type InfluxStoreOptions } from '../../src/store/influx/index.ts';
import type { ForecastBatch } from '../../src/store/types.ts';

const H = 3_600_000;
const T0 = Math.floor(Date.now() / H) * H - 24 * H;
const SERIES = ['oskaveld-north', 'brennick-yard', 'tarrow-hill'];
const open: InfluxStore[] = [];

function v2(url: string, over: Partial<InfluxStoreOptions> = {}): InfluxStore {
  const s = createInfluxStore({ api: 'v2', url, org: 'oskaveld-energy', bucket: 'heat', token: 'vm-ignores-this-token', retryJitter: 0, minRetryDelayMs: 50, closeTimeoutMs: 1_000, ...over } as InfluxStoreOptions);
  open.push(s);
  return s;
}

function batch(series: string, issuedAt: number, horizon: number, base: number): ForecastBatch {
  return {
    series,
    issuedAt,
    stepMs: H,
    points: Array.from({ length: horizon }, (_, i) => ({ t: issuedAt + (i + 1) * H, lead: i + 1, value: base + i * 0.5, bands: { '0.1': base - 10 + i * 0.5, '0.9': base + 10 + i * 0.5 } })),
  };
}

const byKey = (list: ExportedSeries[]) => new Map(list.map((s) => [JSON.stringify(Object.entries(s.metric).sort()), s]));
const key = (metric: Record<string, string>) => JSON.stringify(Object.entries(metric).sort());

afterAll(async () => {
  for (const s of open) await s.close();
});

describe('v2 WriteApi -> VictoriaMetrics', () => {
  let vm: TestServer;
  beforeAll(async () => {
    vm = await startVictoria();
  });
  afterAll(async () => {
    await vm?.close();
  });

  it('forecasts, bands, scores and health arrive with the right names, labels, timestamps and values', async () => {
    const s = v2(vm.url);
    for (const [i, name] of SERIES.entries()) await s.writeForecast(batch(name, T0, 24, 500 + 100 * i));
    await s.writeScores([{ series: 'tarrow-hill', t: T0, lead: 0, mae: 11.5, rmse: 14.25, mase: 0.75, bias: -0.5, coverage: 0.8, n: 168, season: 24 }]);
    await s.writeHealth([{ series: 'tarrow-hill', t: T0, state: 'alert', statistic: 8.5, recentMase: 1.6, baselineMase: 0.75, noveltyShare: 0.2, lastReadingAt: T0 - H }]);
    await s.flush();
    expect(s.stats()).toMatchObject({ written: 3 * 48 + 2, buffered: 0, retries: 0 });

    const all = await pollVictoria(vm.url, '{__name__=~"radcast_.*"}', (l) => l.length >= 3 * 24 * 4 + 3 * 5 + 7 + 7);
    const got = byKey(all);
    for (const [i, name] of SERIES.entries()) {
      for (let lead = 1; lead <= 24; lead++) {
        const t = T0 + lead * H;
        const v = 500 + 100 * i + (lead - 1) * 0.5;
        const hist = (field: string) => got.get(key({ __name__: `radcast_forecast_${field}`, lead: String(lead), series: name }));
        expect(hist('value')).toEqual({ metric: expect.any(Object), values: [v], timestamps: [t] });
        expect(hist('q10')?.values).toEqual([v - 10]);
        expect(hist('q90')?.values).toEqual([v + 10]);
        expect(hist('issued_at')?.values).toEqual([T0]);
      }
      const latest = got.get(key({ __name__: 'radcast_forecast_latest_value', series: name }));
      expect(latest?.timestamps).toEqual(Array.from({ length: 24 }, (_, k) => T0 + (k + 1) * H));
      expect(latest?.values).toEqual(Array.from({ length: 24 }, (_, k) => 500 + 100 * i + k * 0.5));
      expect(got.get(key({ __name__: 'radcast_forecast_latest_lead', series: name }))?.values).toEqual(Array.from({ length: 24 }, (_, k) => k + 1));
    }
    const score = (f: string) => got.get(key({ __name__: `radcast_score_${f}`, lead: '0', series: 'tarrow-hill' }));
    expect([score('mae'), score('rmse'), score('mase'), score('bias'), score('coverage'), score('n'), score('season')].map((x) => x?.values[0])).toEqual([11.5, 14.25, 0.75, -0.5, 0.8, 168, 24]);
    expect(score('mase')?.timestamps).toEqual([T0]);
    const health = (f: string) => got.get(key({ __name__: `radcast_health_${f}`, series: 'tarrow-hill' }))?.values[0];
    expect([health('state_code'), health('statistic'), health('recent_mase'), health('baseline_mase'), health('novelty_share'), health('last_reading_at')]).toEqual([2, 8.5, 1.6, 0.75, 0.2, T0 - H]);
    // No label beyond series and lead: org and bucket are not labels, nothing per run.
    for (const s2 of all) for (const label of Object.keys(s2.metric)) expect(['__name__', 'series', 'lead']).toContain(label);
  });

  it('sends many points in batches of batchSize, gzipped, and all arrive', async () => {
    const s = v2(vm.url, { batchSize: 1_000 });
    const names = Array.from({ length: 60 }, (_, i) => `substation-${String(i).padStart(2, '0')}`);
    for (const [i, name] of names.entries()) await s.writeForecast(batch(name, T0, 24, i));
    await s.flush();
    expect(s.stats()).toMatchObject({ written: 60 * 48, buffered: 0 });
    const got = await pollVictoria(vm.url, '{__name__="radcast_forecast_value",series=~"substation-.*"}', (l) => l.length >= 60 * 24);
    expect(got.length).toBe(60 * 24);
    expect(got.reduce((n, x) => n + x.values.length, 0)).toBe(60 * 24);
  });

  it('ping() follows the server', async () => {
    const s = v2(vm.url);
    expect(await s.ping()).toBe(true);
    await vm.stop();
    expect(await s.ping()).toBe(false);
    await vm.restart();
    expect(await s.ping()).toBe(true);
  });
});

interface Recorded {
  method: string;
  url: string;
  headers: IncomingMessage['headers'];
  body: string;
}

describe('requests on the wire (recording server)', () => {
  let server: Server;
  let url = '';
  const seen: Recorded[] = [];
  let answer: (r: Recorded) => { status: number; headers?: Record<string, string>; body?: string } = () => ({ status: 204 });

  beforeAll(async () => {
    server = createServer((req, res) => {
      const chunks: Buffer[] = [];
      req.on('data', (c: Buffer) => chunks.push(c));
      req.on('end', () => {
        const raw = Buffer.concat(chunks);
        const body = req.headers['content-encoding'] === 'gzip' ? gunzipSync(raw).toString('utf8') : raw.toString('utf8');
        const rec = { method: req.method ?? '', url: req.url ?? '', headers: req.headers, body };
        seen.push(rec);
        const a = answer(rec);
        res.writeHead(a.status, a.headers ?? {});
        res.end(a.body ?? '');
      });
    });
    await new Promise<void>((r) => server.listen(0, '127.0.0.1', r));
    const addr = server.address();
    url = `http://127.0.0.1:${typeof addr === 'object' && addr ? addr.port : 0}`;
  });
  afterAll(async () => {
    await new Promise<void>((r) => server.close(() => r()));
  });

  it('v2: POST /api/v2/write with org, bucket, precision=ms, the token, gzip above the threshold', async () => {
    seen.length = 0;
    const s = v2(url, { token: 'wire-token-123' } as Partial<InfluxStoreOptions>);
    await s.writeForecast(batch('oskaveld-north', T0, 24, 700));
    await s.flush();
    expect(seen.length).toBe(1);
    const r = seen[0]!;
    expect(r.method).toBe('POST');
    const u = new URL(r.url, url);
    expect(u.pathname).toBe('/api/v2/write');
    expect(Object.fromEntries(u.searchParams)).toEqual({ org: 'oskaveld-energy', bucket: 'heat', precision: 'ms' });
    expect(r.headers.authorization).toBe('Token wire-token-123');
    expect(r.headers['content-encoding']).toBe('gzip');
    expect(r.body.split('\n')).toHaveLength(48);
    expect(r.body.split('\n')[0]).toBe(`radcast_forecast,lead=1,series=oskaveld-north issued_at=${T0}i,q10=690,q90=710,value=700 ${T0 + H}`);
  });

  it('v1: POST /write with db, rp, precision=ms and Basic credentials', async () => {
    seen.length = 0;
    const s = createInfluxStore({ api: 'v1', url, database: 'oskaveld', retentionPolicy: 'one_year', user: 'radcast', password: 'pw-on-wire' });
    open.push(s);
    await s.writeHealth([{ series: 'oskaveld-north', t: T0, state: 'ok', statistic: 0.5, recentMase: 0.9, baselineMase: 0.9, noveltyShare: 0, lastReadingAt: T0 }]);
    await s.flush();
    const u = new URL(seen[0]!.url, url);
    expect(u.pathname).toBe('/write');
    expect(Object.fromEntries(u.searchParams)).toEqual({ db: 'oskaveld', rp: 'one_year', precision: 'ms' });
    expect(seen[0]!.headers.authorization).toBe('Basic ' + Buffer.from('radcast:pw-on-wire').toString('base64'));
    expect(seen[0]!.headers['content-encoding']).toBeUndefined();
  });

  it('maps answers: 503 + Retry-After -> STORE_BUSY (retry after it), 401 -> STORE_AUTH, 400 partial write -> refused points counted', async () => {
    const s = v2(url, { maxRetryDelayMs: 60_000 });
    answer = () => ({ status: 503, headers: { 'retry-after': '7' }, body: 'restarting' });
    await s.writeScores([{ series: 'oskaveld-north', t: T0, lead: 1, mae: 1, rmse: 1, mase: 1, bias: 0, coverage: 1, n: 1, season: 24 }]);
    const busy = await storeFailure(s.flush());
    expect([busy.code, busy.canRetry(), busy.retryAfterMs(), busy.status]).toEqual(['STORE_BUSY', true, 7_000, 503]);
    answer = () => ({ status: 401, headers: { 'content-type': 'application/json' }, body: '{"code":"unauthorized","message":"unauthorized access"}' });
    const auth = await storeFailure(s.flush());
    expect([auth.code, auth.canRetry()]).toEqual(['STORE_AUTH', false]);
    expect(s.stats()).toMatchObject({ buffered: 1, failing: true });
    answer = () => ({
      status: 400,
      headers: { 'content-type': 'application/json' },
      body: '{"code":"invalid","message":"partial write error (1 written): field type conflict dropped=1"}',
    });
    await s.flush();
    expect(s.stats()).toMatchObject({ buffered: 0, rejected: 1, failing: false });
    answer = () => ({ status: 204 });
  });
});
