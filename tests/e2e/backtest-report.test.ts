/**
 * The backtest report in a real browser: Debian's chromium, headless, through playwright-core.
 * Checks that every chart is drawn (non-blank canvas pixels), that the page needs no network,
 * and that text from data and config cannot inject markup or script.
 */
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { mkdtempSync, readFileSync, rmSync, writeFileSync, existsSync } from 'node:fs';
import { execFile } from 'node:child_process';
import { promisify } from 'node:util';
import { fileURLToPath } from 'node:url';
import { tmpdir } from 'node:os';
import path from 'node:path';
import { backtest, type BacktestResult } from '../../src/evaluate/backtest.ts';
import { renderBacktestReport } from '../../src/evaluate/report.ts';
import { hourlySettings, syntheticHourly } from '../unit/forecast/fixtures.ts';
import { canvasInk, launchBrowser, openReport } from './browser.ts';

const root = path.resolve(path.dirname(fileURLToPath(import.meta.url)), '../..');
const run = promisify(execFile);

const HOSTILE = '<img src=x onerror="window.__pwned=1"></script><script>window.__pwned=2</script>&amp;';

let dir: string;
let browser: Awaited<ReturnType<typeof launchBrowser>>;
let result: BacktestResult;

beforeAll(async () => {
  dir = mkdtempSync(path.join(tmpdir(), 'radcast-report-'));
  const settings = hourlySettings({ series: HOSTILE, windowSteps: 24 * 14, fit: { nCentres: 8, restarts: 1 } });
  result = await backtest(syntheticHourly(24 * 30, 4, 1), {}, settings, { spanSteps: 24 * 5, everySteps: 24, workers: 0 });
  browser = await launchBrowser();
});

afterAll(async () => {
  await browser?.close();
  if (dir) rmSync(dir, { recursive: true, force: true });
});

describe('backtest report in headless Chromium', () => {
  it('draws every chart and keeps hostile text inert', async () => {
    const html = renderBacktestReport([result], { generatedAt: new Date(Date.UTC(2024, 5, 1)) });
    const file = path.join(dir, 'report.html');
    writeFileSync(file, html);
    const { page, errors, requests } = await openReport(browser.context, file);
    const ink = await canvasInk(page);
    const info = await page.evaluate(() => {
      return {
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
    expect(ink.canvases.length).toBe(5);
    expect(ink.drawn).toBe(5);
    // Axes, grid, lines and legend ink a few per cent of the canvas; a blank canvas has none.
    for (const c of ink.canvases) expect(c.share).toBeGreaterThan(0.01);
    expect(info.pwned).toBeNull();
    expect(info.images).toBe(0);
    expect(info.scripts).toBe(3);
    expect(info.heading).toBe(HOSTILE);
    expect(info.modelRow).toBe('RBF network');
    await page.close();
  });

  it('radcast backtest --json --report from the embedded store', { timeout: 300_000 }, async () => {
    const db = path.join(dir, 'cli.db');
    const cfg = path.join(dir, 'cli.yaml');
    writeFileSync(
      cfg,
      [
        'store: { kind: embedded, embedded: { path: cli.db } }',
        'state: { path: cli-state.db }',
        'defaults: { step: 1h, timeZone: Europe/Berlin, window: 3w, centres: 8, fit: { restarts: 1 }, backtest: { every: 1d, span: 3d } }',
        'series:',
        '  - name: oskaveld-outdoor-temp',
        '    calendar: { dayOfWeek: false }',
        '',
      ].join('\n'),
    );
    const bin = path.join(root, 'bin/radcast.mjs');
    await run(process.execPath, [bin, 'import', path.join(root, 'demo-data/oskaveld-outdoor-temp.csv'), '--series', 'oskaveld-outdoor-temp', '--config', cfg], { cwd: dir });
    expect(existsSync(db)).toBe(true);
    const report = path.join(dir, 'cli-report.html');
    const { stdout, stderr } = await run(process.execPath, [bin, 'backtest', '--config', cfg, '--json', '--report', report, '--workers', '0'], { cwd: dir });
    const doc = JSON.parse(stdout) as Record<string, any>;
    expect(doc.series).toBe('oskaveld-outdoor-temp');
    expect(doc.step).toBe('1h');
    expect(doc.season).toBe(24);
    expect(doc.horizon).toBe(24);
    expect(doc.origins).toBe(3);
    for (const k of ['mae', 'rmse', 'mase', 'bias', 'coverage']) expect(Number.isFinite(doc.model[k])).toBe(true);
    expect(Object.keys(doc.baselines).sort()).toEqual(['ridge-ar', 'seasonal-naive-daily', 'seasonal-naive-weekly']);
    expect(stderr).toContain('wrote the backtest report');
    // Not a terminal: no progress bar drawn into the captured stderr.
    expect(stderr).not.toMatch(/origins, .* left/);
    const opened = await openReport(browser.context, report);
    const drawn = await canvasInk(opened.page);
    await opened.page.close();
    expect(opened.errors).toEqual([]);
    expect(drawn.drawn).toBe(5);
    for (const c of drawn.canvases) expect(c.share).toBeGreaterThan(0.01);
    expect(readFileSync(report, 'utf8')).toContain('oskaveld-outdoor-temp');
    // The table form of the same run.
    const table = await run(process.execPath, [bin, 'backtest', '--config', cfg, '--workers', '0', '--span', '2d'], { cwd: dir });
    expect(table.stdout).toMatch(/^oskaveld-outdoor-temp: 2 origins every 1d/);
    expect(table.stdout).toMatch(/\n  rbf +\d/);
    expect(table.stdout).toContain('MASE by lead');
  });
});
