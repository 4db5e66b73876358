import { afterEach, describe, expect, it } from 'vitest';
import { HttpServer, type HttpSource, type ReadyCheck } from '../../../src/daemon/http.ts';
import { DaemonMetrics } from '../../../src/daemon/metrics.ts';
import { escapeHtml, renderPage } from '../../../src/daemon/page.ts';
import { blankStatus, type SeriesStatus } from '../../../src/daemon/status.ts';
import { emptyTimings } from '../../../src/daemon/timings.ts';
import { captureLogger } from './helpers.ts';

const HOSTILE = '<img src=x onerror=alert(1)>"\'&';

function statuses(): SeriesStatus[] {
  const a = blankStatus({ series: 'oskaveld-north', timeZone: 'Europe/Berlin', stepMs: 3600_000, schedule: '5 * * * *' });
  a.driftState = 'watch';
  a.recentMase = 0.81;
  const b = blankStatus({ series: HOSTILE, timeZone: 'Europe/Berlin', stepMs: 3600_000, schedule: '5 * * * *' });
  b.lastError = { code: 'TOO_LITTLE_HISTORY', message: `need 400 steps <script>x</script>`, retryable: false };
  return [a, b];
}

let server: HttpServer | null = null;
afterEach(async () => {
  await server?.stop();
  server = null;
});

async function startWith(source: Partial<HttpSource>, metrics = new DaemonMetrics({ defaultMetrics: false })) {
  const { logger } = captureLogger();
  const full: HttpSource = {
    statuses: () => statuses(),
    readiness: async () => ({ store: { ok: true }, config: { ok: true } }),
    chartData: async () => null,
    ...source,
  };
  server = new HttpServer({ host: '127.0.0.1', port: 0, source: full, metrics, logger, title: 'radcast test' });
  const addr = await server.start();
  return { base: `http://127.0.0.1:${addr.port}`, metrics, addr };
}

describe('HTTP endpoints', () => {
  it('binds to the loopback address it was given', async () => {
    const { addr } = await startWith({});
    expect(addr.address).toBe('127.0.0.1');
  });

  it('/healthz answers 200 while alive', async () => {
    const { base } = await startWith({});
    const r = await fetch(`${base}/healthz`);
    expect(r.status).toBe(200);
    expect(await r.json()).toEqual({ status: 'alive' });
  });

  it('/readyz is 200 only when every check passes, and lists the checks', async () => {
    let checks: Record<string, ReadyCheck> = { store: { ok: true }, config: { ok: true } };
    const { base } = await startWith({ readiness: async () => checks });
    expect((await fetch(`${base}/readyz`)).status).toBe(200);
    checks = { store: { ok: false, detail: 'ping failed' }, config: { ok: true } };
    const r = await fetch(`${base}/readyz`);
    expect(r.status).toBe(503);
    expect(await r.json()).toEqual({ ready: false, checks });
  });

  it('/metrics serves the Prometheus text format with the daemon metrics', async () => {
    const metrics = new DaemonMetrics({ defaultMetrics: false });
    metrics.recordCycle({ series: 'oskaveld-north', ok: true, finishedAtMs: 1_700_000_000_000, timings: { ...emptyTimings(), fit: 12 }, totalMs: 20, fitWorkerMs: 11 });
    metrics.recordCycle({ series: 'tarrow-hill', ok: false, errorCode: 'TOO_LITTLE_HISTORY', finishedAtMs: 1_700_000_000_000, timings: emptyTimings(), totalMs: 3 });
    metrics.recordDrift('oskaveld-north', 'alert', 12.5, 0.1, 1.4);
    metrics.writeRetriesTotal.inc({ store: 'embedded', kind: 'forecast' });
    metrics.bindPoolQueue(() => 3);
    const { base } = await startWith({}, metrics);
    const r = await fetch(`${base}/metrics`);
    expect(r.status).toBe(200);
    expect(r.headers.get('content-type')).toMatch(/^text\/plain; version=0\.0\.4/);
    const text = await r.text();
    expect(text).toContain('radcast_series_last_success_timestamp_seconds{series="oskaveld-north"} 1700000000');
    expect(text).toContain('radcast_series_failures_total{series="tarrow-hill",code="TOO_LITTLE_HISTORY"} 1');
    expect(text).toContain('radcast_drift_state{series="oskaveld-north"} 2');
    expect(text).toContain('radcast_store_write_retries_total{store="embedded",kind="forecast"} 1');
    expect(text).toMatch(/radcast_fit_duration_seconds_count 1/);
    expect(text).toContain('radcast_fit_pool_queue 3');
    expect(text).toMatch(/radcast_cycle_duration_seconds_count\{outcome="failed"\} 1/);
    expect(text).toMatch(/radcast_cycle_stage_duration_seconds_sum\{stage="fit"\} 0\.012/);
  });

  it('/metrics follows the Prometheus text exposition format 0.0.4, also for a series name with quotes, backslashes and a newline', async () => {
    // Grammar from the Prometheus documentation, "Exposition formats" (text format 0.0.4):
    // metric and label names, label values with \\, \" and \n escaped, a float value as Go's
    // strconv.ParseFloat reads it (NaN and Inf in any case: prom-client prints an empty gauge as "Nan").
    const metrics = new DaemonMetrics();
    const nasty = 'sub "7"\\north\nline';
    metrics.recordCycle({ series: nasty, ok: false, errorCode: 'INPUT_STALE', finishedAtMs: 1_700_000_000_000, timings: emptyTimings(), totalMs: 1 });
    metrics.recordDrift(nasty, 'stale', 0, 0, Number.NaN);
    const { base } = await startWith({}, metrics);
    const text = await (await fetch(`${base}/metrics`)).text();
    const NAME = '[a-zA-Z_:][a-zA-Z0-9_:]*';
    const LABEL = `[a-zA-Z_][a-zA-Z0-9_]*="(?:[^"\\\\\\n]|\\\\[\\\\"n])*"`;
    const sample = new RegExp(`^${NAME}(\\{${LABEL}(,${LABEL})*,?\\})? (-?[0-9.]+(e[-+]?[0-9]+)?|[Nn][Aa][Nn]|[+-][Ii]nf)( -?[0-9]+)?$`);
    const typed = new Set<string>();
    for (const line of text.split('\n')) {
      if (line === '') continue;
      if (line.startsWith('# HELP ')) continue;
      const t = /^# TYPE (\S+) (counter|gauge|histogram|summary|untyped)$/.exec(line);
      if (t) {
        typed.add(t[1]);
        continue;
      }
      expect(line, line).toMatch(sample);
      const name = line.split(/[{ ]/)[0].replace(/_(bucket|sum|count)$/, '');
      expect(typed.has(name) || typed.has(line.split(/[{ ]/)[0]), `no # TYPE before ${line}`).toBe(true);
    }
    expect(text).toContain('radcast_series_failures_total{series="sub \\"7\\"\\\\north\\nline",code="INPUT_STALE"} 1');
    expect(text).toContain('radcast_process_cpu_seconds_total'); // default process metrics, prefixed
  });

  it('/ escapes series names and error text from the store and config', async () => {
    const { base } = await startWith({});
    const r = await fetch(`${base}/`);
    expect(r.status).toBe(200);
    const html = await r.text();
    expect(html).not.toContain('<img src=x');
    expect(html).not.toContain('<script>x</script>');
    expect(html).toContain(escapeHtml(HOSTILE));
    expect(r.headers.get('content-security-policy')).toContain("script-src 'self'");
    // No inline script at all: every <script> has a src.
    expect(html.match(/<script(?![^>]*\bsrc=)[^>]*>/g)).toBeNull();
  });

  it('/api/series/NAME returns chart data, 404 for unknown series', async () => {
    const { base } = await startWith({
      chartData: async (name) =>
        name === HOSTILE
          ? { series: name, timeZone: 'UTC', stepMs: 3600_000, actuals: [[0, 1]], forecast: null, driftState: null }
          : null,
    });
    const ok = await fetch(`${base}/api/series/${encodeURIComponent(HOSTILE)}`);
    expect(ok.status).toBe(200);
    const text = await ok.text();
    expect(text).not.toContain('<'); // JSON escapes "<" so it is inert anywhere
    expect(JSON.parse(text).series).toBe(HOSTILE);
    expect((await fetch(`${base}/api/series/nope`)).status).toBe(404);
  });

  it('is read-only (405 for POST) and 404 for unknown paths; serves chart.js', async () => {
    const { base } = await startWith({});
    expect((await fetch(`${base}/`, { method: 'POST', body: 'x' })).status).toBe(405);
    expect((await fetch(`${base}/nothing-here`)).status).toBe(404);
    const js = await fetch(`${base}/assets/chart.umd.min.js`);
    expect(js.status).toBe(200);
    expect(await js.text()).toContain('Chart.js v4');
  });
});

describe('renderPage', () => {
  it('pages long series lists and filters by name', () => {
    const many = Array.from({ length: 60 }, (_, i) => blankStatus({ series: `s-${String(i).padStart(2, '0')}`, timeZone: 'UTC', stepMs: 1, schedule: '* * * * *' }));
    const p1 = renderPage(many, { title: 't', nowMs: 0, page: 1 });
    expect(p1.match(/<section class="chart"/g)).toHaveLength(25);
    expect(p1).toContain('page 1 of 3');
    const p3 = renderPage(many, { title: 't', nowMs: 0, page: 3 });
    expect(p3.match(/<section class="chart"/g)).toHaveLength(10);
    const f = renderPage(many, { title: 't', nowMs: 0, page: 1, filter: 's-1' });
    expect(f.match(/<section class="chart"/g)).toHaveLength(10);
  });
});
