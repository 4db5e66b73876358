/**
 * The status page in headless Chromium: charts are actually drawn (canvas pixels, chart.js
 * datasets), and markup in series names and error text stays text (no injected element runs).
 */
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import type { BrowserContext } from 'playwright-core';
import { HttpServer } from '../../src/daemon/http.ts';
import { DaemonMetrics } from '../../src/daemon/metrics.ts';
import { idFor, type ChartData } from '../../src/daemon/page.ts';
import { blankStatus, type SeriesStatus } from '../../src/daemon/status.ts';
import { captureLogger } from '../unit/daemon/helpers.ts';
import { launchBrowser } from './browser.ts';
import { Daemon } from '../../src/daemon/daemon.ts';
import { ManualClock } from '../../src/daemon/clock.ts';
import { clockCronDriver } from '../../src/daemon/cron-driver.ts';
import { loadConfigFile } from '../../src/config/load.ts';
import { DEMO_END_MS, demoFixture } from './demo-fixture.ts';

const HOSTILE = '<img src=x onerror="window.__pwned=1">"quoted\'&amp;';
const STEP = 3600_000;
const T0 = Date.UTC(2026, 10, 2, 0, 0, 0);

function chartFor(series: string, withForecast: boolean): ChartData {
  const actuals: Array<[number, number | null]> = [];
  for (let i = 0; i < 72; i++) actuals.push([T0 + i * STEP, i === 30 ? null : 400 + 120 * Math.sin((2 * Math.PI * i) / 24)]);
  const origin = T0 + 71 * STEP;
  return {
    series,
    timeZone: 'Europe/Berlin',
    stepMs: STEP,
    actuals,
    forecast: withForecast
      ? {
          issuedAt: origin,
          lowerKey: '0.1',
          upperKey: '0.9',
          points: Array.from({ length: 24 }, (_, h) => {
            const v = 400 + 120 * Math.sin((2 * Math.PI * (72 + h)) / 24);
            return { t: origin + (h + 1) * STEP, lead: h + 1, value: v, lower: v - 30 - h, upper: v + 30 + h };
          }),
        }
      : null,
    driftState: 'ok',
  };
}

let server: HttpServer;
let base = '';
let browser: { context: BrowserContext; close: () => Promise<void> };

beforeAll(async () => {
  const statuses: SeriesStatus[] = ['oskaveld-north', HOSTILE, 'tarrow-hill'].map((series) => {
    const s = blankStatus({ series, timeZone: 'Europe/Berlin', stepMs: STEP, schedule: '5 * * * *' });
    s.driftState = series === HOSTILE ? 'alert' : 'ok';
    return s;
  });
  statuses[1].lastError = { code: 'TOO_LITTLE_HISTORY', message: '<b onclick=x>bold</b>', retryable: false };
  const { logger } = captureLogger();
  server = new HttpServer({
    host: '127.0.0.1',
    port: 0,
    metrics: new DaemonMetrics({ defaultMetrics: false }),
    logger,
    source: {
      statuses: () => statuses,
      readiness: async () => ({ store: { ok: true } }),
      chartData: async (name) => (statuses.some((s) => s.series === name) ? chartFor(name, name !== 'tarrow-hill') : null),
    },
  });
  const addr = await server.start();
  base = `http://127.0.0.1:${addr.port}`;
  browser = await launchBrowser();
});

afterAll(async () => {
  await browser?.close();
  await server?.stop();
});

describe('status page in Chromium', () => {
  it('draws a chart per series with actuals, forecast and band, and keeps markup inert', async () => {
    const page = await browser.context.newPage();
    const consoleErrors: string[] = [];
    page.on('console', (m) => { if (m.type() === 'error') consoleErrors.push(m.text()); });
    page.on('pageerror', (e) => consoleErrors.push(String(e)));
    let dialog = false;
    page.on('dialog', async (d) => { dialog = true; await d.dismiss(); });
    await page.goto(`${base}/`);
    await page.waitForFunction(() => [...document.querySelectorAll('section.chart')].every((s) => s.hasAttribute('data-drawn')), null, { timeout: 20_000 });

    const result = await page.evaluate(() => {
      const out: Array<{ series: string | null; drawn: string | null; datasets: number; points: number; inked: number }> = [];
      for (const s of document.querySelectorAll('section.chart')) {
        const canvas = s.querySelector('canvas')!;
        const chart = (window as unknown as { Chart: { getChart(c: HTMLCanvasElement): { data: { datasets: Array<{ data: unknown[] }> } } | undefined } }).Chart.getChart(canvas);
        const ctx = canvas.getContext('2d')!;
        const img = ctx.getImageData(0, 0, canvas.width, canvas.height).data;
        let inked = 0;
        for (let i = 3; i < img.length; i += 4) if (img[i] > 0) inked++;
        out.push({
          series: s.getAttribute('data-series'),
          drawn: s.getAttribute('data-drawn'),
          datasets: chart?.data.datasets.length ?? 0,
          points: chart?.data.datasets.reduce((n, d) => n + d.data.length, 0) ?? 0,
          inked,
        });
      }
      return { out, pwned: (window as unknown as { __pwned?: number }).__pwned ?? 0, imgs: document.querySelectorAll('img').length, bolds: document.querySelectorAll('b').length };
    });

    expect(result.out.map((r) => r.series)).toEqual(['oskaveld-north', HOSTILE, 'tarrow-hill']);
    // actual + band lower + band upper + forecast = 4 datasets, 72 + 3 * 24 points.
    expect(result.out[0]).toMatchObject({ drawn: String(72 + 72), datasets: 4, points: 144 });
    expect(result.out[1]).toMatchObject({ datasets: 4, points: 144 });
    // A series without a forecast still charts its actuals.
    expect(result.out[2]).toMatchObject({ datasets: 1, points: 72 });
    for (const r of result.out) expect(r.inked).toBeGreaterThan(1000); // the canvas is not blank
    expect(result.pwned).toBe(0);
    expect(result.imgs).toBe(0);
    expect(result.bolds).toBe(0);
    expect(dialog).toBe(false);
    // The hostile name is shown as text, exactly.
    const h2 = await page.locator(`#chart-${idFor(HOSTILE)} h2`).innerText();
    expect(h2.startsWith(HOSTILE)).toBe(true);
    expect(consoleErrors).toEqual([]);
    await page.close();
  });
});

describe('status page of a real daemon (demo config) in Chromium', () => {
  it('charts the actuals, the latest forecast and its band that the daemon wrote', async () => {
    const fx = demoFixture({ series: ['oskaveld-outdoor-temp', 'tarrow-hill'] });
    const loaded = loadConfigFile(fx.config);
    if (!loaded.ok) throw new Error('demo config invalid');
    const clock = new ManualClock(DEMO_END_MS + 5 * 60_000);
    const { logger } = captureLogger('warn');
    const daemon = new Daemon({ loaded: loaded.value, logger, clock, cronDriver: clockCronDriver(clock), workers: 0, httpPort: 0, watchConfig: false });
    try {
      await daemon.start();
      await daemon.flush(); // the first run: two series forecast, two without readings fail
      const base2 = `http://127.0.0.1:${daemon.httpAddress!.port}`;
      const page = await browser.context.newPage();
      const errors: string[] = [];
      page.on('pageerror', (e) => errors.push(String(e)));
      await page.goto(`${base2}/`);
      await page.waitForFunction(() => [...document.querySelectorAll('section.chart')].every((s) => s.hasAttribute('data-drawn')), null, { timeout: 20_000 });
      const drawn = await page.evaluate(() =>
        Object.fromEntries(
          [...document.querySelectorAll('section.chart')].map((s) => {
            const chart = (window as unknown as { Chart: { getChart(c: HTMLCanvasElement): { data: { datasets: Array<{ label: string; data: Array<{ y: number | null }> }> } } | undefined } }).Chart.getChart(s.querySelector('canvas')!);
            return [s.getAttribute('data-series'), chart ? chart.data.datasets.map((d) => [d.label, d.data.filter((p) => p.y !== null).length]) : null];
          }),
        ),
      );
      // tarrow-hill: 72 hourly actuals before the origin, a 24-step forecast with its 10-90 % band.
      expect(drawn['tarrow-hill']).toEqual([['actual', 72], ['band 0.1–0.9 (lower)', 24], ['band 0.1–0.9', 24], ['forecast', 24]]);
      // A series without readings has a chart without data, and the table shows its error code.
      expect(drawn['oskaveld-north']).toEqual([['actual', 0]]);
      expect(await page.locator('table.series').innerText()).toContain('INPUT_STALE');
      expect(errors).toEqual([]);
      await page.close();
    } finally {
      await daemon.stop();
      fx.cleanup();
    }
  });
});
