/**
 * The tune report in a real browser (Debian's chromium, headless, through playwright-core): the
 * heatmap and the two line charts are drawn (non-blank canvases), the page needs no network, and
 * a hostile series name stays inert text.
 */
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { mkdtempSync, rmSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import path from 'node:path';
import { parseConfigText } from '../../src/config/load.ts';
import { buildCandidates, gridFor } from '../../src/evaluate/tune-grid.ts';
import { tune, type TuneResult } from '../../src/evaluate/tune.ts';
import { heatmapCells, renderTuneReport } from '../../src/evaluate/tune-report.ts';
import { knownRbfConfig, knownRbfSeries } from '../unit/evaluate/tune-fixtures.ts';
import { canvasInk, launchBrowser, openReport } from './browser.ts';

const HOSTILE = '<img src=x onerror="window.__pwned=1"></script><script>window.__pwned=2</script>';

let dir: string;
let browser: Awaited<ReturnType<typeof launchBrowser>>;
let result: TuneResult;

beforeAll(async () => {
  dir = mkdtempSync(path.join(tmpdir(), 'radcast-tune-report-'));
  const loaded = parseConfigText(knownRbfConfig({ tune: '{ windows: [120, 200], centres: [2, 4, 8], widthModes: [shared] }', backtest: '{ every: 8, span: 40 }' }));
  if (!loaded.ok) throw new Error(JSON.stringify(loaded.issues));
  const { candidates } = buildCandidates(loaded.value.config, 0, gridFor(loaded.value.config.series[0]), { seed: 2 });
  const { target, drive } = knownRbfSeries(24 * 10);
  result = await tune(target, { drive }, candidates, { spanSteps: 40, everySteps: 8, threads: 0, originWorkers: 0, seed: 2 });
  result = { ...result, series: HOSTILE };
  browser = await launchBrowser();
}, 120_000);

afterAll(async () => {
  await browser?.close();
  if (dir) rmSync(dir, { recursive: true, force: true });
});

describe('tune report in headless Chromium', () => {
  it('draws the heatmap and the charts, loads nothing and keeps hostile text inert', async () => {
    const html = renderTuneReport(result, { generatedAt: new Date(Date.UTC(2026, 0, 1)), snippet: 'window: 200\ncentres: 4\n' });
    const file = path.join(dir, 'tune.html');
    writeFileSync(file, html);
    const { page, errors, requests } = await openReport(browser.context, file);
    const ink = await canvasInk(page);
    const info = await page.evaluate(() => {
      return {
        pwned: (window as unknown as { __pwned?: number }).__pwned ?? null,
        images: document.querySelectorAll('img').length,
        heading: document.querySelector('h2')?.textContent ?? '',
        rows: document.querySelectorAll('table.ranking tbody tr').length,
        heatCells: [...document.querySelectorAll('table.heat tbody td')].map((td) => td.textContent),
      };
    });
    expect(errors).toEqual([]);
    expect(requests).toEqual([]);
    expect(ink.canvases.map((c) => c.id)).toEqual(['heatmap', 'lead', 'origins']);
    expect(ink.drawn).toBe(3);
    // The heatmap fills most of its canvas with cells; line charts ink a few per cent.
    expect(ink.canvases[0].share).toBeGreaterThan(0.3);
    for (const c of ink.canvases.slice(1)) expect(c.share).toBeGreaterThan(0.01);
    expect(info.pwned).toBeNull();
    expect(info.images).toBe(0);
    expect(info.heading).toBe(HOSTILE);
    expect(info.rows).toBe(6);
    // The page's numbers table is the heatmap's data: best MASE per (window, K).
    const hm = heatmapCells(result);
    expect(info.heatCells).toEqual(hm.cells.flat().map((c) => (c ? c.mase.toFixed(3) : 'not run')));
    await page.close();
  }, 60_000);
});
