/**
 * The backtest report in a real browser: Debian's chromium, headless, through playwright-core.
 * Checks that every chart is drawn (non-blank canvas pixels), that the page needs no network,
 * and that text from data and config cannot inject markup or script.
 */
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { mkdtempSync, rmSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import path from 'node:path';
import { chromium, type BrowserContext } from 'playwright-core';
import { backtest, type BacktestResult } from '../../src/evaluate/backtest.ts';
import { renderBacktestReport } from '../../src/evaluate/report.ts';
import { hourlySettings, syntheticHourly } from '../unit/forecast/fixtures.ts';

const HOSTILE = '<img src=x onerror="window.__pwned=1"></script><script>window.__pwned=2</script>&amp;';

let dir: string;
let context: BrowserContext;
let result: BacktestResult;

beforeAll(async () => {
  dir = mkdtempSync(path.join(tmpdir(), 'radcast-report-'));
  const settings = hourlySettings({ series: HOSTILE, windowSteps: 24 * 14, fit: { nCentres: 8, restarts: 1 } });
  result = await backtest(syntheticHourly(24 * 30, 4, 1), {}, settings, { spanSteps: 24 * 5, everySteps: 24, workers: 0 });
  context = await chromium.launchPersistentContext(path.join(dir, 'profile'), {
    executablePath: '/usr/bin/chromium',
    headless: true,
    args: ['--headless', '--no-sandbox', '--disable-gpu', '--disable-quic', '--no-first-run', '--disable-background-networking', '--disable-component-update', '--disable-sync'],
  });
});

afterAll(async () => {
  await context?.close();
  if (dir) rmSync(dir, { recursive: true, force: true });
});

describe('backtest report in headless Chromium', () => {
  it('draws every chart and keeps hostile text inert', async () => {
    const html = renderBacktestReport([result], { generatedAt: new Date(Date.UTC(2024, 5, 1)) });
    const file = path.join(dir, 'report.html');
    writeFileSync(file, html);
    const page = await context.newPage();
    const errors: string[] = [];
    const requests: string[] = [];
    page.on('pageerror', (e) => errors.push(e.message));
    page.on('console', (m) => {
      if (m.type() === 'error' || m.type() === 'warning') errors.push(m.text());
    });
    page.on('request', (r) => {
      if (!r.url().startsWith('file:')) requests.push(r.url());
    });
    await page.goto(`file://${file}`);
    await page.waitForFunction(() => typeof (window as unknown as { radcastChartsDrawn?: number }).radcastChartsDrawn === 'number');
    const info = await page.evaluate(() => {
      const canvases = [...document.querySelectorAll('canvas')];
      const inked = canvases.map((c) => {
        const ctx = c.getContext('2d')!;
        const px = ctx.getImageData(0, 0, c.width, c.height).data;
        let n = 0;
        for (let i = 3; i < px.length; i += 4) if (px[i] > 0) n++;
        return { n, total: c.width * c.height };
      });
      return {
        drawn: (window as unknown as { radcastChartsDrawn: number }).radcastChartsDrawn,
        canvases: canvases.length,
        inked,
        pwned: (window as unknown as { __pwned?: number }).__pwned ?? null,
        images: document.querySelectorAll('img').length,
        scripts: document.querySelectorAll('script').length,
        heading: document.querySelector('h2')?.textContent ?? '',
        modelRow: document.querySelector('tr.model th')?.textContent ?? '',
      };
    });
    expect(errors).toEqual([]);
    expect(requests).toEqual([]);
    // 3 origin charts + error by lead + MASE per origin
    expect(info.canvases).toBe(5);
    expect(info.drawn).toBe(5);
    for (const c of info.inked) {
      // Axes, grid, lines and legend ink a few per cent of the canvas; a blank canvas has none.
      expect(c.n).toBeGreaterThan(0.01 * c.total);
    }
    expect(info.pwned).toBeNull();
    expect(info.images).toBe(0);
    expect(info.scripts).toBe(3);
    expect(info.heading).toBe(HOSTILE);
    expect(info.modelRow).toBe('RBF network');
    await page.close();
  });
});
